"""``loopshift report CASE``: run every conversion a case file asks for and write a report folder.

Exit codes: 0 every criterion passes, 1 a criterion fails, 2 bad input (the case file, an
option, an existing report folder without --force).
"""

from __future__ import annotations

import argparse

HELP = "run a case file: convert, compare, check the loop, write the report folder"

EPILOG = """\
examples:
  loopshift report cases/pi_card_to_firmware.toml
  loopshift report cases/pi_card_to_firmware.toml --out reports/pi-swap --force
  loopshift report cases/firmware_pid_to_opamp.toml --draws 500

The report folder holds report.html (self-contained), report.md with figures/ beside it,
results.json, and the files the targets produce (BOM, netlist, schematic). It is written to
a temporary folder first and renamed into place. It carries a marker file, .loopshift-report,
listing what loopshift wrote; --force replaces only an empty folder or an earlier report that
holds nothing else (never a folder of your own files). Exit code 0 pass, 1 fail, 2 bad input.

The tool computes; it does not certify. Verify on a bench or in simulation before a live swap."""


def add_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser(
        "report", help=HELP, description=HELP + ".", epilog=EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    p.add_argument(
        "case", metavar="CASE", help="the case file (TOML), e.g. cases/pi_card_to_firmware.toml; see docs/case-files.md"
    )
    p.add_argument(
        "--out",
        metavar="DIR",
        help="report folder to write (default: reports/<case name> in the current folder), e.g. --out reports/pump-7",
    )
    p.add_argument(
        "--force",
        action="store_true",
        help="replace the report folder if it is an earlier report "
        "or empty (default: refuse, so an earlier report is never "
        "lost; a folder of other files is always refused), "
        "e.g. --out reports/pump-7 --force",
    )
    p.add_argument(
        "--draws",
        metavar="N",
        type=_positive_int,
        help="Monte Carlo draws for a circuit target, overriding the case file (200 to 1,000,000), e.g. --draws 10000",
    )
    return p


def _positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number of draws, found {text!r}") from None
    from convert.cli.circuit import MAX_DRAWS

    from convert.circuit.tolerance import MIN_DRAWS, draws_problem

    if value > MAX_DRAWS or draws_problem(value):
        raise argparse.ArgumentTypeError(
            f"expected {MIN_DRAWS} to {MAX_DRAWS:,} draws, found {text!r}"
            + (
                ""
                if value > MAX_DRAWS
                else ": the 99th percentile and the 0.5-99.5 % envelope reported need "
                f"{MIN_DRAWS} for a draw to lie beyond each"
            )
        )
    return value


def run(args, console) -> int:
    from convert.report.canvas import Painter

    # the drawing process starts now: it imports matplotlib while this one reads and computes
    with Painter() as painter:
        return _run(args, console, painter)


def _run(args, console, painter) -> int:
    from pathlib import Path

    from convert.case import load_case
    from convert.compare.evaluate import planned_steps
    from convert.pipeline import run_pipeline
    from convert.report import write_report
    from convert.report.folder import check_destination

    case = load_case(args.case)
    out_dir = Path(args.out) if args.out else Path("reports") / case.name
    protected = [case.path] + [p for p in [case.source.data.get("file")] if p]
    dest = check_destination(out_dir, force=args.force, protected=protected)  # fail before the long work
    _check_writable(out_dir, explicit=bool(args.out))
    if dest.note:
        console.print(f"note: {dest.note}", markup=False, highlight=False, soft_wrap=True)
        out_dir = dest.path

    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

    with Progress(
        TextColumn("{task.description}", markup=False),
        BarColumn(),
        TimeElapsedColumn(),
        console=console,
        transient=True,
        disable=not console.is_terminal,
    ) as progress:
        task = progress.add_task(f"evaluating {case.name}", total=planned_steps(case) + 1)

        def tick(text: str) -> None:
            progress.update(task, advance=1, description=text)

        results = run_pipeline(case, draws=args.draws, progress=tick).results
        progress.update(task, description="writing the report")
        try:
            folder = write_report(results, out_dir, force=args.force, painter=painter)
        except OSError as exc:
            from convert.errors import InputError

            raise InputError(
                f"cannot write the report folder {str(out_dir)!r}: {exc.strerror or exc}", key="--out"
            ) from None
        progress.update(task, advance=1)
    try:
        _summary(console, results, folder)
    except BrokenPipeError as exc:  # output cut short (| head): the verdict still decides the exit code
        exc.exit_code = results.exit_code
        raise
    return results.exit_code


def _check_writable(out_dir, *, explicit: bool) -> None:
    """Refuse, before the long work, a report folder that cannot be created.

    A folder named with --out must sit in a folder that exists (a typo should not scatter new
    folders); the default ``reports/<case>`` may create ``reports/``.
    """
    import os
    import tempfile

    from convert.errors import InputError

    parent = out_dir.absolute().parent
    if not parent.is_dir():
        if explicit:
            where = str(out_dir.parent)
            raise InputError(
                f"the folder {where!r} does not exist (or is not a folder); create it first or choose another place",
                key="--out",
            )
        while not parent.is_dir():
            parent = parent.parent
    try:
        os.rmdir(tempfile.mkdtemp(prefix=".loopshift-check-", dir=parent))
    except OSError as exc:
        raise InputError(f"cannot write in the folder {str(parent)!r} ({exc.strerror or exc})", key="--out") from None


def _summary(console, results, folder) -> None:
    from rich import box
    from rich.markup import escape
    from rich.panel import Panel
    from rich.table import Table

    from convert.cli.common import fit_columns, styled
    from convert.compare.evaluate import CAUTIONS
    from convert.report.tables import all_tables, figure_against_limit, firmware_notes, parsed_table

    case = results.case
    verdict = results.verdict.overall
    style = "bold green" if verdict == "pass" else "bold red"
    console.print(styled(f"[bold]{escape(case.title)}[/bold]  ({escape(str(case.path))})"))
    for alarm in results.alarms:
        console.print(styled(f"[bold red]WARNING: {escape(alarm)}[/bold red]"))
    parsed = parsed_table(results)
    for title, header, rows in ([parsed] if parsed else []) + all_tables(results):
        if title.startswith("New forms"):
            continue
        # No side borders and one space of padding: at 80 columns the width goes to the words.
        table = Table(
            title=styled(escape(title)),
            title_justify="left",
            box=box.SIMPLE_HEAD,
            show_edge=False,
            pad_edge=False,
            padding=(0, 1, 0, 0),
        )
        keep = [i for i, h in enumerate(header) if h not in ("what was switched on", "note", "scanned")]
        # the report folder lists the rows that do not apply; the terminal keeps to what applies
        rows = [row for row in rows if not (len(row) > 1 and row[1] == "not applicable")]
        widths, head, cells_text = fit_columns(
            [header[i] for i in keep], [[str(r[i]) for i in keep] for r in rows], console.width
        )
        for text, w in zip(head, widths):
            table.add_column(styled(escape(text)), width=w, no_wrap=True)
        for row in cells_text:
            cells = []
            for c in row:
                if c == "FAIL":
                    c = "[bold red]FAIL[/bold red]"
                elif c == "pass":
                    c = "[green]pass[/green]"
                else:
                    c = escape(str(c))
                cells.append(styled(c))
            table.add_row(*cells)
        console.print(table)
    for note in results.source.notes:
        if note.startswith("source.digital:"):  # how printed coefficients were read: said where it is seen
            console.print(styled(f"[yellow]note:[/yellow] {escape(note)}"))
    _new_forms(console, results, folder)
    for s in results.skipped:
        console.print(styled(f"[yellow]skipped:[/yellow] {escape(str(s))}"))
    for r in results.realizations:
        for w in r.warnings:
            console.print(styled(f"[yellow]warning ({escape(r.name)}):[/yellow] {escape(str(w))}"))
        for n in firmware_notes(r, assumptions=False):  # findings, e.g. a coarse derivative word
            console.print(styled(f"[yellow]note ({escape(r.name)}):[/yellow] {escape(str(n))}"))
    console.print(Panel("\n".join(CAUTIONS), title="cautions", border_style="yellow"))
    failures = results.verdict.failures
    if failures:
        for j in failures:
            if j.value is None or j.limit is None:  # closed-loop stability: the warning above has the rest
                text = f"{j.realization}: {j.label}: {j.note.split(': ')[0]}"
            elif j.value == float("inf") and j.note:  # a root on the axis inside the band
                text = f"{j.realization}: {j.label} {j.note}"
            else:
                text = figure_against_limit(j)
            console.print(styled(f"[red]fails:[/red] {escape(text)}"))
    if results.verdict.unchecked_reason:
        console.print(styled(f"[red]unchecked:[/red] {escape(results.verdict.unchecked_reason)}"))
    console.print(styled(f"verdict: [{style}]{verdict.upper()}[/{style}]   report: {escape(str(folder))}/report.html"))


def _new_forms(console, results, folder) -> None:
    """The new forms as built: coefficients (b, a) or parts, and the files written beside the
    report, so the terminal says what to load into the firmware or build, and where it is."""
    from rich.markup import escape

    from convert.cli.common import styled
    from convert.report.tables import realization_table

    _, _, rows = realization_table(results)
    if not rows:
        return
    console.print(styled("[bold]New forms[/bold] (full precision in results.json)"))
    for realization, (name, _kind, what, _warnings) in zip(results.realizations, rows):
        files = ", ".join(sorted(realization.files))
        where = f"; files {files} in {folder}" if files else ""
        console.print(styled(f"  {escape(name)}: {escape(what)}{escape(where)}"))
