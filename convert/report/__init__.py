"""Report writers: figures (matplotlib Agg), HTML, Markdown and results.json.

The only package that imports matplotlib. :func:`build_report` turns evaluated results into
the files of a report folder; :func:`write_report` writes them atomically.
"""

from __future__ import annotations

from typing import Any

# Loaded on first use, so that the drawing process of ``loopshift report``
# (convert.report.canvas.Painter) can be started before the computation is imported.
_LAZY = {"build_report": "convert.report.writing", "write_report": "convert.report.writing"}


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        import importlib

        return getattr(importlib.import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'convert.report' has no attribute {name!r}")
