"""Benchmark: analog -> digital conversion speed against python-control, measured in one run.

1. In-process: one third-order controller, all seven methods plus the error table
   (survey_methods), against python-control's sample_system for the methods it has
   (zoh, foh, tustin, matched, impulse, euler, backward_diff). Target: ratio <= 2.
2. Whole command: `loopshift digital EXPR --fs 1kHz --method all` against
   `python -c "import control"`. Target: ratio <= 1.5.

Run: /work/venv/bin/python bench/digital.py   (prints the figures and ratios; asserts nothing)
"""

from __future__ import annotations

import subprocess
import sys
import time
import warnings

EXPR = "2*(1 + 1/(0.3*s) + 0.05*s/(0.005*s+1))/(0.002*s+1)"  # third order
FS = 1000.0


def best_of(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def main() -> None:
    import control

    from convert.controller import from_expression
    from convert.digital import METHODS, survey_methods

    c = from_expression(EXPR)
    tf = c.to_control()
    names = ["zoh", "foh", "tustin", "matched", "impulse", "euler", "backward_diff"]

    from convert.controller import Controller
    from convert.digital.roots import _root_form_of

    def ours():
        # a fresh controller object and empty root cache each time: no work carried between repeats
        _root_form_of.cache_clear()
        survey_methods(Controller.analog(c.num, c.den), FS, METHODS)

    def theirs():
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            for m in names:
                if m == "impulse":  # scipy's impulse method refuses a direct term; use the strictly proper part
                    control.sample_system(control.tf([1.0], list(c.den)), 1 / FS, method=m)
                else:
                    control.sample_system(tf, 1 / FS, method=m)

    ours(), theirs()
    # interleaved, best of each: a change of CPU speed during the run affects both sides alike
    t_ours, t_theirs = float("inf"), float("inf")
    for _ in range(40):
        t_ours = min(t_ours, best_of(ours, 1))
        t_theirs = min(t_theirs, best_of(theirs, 1))
    print(f"in-process: survey_methods (7 methods + error table) {t_ours * 1e3:.2f} ms; "
          f"python-control sample_system x7 {t_theirs * 1e3:.2f} ms; ratio {t_ours / t_theirs:.2f} (target <= 2)")

    exe = [sys.executable, "-m", "convert", "digital", EXPR, "--fs", "1kHz", "--method", "all"]
    ref = [sys.executable, "-c", "import control"]

    def run(cmd):
        subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL)

    run(exe), run(ref)
    t_cmd = best_of(lambda: run(exe), 5)
    t_ref = best_of(lambda: run(ref), 5)
    print(f"command: loopshift digital --method all {t_cmd:.3f} s; python -c 'import control' {t_ref:.3f} s; "
          f"ratio {t_cmd / t_ref:.2f} (target <= 1.5)")


if __name__ == "__main__":
    main()
