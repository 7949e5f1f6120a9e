"""Run many case files as one job: one report folder per case, a summary, and ``index.html``.

The runner takes any :class:`concurrent.futures.Executor` (a process pool on this machine, or
the executor of a Dask distributed client for a cluster); each case runs in
:func:`run_case`, a top-level function of plain arguments that returns a plain
:class:`CaseOutcome`, so it pickles to any worker. A case that cannot be read, or that fails,
never stops the others: its reason is in its outcome.

Statuses: ``"pass"``, ``"fail"`` (a criterion fails), ``"unchecked"`` (nothing failed, but a
criterion the case sets could not be checked: the report's own UNCHECKED verdict, never a pass),
``"unreadable"`` (bad input: the case file,
its netlist, an existing report folder without ``force``; the one-line error is kept) and
``"error"`` (an internal error; please report it). The batch exit code is the worst of its
cases: 0 all pass, 1 any fails or is unchecked (as ``loopshift report`` exits for that case),
2 any unreadable, 3 any internal error.
"""

from __future__ import annotations

import html
import os
import time
from collections.abc import Callable, Sequence
from concurrent.futures import Executor, as_completed
from dataclasses import dataclass, field
from pathlib import Path

from convert.errors import InputError
from convert.jsonable import to_jsonable
from convert.case import load_case
from convert.pipeline import run_pipeline
from convert.report import write_report
from convert import sidework

STATUS_EXIT_CODE = {"pass": 0, "fail": 1, "unchecked": 1, "unreadable": 2, "error": 3}
INDEX_NAME = "index.html"
SUMMARY_NAME = "batch.json"


@dataclass(frozen=True)
class CaseOutcome:
    """What one case gave. ``worst_*``: the checked criterion closest to (or furthest past) its
    limit, as ``value / limit`` (``worst_ratio`` < 1 passes, > 1 fails); ``seconds`` is the wall
    time of this case on its worker; ``report`` is the report folder (absent unless written)."""

    case_file: str
    name: str
    status: str
    message: str = ""
    worst_label: str = ""
    worst_realization: str = ""
    worst_value: float | None = None
    worst_limit: float | None = None
    worst_unit: str = ""
    worst_ratio: float | None = None
    checked: int = 0
    seconds: float = 0.0
    report: str | None = None

    @property
    def exit_code(self) -> int:
        return STATUS_EXIT_CODE[self.status]

    def as_dict(self) -> dict:
        return {**self.__dict__, "exit_code": self.exit_code}


@dataclass(frozen=True)
class BatchResult:
    """Outcomes in the order the case files were given."""

    outcomes: tuple[CaseOutcome, ...]
    out_dir: str
    seconds: float
    workers: int | None = None
    notes: tuple[str, ...] = field(default_factory=tuple)

    @property
    def exit_code(self) -> int:
        return max((o.exit_code for o in self.outcomes), default=0)

    def counts(self) -> dict[str, int]:
        out = {s: 0 for s in STATUS_EXIT_CODE}
        for o in self.outcomes:
            out[o.status] += 1
        return out


def find_case_files(inputs: Sequence[str | Path]) -> list[Path]:
    """Case files named by ``inputs``: a file as given; a folder gives its ``*.toml`` files
    (not its sub-folders), sorted by name. Duplicates (the same file twice) are kept once.

    Raises :class:`InputError` for a path that does not exist or a folder with no case file.
    """
    found: list[Path] = []
    seen: set[Path] = set()
    for item in inputs:
        path = Path(item)
        if path.is_dir():
            files = sorted(p for p in path.glob("*.toml") if p.is_file())
            if not files:
                raise InputError(f"the folder {str(path)!r} holds no case file (*.toml)", key="cases")
        elif path.exists():
            files = [path]
        else:
            raise InputError(f"no such case file or folder: {str(path)!r}", key="cases")
        for f in files:
            resolved = f.resolve()
            if resolved not in seen:
                seen.add(resolved)
                found.append(f)
    if not found:
        raise InputError("give at least one case file or folder", key="cases")
    return found


def report_folder_names(case_files: Sequence[Path]) -> list[str]:
    """One report folder name per case file: the file's stem, with ``-2``, ``-3``... added where
    two files in different folders share a stem (so no report overwrites another)."""
    names: list[str] = []
    used: set[str] = set()
    for f in case_files:
        base = f.stem
        name, k = base, 1
        while name in used:
            k += 1
            name = f"{base}-{k}"
        used.add(name)
        names.append(name)
    return names


