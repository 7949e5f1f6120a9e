"""Benchmark: `loopshift batch` throughput with 2 workers against 1, and what a broken case costs.

Copies of the demo cases (cases/*.toml, round-robin) are run as one batch twice in fresh
processes, first with --workers 1, then with --workers 2; the ratio of throughputs is printed
(target >= 1.7 on a 2-core machine). Then one broken case (a syntax error in its expression) is
added to a batch of the same copies and its own time is compared with the time to parse one
good case file (target: no more than its own parse time, i.e. ratio <= 1, allowing 2x for the
noise of timing a few milliseconds).

    python bench/batch.py              # 200 cases, as the target is stated (about 10 minutes here)
    python bench/batch.py --cases 40   # a quicker look (the suite, python -m bench, uses 60; --quick 12)

Exit code 1 when a target is missed.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

if __package__ in (None, ""):
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

from bench.common import ROOT, Figure, python_env, run_script


def make_cases(folder: Path, n: int) -> None:
    demos = sorted((ROOT / "cases").glob("*.toml"))
    for sub in (ROOT / "cases").iterdir():  # what the cases refer to (cards, evidence files)
        if sub.is_dir() and sub.name != "__pycache__":
            shutil.copytree(sub, folder / sub.name)
    for i in range(n):
        src = demos[i % len(demos)]
        shutil.copy(src, folder / f"{i:04d}-{src.name}")


def run_batch(folder: Path, out: Path, workers: int) -> float:
    # One BLAS thread in both runs: the pool's workers run with one (so two workers do not fight
    # over two cores), and a single in-process worker is fastest with one too (small matrices),
    # so the ratio compares the best of each, not thread overhead.
    env = python_env(OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1", MKL_NUM_THREADS="1")
    start = time.perf_counter()
    proc = subprocess.run(
        [sys.executable, "-m", "convert", "batch", str(folder), "--out", str(out), "--workers", str(workers)],
        capture_output=True,
        text=True,
        env=env,
    )
    seconds = time.perf_counter() - start
    if proc.returncode not in (0, 1, 2):
        raise SystemExit(f"batch failed ({proc.returncode}): {proc.stderr.strip()}")
    return seconds


def parse_time(case_file: Path, repeats: int = 20) -> float:
    code = (
        "import time,sys; from convert.case import load_case; load_case(sys.argv[1]); "
        f"t=time.perf_counter(); [load_case(sys.argv[1]) for _ in range({repeats})]; "
        f"print((time.perf_counter()-t)/{repeats})"
    )
    out = subprocess.run(
        [sys.executable, "-c", code, str(case_file)], capture_output=True, text=True, check=True, env=python_env()
    )
    return float(out.stdout.strip())


def measure(quick: bool = False, cases: int | None = None) -> list[Figure]:
    n = cases or (12 if quick else 60)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp) / "cases"
        folder.mkdir()
        make_cases(folder, n)
        t1 = run_batch(folder, Path(tmp) / "one", 1)
        t2 = run_batch(folder, Path(tmp) / "two", 2)
        (folder / "zzzz-broken.toml").write_text('[source]\nexpression = "1/(s"\n')
        run_batch(folder, Path(tmp) / "three", 2)
        data = json.loads((Path(tmp) / "three" / "batch.json").read_text())
        broken = next(c for c in data["cases"] if c["status"] == "unreadable")
        good = parse_time(folder / f"0000-{sorted((ROOT / 'cases').glob('*.toml'))[0].name}")
    return [
        Figure(
            "batch: 2 workers vs 1 (throughput)",
            t1 / t2,
            1.7,
            at_least=True,
            detail=f"{n} copies of the demo cases: 1 worker {t1:.1f} s, 2 workers {t2:.1f} s",
        ),
        Figure(
            "batch: a broken case vs parsing a good one",
            broken["seconds"] / good,
            2.0,
            detail=f"broken case {1e3 * broken['seconds']:.2f} ms in the batch, parsing one good case "
            f"{1e3 * good:.2f} ms (target: its own parse time; 2 allowed for timing noise)",
        ),
    ]


if __name__ == "__main__":
    # alone it runs the 200 cases the target names (12 with --quick) unless --cases says otherwise
    sys.exit(
        run_script(
            lambda quick=False, cases=None: measure(quick, cases or (None if quick else 200)),
            doc=__doc__,
            options={"--cases": {"type": int, "help": "copies of the demo cases in the batch (default 200)"}},
        )
    )
