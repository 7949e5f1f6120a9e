"""Analog -> digital conversion against python-control, measured in one run.

1. In-process: a third-order controller, all seven methods plus the error table
   (``survey_methods``: grid-free maxima, refined on the continuous responses), against
   python-control's ``sample_system`` for the seven methods it has, both at the default BLAS
   threads. Target (issue 15): ratio ≤ 1.0. Elapsed time of a few calls per side, sides
   interleaved, with the CPU-time ratio beside it (:func:`clock_pairs` says why not CPU alone).
   Like for like: the seven discretizations alone (``discretize``: the b/a python-control also
   returns, no error figures) against the same python-control calls, so the report says how the
   conversion itself compares and what the error figures cost on top (the same target).
2. Whole command: ``loopshift digital EXPR --fs 1kHz --method all`` against
   ``python -c "import control"`` in fresh processes. Target: ratio ≤ 1.5.

    python bench/digital.py [--quick] [--json]
"""

from __future__ import annotations

import sys
import warnings

if __package__ in (None, ""):
    sys.path.insert(0, __import__("os").path.dirname(__import__("os").path.dirname(__file__)))

import statistics
import time

from bench.common import Figure, Pairs, figure_from_pairs, interleaved, loopshift, process, python, run_script

EXPR = "2*(1 + 1/(0.3*s) + 0.05*s/(0.005*s+1))/(0.002*s+1)"  # third order
FS = 1000.0


def clock_pairs(reference, subject, pairs: int, calls: int = 5) -> tuple[Pairs, Pairs]:
    """``reference`` and ``subject`` alternately, ``pairs`` times, each timed over ``calls``
    calls after one warm-up call each, on two clocks: elapsed time (``time.perf_counter``) and
    CPU time (``time.process_time``: this process's user + sys, every thread). Returns
    ``(elapsed, cpu)``: per-pair ratios and the median seconds per call of each side.

    Elapsed time is the figure: python-control's calls run numpy/scipy's BLAS at its default
    threads, after which the idle BLAS worker spin-waits for a while; CPU time charges that spin
    to whichever side runs next (seen here: python-control's seven calls take about 2.4 ms
    elapsed and 4.8 ms of CPU), so the CPU ratio is printed beside it, not judged."""
    reference(), subject()

    def clocks(fn):
        wall, cpu = time.perf_counter(), time.process_time()
        for _ in range(calls):
            fn()
        return (time.perf_counter() - wall) / calls, (time.process_time() - cpu) / calls

    ref_times, sub_times = [], []
    for _ in range(pairs):
        ref_times.append(clocks(reference))
        sub_times.append(clocks(subject))

    def pairs_on(k):
        ref, sub = [r[k] for r in ref_times], [s[k] for s in sub_times]
        return Pairs(tuple(x / y for x, y in zip(sub, ref)), statistics.median(ref), statistics.median(sub))

    return pairs_on(0), pairs_on(1)


def measure(quick: bool = False) -> list[Figure]:
    import control

    from convert.controller import Controller, from_expression
    from convert.digital import METHODS, survey_methods
    from convert.digital.forward import realized
    from convert.digital.realization import _check_grid, discretize
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

    def conversion_alone():
        for cache in (_root_form_of, realized, _check_grid):
            cache.cache_clear()
        fresh = Controller.analog(c.num, c.den)
        for m in METHODS:
            discretize(fresh, FS, m)

    def split() -> tuple[float, float]:
        """Elapsed seconds of two parts of one survey: the roots of the seven b/a, and the
        fourteen grid-free comparisons (alone and with hold and delay, all in the same rounds)."""
        from convert.compare.frequency import comparison_grid, default_band_hz, hold_and_delay_factor
        from convert.digital.survey import _grid_free

        for cache in (_root_form_of, realized, _check_grid):
            cache.cache_clear()
        fresh = Controller.analog(c.num, c.den)
        digitals = [discretize(fresh, FS, m).controller for m in METHODS]
        start = time.perf_counter()
        for d in digitals:
            d.zeros(), d.poles()
        roots = time.perf_counter() - start
        f = comparison_grid(default_band_hz(fresh, FS), FS)
        analog, hold = fresh.frequency_response(f, via="zpk"), hold_and_delay_factor(f, 1 / FS)
        start = time.perf_counter()
        _grid_free(fresh, digitals, f, analog, hold, 1 / FS, 0.0, {"gain_limit_db": 1.0, "phase_limit_deg": 5.0})
        return roots, time.perf_counter() - start

    survey, survey_cpu = clock_pairs(theirs, ours, 10 if quick else 60)
    parts = [split() for _ in range(10 if quick else 40)]
    roots_s = statistics.median(p[0] for p in parts)
    compare_s = statistics.median(p[1] for p in parts)
    alone, alone_cpu = clock_pairs(theirs, conversion_alone, 10 if quick else 60)
    command = interleaved(
        process(python("-c", "import control")),
        process(loopshift("digital", EXPR, "--fs", "1kHz", "--method", "all")),
        3 if quick else 7,
    )
    return [
        Figure(
            "digital survey, 7 methods (in-process)",
            survey.median,
            1.0,
            f"survey_methods {survey.subject_s * 1e3:.2f} ms vs python-control sample_system x7 "
            f"{survey.reference_s * 1e3:.2f} ms elapsed (medians of {len(survey.ratios)} interleaved pairs); "
            f"CPU time {survey_cpu.median:.2f}x ({survey_cpu.subject_s * 1e3:.2f} vs "
            f"{survey_cpu.reference_s * 1e3:.2f} ms)",
            survey.spread,
            notes=(
                f"of one survey: the roots of the seven b/a {roots_s * 1e3:.2f} ms, the fourteen grid-free "
                f"comparisons {compare_s * 1e3:.2f} ms (medians of {len(parts)})",
            ),
        ),
        Figure(
            "digital, 7 conversions alone (like for like)",
            alone.median,
            1.0,
            f"discretize x7 (b/a only) {alone.subject_s * 1e3:.2f} ms vs python-control sample_system x7 "
            f"{alone.reference_s * 1e3:.2f} ms elapsed; CPU time {alone_cpu.median:.2f}x; the error figures "
            f"cost {(survey.subject_s - alone.subject_s) * 1e3:.2f} ms on top (medians of {len(alone.ratios)} pairs)",
            alone.spread,
        ),
        figure_from_pairs("digital --method all (command)", command, 1.5, "loopshift digital", "import control"),
    ]


if __name__ == "__main__":
    sys.exit(run_script(measure))
