"""Building and writing a report folder: figures, report.html, report.md, results.json and the
files the targets produce (see :mod:`convert.report`)."""

from __future__ import annotations

from pathlib import Path
from convert.jsonable import to_jsonable
from convert.report.documents import html_report, markdown_report
from convert.report.canvas import Painter, draw_figures
from convert.report.figures import figure_jobs, schematic_figure_name
from convert.report.results import results_dict
from convert.report.evidence import evidence_jobs
from convert.report.folder import check_destination, write_folder


def build_report(results, painter: Painter | None = None) -> dict[str, bytes | str]:
    """Every file of the report folder: relative path -> content. The figures are drawn by
    ``painter`` (a drawing process started before the results existed, see :class:`Painter`)
    when one is given, while this process writes results.json and report.md; else here and in a
    helper process (:func:`draw_figures`)."""
    import json

    jobs = figure_jobs(results) + evidence_jobs(results)
    pending = painter.start(jobs) if painter is not None else None
    files: dict[str, bytes | str] = {
        "report.html": "",
        "report.md": markdown_report(results, [name for name, *_ in jobs]),
        "results.json": json.dumps(to_jsonable(results_dict(results)), indent=2) + "\n",
    }
    figures = pending.result() if pending is not None else draw_figures(jobs)
    files["report.html"] = html_report(results, figures)
    for name, data in figures.items():
        files[f"figures/{name}"] = data
    for r in results.realizations:
        for name, content in r.files.items():
            # a schematic is described by the computation and drawn once, with the figures
            files[name] = figures[schematic_figure_name(r)] if name == "schematic.png" else content
    return files


def write_report(results, out_dir: str | Path, *, force: bool = False, painter: Painter | None = None) -> Path:
    """Build and write the report folder for ``results``; refuses to overwrite without ``force``.
    ``painter``: a :class:`Painter` started earlier to draw the figures (optional)."""
    case = results.case
    protected = [case.path] + [p for p in [case.source.data.get("file")] if p]
    check_destination(Path(out_dir), force=force, protected=protected)
    return write_folder(Path(out_dir), build_report(results, painter), force=force, protected=protected)