def run_case(case_file: str, out_dir: str, *, force: bool = False, draws: int | None = None) -> CaseOutcome:
    """Evaluate one case file and write its report folder to ``out_dir``; never raises for a
    problem of this case (the outcome carries it)."""
    start = time.perf_counter()
    name = Path(case_file).stem
    try:
        case = load_case(case_file)
        name = case.name
        with sidework.alone():  # the batch's workers keep the cores busy: no helper process per case
            results = run_pipeline(case, draws=draws).results
            folder = write_report(results, Path(out_dir), force=force)
        worst = _worst_judgement(results.verdict.judgements)
        checked = sum(1 for j in results.verdict.judgements if j.status in ("pass", "fail"))
        status = _status(results)
        extra = {}
        if worst is not None:
            extra = dict(
                worst_label=worst.label,
                worst_realization=worst.realization,
                worst_value=worst.value,
                worst_limit=worst.limit,
                worst_unit=worst.unit,
                worst_ratio=_ratio(worst),
            )
        message = {"pass": "", "unchecked": _unchecked_message(results)}.get(status) or _fail_message(results)
        return CaseOutcome(
            case_file=str(case_file),
            name=name,
            status=status,
            message=message,
            checked=checked,
            seconds=time.perf_counter() - start,
            report=str(folder),
            **extra,
        )
    except InputError as exc:
        return CaseOutcome(
            case_file=str(case_file),
            name=name,
            status="unreadable",
            message=exc.one_line(),
            seconds=time.perf_counter() - start,
        )
    except OSError as exc:
        where = exc.filename if exc.filename is not None else case_file
        return CaseOutcome(
            case_file=str(case_file),
            name=name,
            status="unreadable",
            message=f"{where}: {exc.strerror or exc}",
            seconds=time.perf_counter() - start,
        )
    except MemoryError:
        return CaseOutcome(
            case_file=str(case_file),
            name=name,
            status="error",
            message="not enough memory for this case",
            seconds=time.perf_counter() - start,
        )
    except Exception as exc:  # an internal error in one case must not stop the batch
        text = " ".join(f"internal error ({type(exc).__name__}): {exc}".split())
        return CaseOutcome(
            case_file=str(case_file), name=name, status="error", message=text[:300], seconds=time.perf_counter() - start
        )


def _ratio(judgement) -> float | None:
    if judgement.value is None or judgement.limit is None:
        return None
    if judgement.limit == 0:
        return 0.0 if judgement.value == 0 else float("inf")
    return float(judgement.value) / float(judgement.limit)


def _worst_judgement(judgements):
    """The checked criterion with the largest value/limit (a failure first)."""
    checked = [j for j in judgements if j.status in ("pass", "fail")]
    if not checked:
        return None
    return max(checked, key=lambda j: (j.status == "fail", _ratio(j) if _ratio(j) is not None else -1.0))


def _status(results) -> str:
    """The case's batch status from its verdict: "pass", "unchecked" or "fail" (any other
    non-zero exit is a failure: never a pass)."""
    if results.exit_code == 0:
        return "pass"
    return "unchecked" if results.verdict.overall == "unchecked" else "fail"


def _unchecked_message(results) -> str:
    """Why the case could not pass: the verdict's own reason, on one line."""
    reason = " ".join(results.verdict.unchecked_reason.split())
    return f"not checked: {reason}" if reason else "verdict UNCHECKED; see the report"


def _fail_message(results) -> str:
    failures = results.verdict.failures
    if not failures:  # failed for a reason that is not a criterion figure (e.g. nothing checked)
        return "verdict FAIL; see the report"
    j = failures[0]
    more = f" (and {len(failures) - 1} more)" if len(failures) > 1 else ""
    if j.value is None or j.limit is None:  # a fail with no figure, e.g. the closed loop is unstable
        note = " ".join(j.note.split()).split(": ")[0]
        detail = f" ({note})" if note else ""
        return f"{j.realization}: {j.label} fails{detail}{more}"
    if j.value == float("inf") and j.note:  # a root on the axis inside the band: the note says where
        return f"{j.realization}: {j.label} {j.note}{more}"
    return f"{j.realization}: {j.label} {j.value:.3g} {j.unit} > limit {j.limit:g} {j.unit}{more}"


class SerialExecutor(Executor):
    """Runs each task at once in this process (``--workers 1``): no worker start-up, and a
    traceback-free outcome all the same."""

    def submit(self, fn, /, *args, **kwargs):
        from concurrent.futures import Future

        future: Future = Future()
        try:
            future.set_result(fn(*args, **kwargs))
        except BaseException as exc:  # run_case returns outcomes; this is for other callables
            future.set_exception(exc)
        return future


def _limit_worker_threads() -> None:
    """Worker-process initializer: one BLAS thread per worker, so N workers use N cores rather
    than N × cores threads fighting over them."""
    for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ[var] = "1"


def process_pool(workers: int) -> Executor:
    """A pool of ``workers`` fresh processes (spawned, so no lock held by a thread of this
    process is inherited), each limited to one BLAS thread."""
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    return ProcessPoolExecutor(
        max_workers=workers, mp_context=multiprocessing.get_context("spawn"), initializer=_limit_worker_threads
    )


