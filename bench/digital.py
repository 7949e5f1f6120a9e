"""Analog -> digital conversion against python-control, measured in one run.

1. In-process: a third-order controller, all seven methods plus the error table
   (``survey_methods``), against python-control's ``sample_system`` for the seven methods it
   has, both at the default BLAS threads. Target (issue 15): ratio ≤ 1.0.
2. Whole command: ``loopshift digital EXPR --fs 1kHz --method all`` against
   ``python -c "import control"`` in fresh processes. Target: ratio ≤ 1.5.

    python bench/digital.py [--quick] [--json]
"""

from __future__ import annotations

import sys
import warnings

if __package__ in (None, ""):
    sys.path.insert(0, __import__("os").path.dirname(__import__("os").path.dirname(__file__)))

from bench.common import Figure, figure_from_pairs, interleaved, loopshift, process, python, run_script

EXPR = "2*(1 + 1/(0.3*s) + 0.05*s/(0.005*s+1))/(0.002*s+1)"  # third order
FS = 1000.0


def measure(quick: bool = False) -> list[Figure]:
    import control

    from convert.controller import Controller, from_expression
    from convert.digital import METHODS, survey_methods
    from convert.digital.forward import realized
    from convert.digital.realization import _check_grid
    from convert.digital.roots import _root_form_of

    c = from_expression(EXPR)
    tf = c.to_control()
    names = ["zoh", "foh", "tustin", "matched", "impulse", "euler", "backward_diff"]

    def ours():
        # a fresh controller object and empty caches (roots, realization, check grid) each time:
        # no work carried between repeats
        for cache in (_root_form_of, realized, _check_grid):
            cache.cache_clear()
        survey_methods(Controller.analog(c.num, c.den), FS, METHODS)

    def theirs():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            for m in names:
                if m == "impulse":  # scipy's impulse method refuses a direct term: the strictly proper part
                    control.sample_system(control.tf([1.0], list(c.den)), 1 / FS, method=m)
                else:
                    control.sample_system(tf, 1 / FS, method=m)

    survey = interleaved(theirs, ours, 10 if quick else 60)
    command = interleaved(
        process(python("-c", "import control")),
        process(loopshift("digital", EXPR, "--fs", "1kHz", "--method", "all")),
        3 if quick else 7,
    )
    return [
        figure_from_pairs(
            "digital survey, 7 methods (in-process)", survey, 1.0, "survey_methods", "python-control sample_system x7"
        ),
        figure_from_pairs("digital --method all (command)", command, 1.5, "loopshift digital", "import control"),
    ]


if __name__ == "__main__":
    sys.exit(run_script(measure))
