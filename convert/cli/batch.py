"""``loopshift batch CASES...``: run many case files as one job, in parallel.

Exit codes: the worst case's: 0 every case passes, 1 a case fails or is unchecked (a criterion
it sets could not be checked), 2 a case (or an option)
could not be read, 3 an internal error in a case.
"""

from __future__ import annotations

import argparse

HELP = "run many case files in parallel: one report each, a summary table and index.html"

EPILOG = """\
examples:
  loopshift batch cases/
  loopshift batch site/unit-3/*.toml --workers 2 --out reports/unit-3
  loopshift batch cases/ --out reports/nightly --force
  loopshift batch cases/ --scheduler tcp://10.0.0.5:8786     (an existing Dask cluster)
  loopshift batch cases/ --scheduler local --workers 2       (a Dask cluster on this machine)

Each case gets its own report folder under --out (named after the case file), written as
`loopshift report` writes it; index.html and batch.json in --out list every case with its
verdict, the criterion closest to its limit, the reason of a failure and the time taken. A case
that cannot be read or that fails never stops the others. Verdicts: PASS, FAIL, UNCHECKED (a
criterion the case sets could not be checked: never a pass), UNREADABLE, ERROR. Exit code: 0 all
pass, 1 any fails or is unchecked, 2 any could not be read, 3 an internal error in any case.

The tool computes; it does not certify. Verify on a bench or in simulation before a live swap."""

MAX_WORKERS = 256


