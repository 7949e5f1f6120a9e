"""Benchmark: the full report of each demo case (10,000 Monte Carlo draws, all figures) against
``python -c "import control, matplotlib.pyplot"``, both in fresh processes, measured in one run.

Target (issue 6): each report ≤ 4× the reference. Prints the ratios; exit 1 when a target is
missed. Usage: ``python bench/report.py [--repeat N] [--draws N]``.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
TARGET = 4.0


def _best(cmd: list[str], repeat: int, cwd: Path) -> float:
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        proc = subprocess.run(cmd, cwd=cwd, capture_output=True, text=True)
        elapsed = time.perf_counter() - t0
        if proc.returncode not in (0, 1):
            sys.exit(f"failed ({proc.returncode}): {' '.join(cmd)}\n{proc.stderr[-800:]}")
        best = min(best, elapsed)
    return best


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--repeat", type=int, default=3, help="runs per command; the best is kept (default 3)")
    parser.add_argument("--draws", type=int, default=10000, help="Monte Carlo draws (default 10000)")
    args = parser.parse_args()
    py = sys.executable
    with tempfile.TemporaryDirectory() as tmp:
        tmp_path = Path(tmp)
        ref = _best([py, "-c", "import control, matplotlib.pyplot"], args.repeat, tmp_path)
        print(f"reference: python -c 'import control, matplotlib.pyplot'  {ref:.2f} s")
        missed = 0
        for case in sorted((ROOT / "cases").glob("*.toml")):
            out = tmp_path / case.stem
            cmd = [py, "-m", "convert", "report", str(case), "--out", str(out), "--force", "--draws", str(args.draws)]
            t = _best(cmd, args.repeat, tmp_path)
            ratio = t / ref
            ok = ratio <= TARGET
            missed += not ok
            print(f"{case.stem:28s} {t:6.2f} s   ratio {ratio:5.2f}   target <= {TARGET:g}  {'ok' if ok else 'MISSED'}")
    return 1 if missed else 0


if __name__ == "__main__":
    sys.exit(main())