def run_batch(
    case_files: Sequence[str | Path],
    out_dir: str | Path,
    *,
    executor: Executor | None = None,
    force: bool = False,
    draws: int | None = None,
    progress: Callable[[CaseOutcome], None] | None = None,
) -> BatchResult:
    """Run every case file on ``executor`` (default: in this process) and write one report folder
    per case under ``out_dir``; return the outcomes in input order. ``progress`` is called with
    each outcome as it completes. The caller writes :func:`index_html` and :func:`summary_json`
    (the CLI does, as ``index.html`` and ``batch.json``)."""
    start = time.perf_counter()
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    files = [Path(f) for f in case_files]
    names = report_folder_names(files)
    executor = executor or SerialExecutor()
    futures = {
        executor.submit(run_case, str(f), str(out / n), force=force, draws=draws): i
        for i, (f, n) in enumerate(zip(files, names, strict=True))
    }
    outcomes: list[CaseOutcome | None] = [None] * len(files)
    for future in as_completed(futures):
        i = futures[future]
        try:
            outcome = future.result()
        except Exception as exc:  # the worker itself died (killed, out of memory, lost)
            outcome = CaseOutcome(
                case_file=str(files[i]),
                name=names[i],
                status="error",
                message=" ".join(f"the worker running this case stopped ({type(exc).__name__}: {exc})".split())[:300],
            )
        outcomes[i] = outcome
        if progress is not None:
            progress(outcome)
    return BatchResult(
        outcomes=tuple(o for o in outcomes if o is not None), out_dir=str(out), seconds=time.perf_counter() - start
    )


def summary_json(result: BatchResult) -> str:
    import json

    data = {
        "schema_version": 1,
        "exit_code": result.exit_code,
        "counts": result.counts(),
        "seconds": result.seconds,
        "cases": [o.as_dict() for o in result.outcomes],
    }
    return json.dumps(to_jsonable(data), indent=2) + "\n"


def format_worst(o: CaseOutcome) -> str:
    """``"max phase error 2.1 / 5 deg (42 %)"`` for the summary: the value, its limit and the
    share of the limit used; a failed criterion that has no figure (an unstable closed loop) by
    its name; empty when nothing was checked."""
    if o.worst_ratio is None or o.worst_value is None:
        return f"{o.worst_label}: fails" if o.status == "fail" and o.worst_label else ""
    share = "no limit left" if o.worst_ratio == float("inf") else f"{100 * o.worst_ratio:.0f} %"
    return f"{o.worst_label} {o.worst_value:.3g} / {o.worst_limit:g} {o.worst_unit} ({share})"


def index_html(result: BatchResult) -> str:
    """A self-contained page listing every case with its verdict and a link to its report."""
    e = html.escape
    counts = result.counts()
    summary = ", ".join(f"{n} {s}" for s, n in counts.items() if n)
    rows = []
    base = Path(result.out_dir).resolve()
    for o in result.outcomes:
        link = e(o.name)
        if o.report:
            try:
                rel = (Path(o.report).resolve() / "report.html").relative_to(base)
                link = f'<a href="{e(rel.as_posix(), quote=True)}">{e(o.name)}</a>'
            except ValueError:
                pass
        rows.append(
            f'<tr class="{e(o.status)}"><td>{link}</td><td>{e(o.status.upper())}</td>'
            f"<td>{e(format_worst(o))}</td><td>{e(o.message)}</td><td>{o.seconds:.1f} s</td>"
            f"<td>{e(o.case_file)}</td></tr>"
        )
    return f"""<!doctype html>
<html lang="en"><head><meta charset="utf-8"><title>loopshift batch: {e(summary)}</title>
<style>
body {{ font-family: sans-serif; margin: 2em; }}
table {{ border-collapse: collapse; }}
td, th {{ border-bottom: 1px solid #ccc; padding: 0.3em 0.8em; text-align: left; vertical-align: top; }}
tr.unchecked td:nth-child(2) {{ color: #a60; font-weight: bold; }}
tr.fail td:nth-child(2), tr.error td:nth-child(2), tr.unreadable td:nth-child(2) {{ color: #b00; font-weight: bold; }}
tr.pass td:nth-child(2) {{ color: #070; }}
</style></head><body>
<h1>Batch of {len(result.outcomes)} cases: {e(summary)}</h1>
<p>The tool computes; it does not certify. Each report is evidence for a qualified person's
decision: verify on a bench or in simulation before a live swap, plan a bumpless transfer, keep
safety functions independent of the controller, and follow the site's change procedure.</p>
<table><thead><tr><th>case</th><th>verdict</th><th>closest criterion</th><th>reason</th><th>time</th>
<th>case file</th></tr></thead>
<tbody>
{chr(10).join(rows)}
</tbody></table></body></html>
"""
