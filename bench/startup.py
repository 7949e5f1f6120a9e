"""Start-up: how long the user waits before loopshift answers.

Fresh interpreter processes, bytecode cached as a user's install has it, interleaved with the
reference ``python -c "import control"`` (python-control's import):

* ``loopshift --help``            (as ``python -m convert --help``) — target ≤ 0.3 of the reference
* ``loopshift show --pid ...``    (a PID shown as tables)           — target ≤ 0.3

    python bench/startup.py [--quick] [--json]
"""

from __future__ import annotations

import sys

if __package__ in (None, ""):
    sys.path.insert(0, __import__("os").path.dirname(__import__("os").path.dirname(__file__)))

from bench.common import Figure, figure_from_pairs, interleaved, loopshift, process, python, run_script

TARGET = 0.3


def measure(quick: bool = False) -> list[Figure]:
    pairs = 3 if quick else 9
    reference = process(python("-c", "import control"))
    out = []
    for name, argv in (
        ("start-up: loopshift --help", loopshift("--help")),
        ("start-up: loopshift show --pid", loopshift("show", "--pid", "kc=2", "ti=30s", "td=5s", "n=10")),
    ):
        p = interleaved(reference, process(argv), pairs)
        out.append(figure_from_pairs(name, p, TARGET, name.split(": ", 1)[1], "import control"))
    return out


if __name__ == "__main__":
    sys.exit(run_script(measure))
