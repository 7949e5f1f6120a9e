"""Shared pieces of the benchmark suite: a figure, interleaved timing, fresh-process runs.

Every figure is a ratio to a reference measured in the same run. Timing is by interleaved
pairs (reference, subject, reference, subject, ...): a change of machine load or clock during
the run touches both sides of a pair alike, so the median of the per-pair ratios is steadier
than a ratio of two separate bests. The spread printed is the lowest and highest pair ratio.
"""

from __future__ import annotations

import math
import os
import statistics
import subprocess
import sys
import time
from collections.abc import Callable, Sequence
from dataclasses import asdict, dataclass, field
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


@dataclass(frozen=True)
class Figure:
    """One benchmark figure. ``ratio`` is subject / reference (lower is faster) unless
    ``at_least`` is set, when the ratio must reach ``target`` from below (a speed-up)."""

    name: str
    ratio: float
    target: float
    detail: str = ""
    spread: tuple[float, float] | None = None
    at_least: bool = False
    unit: str = "x"
    notes: tuple[str, ...] = field(default_factory=tuple)

    @property
    def meets(self) -> bool:
        return self.ratio >= self.target if self.at_least else self.ratio <= self.target

    def as_dict(self) -> dict:
        d = asdict(self)
        d["meets"] = self.meets
        if not math.isfinite(self.ratio):  # a benchmark that did not run: null in JSON
            d["ratio"] = None
        return d


@dataclass(frozen=True)
class Pairs:
    """Interleaved timing result: per-pair ratios and the median seconds of each side."""

    ratios: tuple[float, ...]
    reference_s: float
    subject_s: float

    @property
    def median(self) -> float:
        return statistics.median(self.ratios)

    @property
    def spread(self) -> tuple[float, float]:
        return (min(self.ratios), max(self.ratios))


def timed(fn: Callable[[], object]) -> float:
    start = time.perf_counter()
    fn()
    return time.perf_counter() - start


def interleaved(
    reference: Callable[[], object], subject: Callable[[], object], pairs: int, *, warmup: bool = True
) -> Pairs:
    """Run ``reference`` and ``subject`` alternately ``pairs`` times; per-pair ratios."""
    if warmup:
        reference(), subject()
    ratios, ref_times, sub_times = [], [], []
    for _ in range(pairs):
        r = timed(reference)
        s = timed(subject)
        ratios.append(s / r)
        ref_times.append(r)
        sub_times.append(s)
    return Pairs(tuple(ratios), statistics.median(ref_times), statistics.median(sub_times))


def repeated(fn: Callable[[], object], runs: int, *, warmup: bool = True) -> list[float]:
    """Seconds of ``runs`` calls of ``fn`` (after one warm-up call)."""
    if warmup:
        fn()
    return [timed(fn) for _ in range(runs)]


def seconds_figure(name: str, times: Sequence[float], target_s: float, what: str, notes: Sequence[str] = ()) -> Figure:
    """A figure against a fixed-seconds target (no timed reference): the ratio is the median of
    ``times`` over ``target_s``, the spread the shortest and longest run over ``target_s``; the
    target is then 1."""
    med = statistics.median(times)
    return Figure(
        name=name,
        ratio=med / target_s,
        target=1.0,
        spread=(min(times) / target_s, max(times) / target_s),
        notes=tuple(notes),
        detail=f"{what} {_seconds(med)} (median of {len(times)} runs), as a ratio to the fixed "
        f"target of {_seconds(target_s)}",
    )


def _seconds(s: float) -> str:
    return f"{s * 1e3:.1f} ms" if s < 1 else f"{s:.2f} s"


def python_env(**extra: str) -> dict[str, str]:
    """The environment of a fresh process as a user's install has it: bytecode cached (no
    PYTHONDONTWRITEBYTECODE), the project importable."""
    env = dict(os.environ)
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    env["PYTHONPATH"] = str(ROOT) + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    env.update(extra)
    return env


