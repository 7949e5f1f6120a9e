"""Start-up benchmark: how long the user waits before loopshift answers.

Measures, in one run and on this machine, the wall time of fresh interpreter processes:

* reference: ``python -c "import control"`` (python-control's import, about a second)
* ``loopshift --help``              (run as ``python -m convert --help``)
* ``loopshift show --pid ...``      (a PID shown as tables)

Each is run ``--repeat`` times (default 7) after one warm-up run; the best time counts (the
least disturbed by other load). Prints the times and the ratios to the reference. Target: both
ratios ≤ 0.3. Exit code 0 when met, 1 when not (so CI may run it, but it is never a test).

    python bench/startup.py [--repeat 7]
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import time

TARGET = 0.3

CASES = {
    "import control": [sys.executable, "-c", "import control"],
    "loopshift --help": [sys.executable, "-m", "convert", "--help"],
    "loopshift show --pid": [sys.executable, "-m", "convert", "show", "--pid", "kc=2", "ti=30s", "td=5s", "n=10"],
}


def best_time(argv: list[str], repeat: int) -> float:
    env = dict(os.environ, PYTHONDONTWRITEBYTECODE="1", COLUMNS="100")
    subprocess.run(argv, capture_output=True, env=env, check=True)  # warm-up: file cache, .pyc
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        subprocess.run(argv, capture_output=True, env=env, check=True)
        times.append(time.perf_counter() - start)
    return min(times)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=7, help="timed runs per command (best counts), e.g. --repeat 11")
    args = parser.parse_args(argv)
    results = {name: best_time(cmd, args.repeat) for name, cmd in CASES.items()}
    ref = results["import control"]
    ok = True
    print(f"best of {args.repeat} runs each, python {sys.version.split()[0]}")
    for name, seconds in results.items():
        if name == "import control":
            print(f"  {name:<24} {seconds * 1000:8.1f} ms   (reference)")
            continue
        ratio = seconds / ref
        ok &= ratio <= TARGET
        print(f"  {name:<24} {seconds * 1000:8.1f} ms   ratio {ratio:.3f}  (target ≤ {TARGET})  {'ok' if ratio <= TARGET else 'SLOW'}")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