def add_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser(
        "batch", help=HELP, description=HELP + ".", epilog=EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    p.add_argument(
        "cases",
        metavar="CASES",
        nargs="+",
        help="case files (TOML) or folders of them (their *.toml files), e.g. cases/ or a.toml b.toml",
    )
    p.add_argument(
        "--out",
        metavar="DIR",
        default=None,
        help="folder for the reports, index.html and batch.json (default: reports/batch), e.g. --out reports/unit-3",
    )
    p.add_argument(
        "--force",
        action="store_true",
        help="replace the reports of an earlier batch in --out (default: refuse), e.g. --force",
    )
    p.add_argument(
        "--workers",
        metavar="N",
        type=_workers,
        help="cases run at once (default: the number of cores, at most the number of cases), e.g. --workers 2",
    )
    p.add_argument(
        "--scheduler",
        metavar="ADDRESS",
        help="run on a Dask distributed cluster at ADDRESS, or 'local' for one on this machine "
        "(needs the [cluster] extra: pip install 'loopshift[cluster]'), "
        "e.g. --scheduler tcp://10.0.0.5:8786",
    )
    p.add_argument(
        "--draws",
        metavar="N",
        type=_draws,
        help="Monte Carlo draws for every circuit target, overriding the case files, e.g. --draws 2000",
    )
    p.add_argument(
        "--json",
        action="store_true",
        help="print batch.json to standard output instead of the table, e.g. loopshift batch cases/ --json",
    )
    return p


def _workers(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number of workers, found {text!r}") from None
    if not 1 <= value <= MAX_WORKERS:
        raise argparse.ArgumentTypeError(f"expected 1 to {MAX_WORKERS} workers, found {text!r}")
    return value


def _draws(text: str) -> int:
    from convert.cli.report import _positive_int

    return _positive_int(text)


def run(args, console) -> int:
    import os
    from contextlib import ExitStack
    from pathlib import Path

    from rich.markup import escape
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

    from convert.cli.common import emit_json, write_text_atomic
    from convert.report import batch

    files = batch.find_case_files(args.cases)
    out_dir = Path(args.out) if args.out else Path("reports") / "batch"
    _check_out_dir(out_dir, force=args.force)
    workers = args.workers or max(1, min(os.cpu_count() or 1, len(files)))

    with ExitStack() as stack:
        executor = stack.enter_context(_executor(args.scheduler, workers, len(files)))
        progress = stack.enter_context(
            Progress(
                TextColumn("{task.description}", markup=False),
                BarColumn(),
                MofNCompleteColumn(),
                TimeElapsedColumn(),
                console=console,
                transient=True,
                disable=not console.is_terminal,
            )
        )
        task = progress.add_task(f"{len(files)} cases on {workers} worker(s)", total=len(files))

        def tick(outcome) -> None:
            progress.update(task, advance=1, description=f"{outcome.name}: {outcome.status}")

        result = batch.run_batch(files, out_dir, executor=executor, force=args.force, draws=args.draws, progress=tick)
    write_text_atomic(str(out_dir / batch.INDEX_NAME), batch.index_html(result))
    summary = batch.summary_json(result)
    write_text_atomic(str(out_dir / batch.SUMMARY_NAME), summary)
    if args.json:
        import json

        try:
            emit_json(console, json.loads(summary))
        except BrokenPipeError as exc:  # output cut short (| head): the verdicts still decide the exit code
            exc.exit_code = result.exit_code
            raise
        return result.exit_code
    try:
        _print_summary(console, result, escape)
    except BrokenPipeError as exc:
        exc.exit_code = result.exit_code
        raise
    return result.exit_code


def _check_out_dir(out_dir, *, force: bool) -> None:
    """The batch folder is absent, empty, or an earlier batch (with --force): never a folder of
    the user's own files."""
    from convert.errors import InputError
    from convert.report import batch

    if not out_dir.exists():
        if not out_dir.absolute().parent.is_dir():
            raise InputError(
                f"the folder {str(out_dir.parent)!r} does not exist; create it first or choose another place",
                key="--out",
            )
        return
    if not out_dir.is_dir():
        raise InputError(f"{str(out_dir)!r} exists and is not a folder; choose a folder name", key="--out")
    if not any(out_dir.iterdir()):
        return
    if not (out_dir / batch.SUMMARY_NAME).is_file():
        raise InputError(
            f"the folder {str(out_dir)!r} holds files that are not an earlier batch; choose an empty or new folder",
            key="--out",
        )
    if not force:
        raise InputError(
            f"the folder {str(out_dir)!r} holds an earlier batch; rerun with --force to replace its "
            "reports, or choose another folder",
            key="--out",
        )


def _executor(scheduler: str | None, workers: int, cases: int):
    """A context manager giving the executor: in-process for one worker and one case, a process
    pool, or a Dask distributed client's executor."""
    from contextlib import contextmanager

    from convert.errors import InputError
    from convert.report import batch

    @contextmanager
    def serial():
        yield batch.SerialExecutor()

    @contextmanager
    def pool():
        with batch.process_pool(workers) as executor:
            yield executor

    @contextmanager
    def dask():
        try:
            from distributed import Client, LocalCluster
        except ImportError:
            raise InputError(
                "--scheduler needs Dask distributed; install it with pip install 'loopshift[cluster]'",
                key="--scheduler",
            ) from None
        if scheduler == "local":
            # ":0": any free port for the status page (None still binds 8787, which another cluster may hold)
            with (
                LocalCluster(
                    n_workers=workers, threads_per_worker=1, processes=True, dashboard_address=":0"
                ) as cluster,
                Client(cluster) as client,
            ):
                yield client.get_executor()
        else:
            try:
                client = Client(scheduler, timeout="10s")
            except (OSError, TimeoutError, ValueError) as exc:
                raise InputError(
                    f"cannot reach the Dask scheduler at {scheduler!r} ({exc})", key="--scheduler"
                ) from None
            with client:
                yield client.get_executor()

    if scheduler:
        return dask()
    if workers == 1 or cases == 1:
        return serial()
    return pool()


def _print_summary(console, result, escape) -> None:
    from rich import box
    from rich.table import Table

    from convert.cli.common import fit_columns, styled
    from convert.report.batch import format_worst

    table = Table(box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False, padding=(0, 1, 0, 0))
    header = ["case", "verdict", "closest to its limit", "time"]
    rows = [[o.name, o.status.upper(), format_worst(o), f"{o.seconds:.1f} s"] for o in result.outcomes]
    widths, head, cells = fit_columns(header, rows, console.width)  # never breaks a word
    for text, w, justify in zip(head, widths, ("left", "left", "left", "right")):
        table.add_column(styled(escape(text)), width=w, no_wrap=True, justify=justify)
    styles = {
        "pass": "green",
        "unchecked": "bold yellow",
        "fail": "bold red",
        "unreadable": "bold red",
        "error": "bold red",
    }
    for o, row in zip(result.outcomes, cells):
        verdict = f"[{styles[o.status]}]{row[1]}[/{styles[o.status]}]"
        table.add_row(styled(escape(row[0])), styled(verdict), styled(escape(row[2])), row[3])
    console.print(table)
    for o in result.outcomes:
        if o.status != "pass":
            console.print(styled(f"[red]{escape(o.name)}:[/red] {escape(o.message)}"), soft_wrap=True)
    counts = ", ".join(f"{n} {s}" for s, n in result.counts().items() if n)
    console.print(
        styled(
            f"{len(result.outcomes)} cases in {result.seconds:.1f} s: {escape(counts)}   "
            f"index: {escape(str(result.out_dir))}/index.html"
        )
    )
    console.print(
        "The tool computes; it does not certify: each report is evidence for a qualified person's "
        "decision before a live swap.",
        soft_wrap=True,
    )