def process(argv: Sequence[str], *, cwd: str | Path | None = None, ok_codes=(0,), env=None) -> Callable[[], None]:
    """A callable that runs ``argv`` in a fresh process (stdout/stderr captured) and checks its exit code."""
    argv = list(argv)

    def run() -> None:
        proc = subprocess.run(argv, cwd=cwd, capture_output=True, text=True, env=env or python_env())
        if proc.returncode not in ok_codes:
            raise RuntimeError(f"{' '.join(argv)} exited {proc.returncode}: {proc.stderr.strip()[-400:]}")

    return run


# A small launcher: Linux folds the parent's peak resident size into a child's across fork and
# exec, so a child started straight from a large benchmark process would report the benchmark's
# peak. The launcher starts small, caps the address space, runs the command and prints its
# child's peak (KB), exit code and last line of error output.
_LAUNCHER = r"""
import json, resource, subprocess, sys
cap = int(sys.argv[1])
def limit():
    resource.setrlimit(resource.RLIMIT_AS, (cap, cap))
p = subprocess.run(sys.argv[2:], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True, preexec_fn=limit)
print(json.dumps([resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss, p.returncode,
                  (p.stderr.strip().splitlines() or [""])[-1][:200]]))
"""


def peak_rss(argv: Sequence[str], cap_bytes: int = 4 * 2**30) -> tuple[float, int, str]:
    """Peak resident MB of ``argv`` in a fresh process under an address-space cap (so that a run
    that would take the shared machine's memory fails instead), its exit code and its last line
    of error output."""
    import json

    proc = subprocess.run(
        [sys.executable, "-c", _LAUNCHER, str(cap_bytes), *argv],
        capture_output=True,
        text=True,
        env=python_env(),
        check=True,
    )
    kb, code, last = json.loads(proc.stdout.strip().splitlines()[-1])
    return kb / 1024, code, last


def python(*args: str) -> list[str]:
    return [sys.executable, *args]


def loopshift(*args: str) -> list[str]:
    return [sys.executable, "-m", "convert", *args]


def figure_from_pairs(name: str, pairs: Pairs, target: float, what: str, reference: str) -> Figure:
    return Figure(
        name=name,
        ratio=pairs.median,
        target=target,
        spread=pairs.spread,
        detail=f"{what} {pairs.subject_s * 1e3:.1f} ms vs {reference} {pairs.reference_s * 1e3:.1f} ms "
        f"(medians of {len(pairs.ratios)} interleaved pairs)",
    )


def print_figures(figures: Sequence[Figure], file=None) -> None:
    file = file or sys.stdout
    width = max((len(f.name) for f in figures), default=10)
    for f in figures:
        target = f"≥ {f.target:g}" if f.at_least else f"≤ {f.target:g}"
        spread = f" [{f.spread[0]:.2f}–{f.spread[1]:.2f}]" if f.spread else ""
        print(
            f"{f.name:<{width}}  {f.ratio:7.3f}{spread:<14} target {target:<6} "
            f"{'meets' if f.meets else 'MISSES'}  {f.detail}",
            file=file,
        )
        for n in f.notes:
            print(f"{'':<{width}}  note: {n}", file=file)


def run_script(
    measure: Callable[..., list[Figure]],
    argv: Sequence[str] | None = None,
    *,
    options: dict[str, dict] | None = None,
    doc: str | None = None,
) -> int:
    """``main`` for a bench module run as a script: ``--quick``, ``--json``; exit 1 on a miss.
    ``options``: extra ``--name -> add_argument keywords``, passed to ``measure`` by name."""
    import argparse
    import json

    parser = argparse.ArgumentParser(description=doc, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--quick", action="store_true", help="fewer repeats (a rough look)")
    parser.add_argument("--json", action="store_true", help="print the figures as JSON")
    for flag, kw in (options or {}).items():
        parser.add_argument(flag, **kw)
    args = vars(parser.parse_args(argv))
    as_json = args.pop("json")
    figures = measure(**args)
    if as_json:
        print(json.dumps([f.as_dict() for f in figures], indent=2))
    else:
        print_figures(figures)
    return 0 if all(f.meets for f in figures) else 1
