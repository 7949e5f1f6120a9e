"""The floor of the report: only numpy and matplotlib, drawing and embedding the same figures.

``python bench/floor.py RECORDING OUT_DIR`` reads a recording of a report's figures (made by
``bench/report.py``: every matplotlib figure the report saved, as matplotlib's own pickle of the
figure object, plus the schematic PNGs the circuit step drew with schemdraw, which the floor
embeds as they are), then, like the report, renders each figure to PNG with the Agg canvas,
writes the PNG files and one HTML page with every figure embedded as base64. It imports nothing
of loopshift (it checks), so its time is the cost of the imports plus drawing the same figures:
what any program producing this report must at least spend. Restoring the figure objects from
their pickle is no dearer than building them with ``plot`` calls, so this is a floor, not an
estimate.
"""

from __future__ import annotations

import base64
import io
import pickle
import sys
from pathlib import Path


def main(recording: str, out_dir: str) -> int:
    import matplotlib
    import numpy  # noqa: F401  (the report's other import)

    matplotlib.use("Agg")
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    with open(recording, "rb") as fh:
        figures, schematics = pickle.load(fh)
    out = Path(out_dir)
    (out / "figures").mkdir(parents=True, exist_ok=True)
    parts = []
    for name, blob, args, kwargs in figures:
        fig = pickle.loads(blob)
        FigureCanvasAgg(fig)
        buf = io.BytesIO()
        fig.savefig(buf, *args, **kwargs)  # the report's own savefig arguments
        parts.append((name, buf.getvalue()))
    parts += schematics
    html = ["<!doctype html><html><head><meta charset='utf-8'><title>floor</title></head><body>"]
    for name, png in parts:
        (out / "figures" / name).write_bytes(png)
        html.append(
            f'<figure><img alt="{name}" src="data:image/png;base64,{base64.b64encode(png).decode()}">'
            f"<figcaption>{name}</figcaption></figure>"
        )
    html.append("</body></html>")
    (out / "floor.html").write_text("\n".join(html), encoding="utf-8")
    if any(m == "convert" or m.startswith("convert.") for m in sys.modules):
        raise SystemExit("floor: loopshift was imported; the floor must not use it")
    return 0


if __name__ == "__main__":
    sys.exit(main(*sys.argv[1:]))
