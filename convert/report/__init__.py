"""Report writers: figures (matplotlib Agg), HTML, Markdown and results.json.

The only package that imports matplotlib. :func:`build_report` turns evaluated results into
the files of a report folder; :func:`write_report` writes them atomically.
"""

from __future__ import annotations

from pathlib import Path
from convert.jsonable import to_jsonable
from convert.report.documents import html_report, markdown_report
from convert.report.figures import all_figures, schematic_figure_name
from convert.report.results import results_dict
from convert.report.evidence import evidence_figures
from convert.report.folder import check_destination, write_folder


def build_report(results) -> dict[str, bytes | str]:
    """Every file of the report folder: relative path -> content."""
    import json

    figures = all_figures(results)

    figures.update(evidence_figures(results))
    files: dict[str, bytes | str] = {
        "report.html": html_report(results, figures),
        "report.md": markdown_report(results, list(figures)),
        "results.json": json.dumps(to_jsonable(results_dict(results)), indent=2) + "\n",
    }
    for name, data in figures.items():
        files[f"figures/{name}"] = data
    for r in results.realizations:
        for name, content in r.files.items():
            # a schematic is described by the computation and drawn once, with the figures
            files[name] = figures[schematic_figure_name(r)] if name == "schematic.png" else content
    return files


def write_report(results, out_dir: str | Path, *, force: bool = False) -> Path:
    """Build and write the report folder for ``results``; refuses to overwrite without ``force``."""
    case = results.case
    protected = [case.path] + [p for p in [case.source.data.get("file")] if p]
    check_destination(Path(out_dir), force=force, protected=protected)
    return write_folder(Path(out_dir), build_report(results), force=force, protected=protected)
