"""Comparing several forms in the same rounds (``compare_batch``, ``maximize_rows``) gives each
form exactly what comparing it alone gives (an invariant of the batching, not a new figure: the
single comparison is checked against scipy elsewhere, tests/test_survey_gridfree.py and
tests/test_refine.py). Cases: forms of our own invention, one of them with a zero on the unit
circle inside the band (an unbounded error), delays that push the phase error past its limit
(the agreement limit's search) and forms that agree over the whole band.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import minimize_scalar

from convert.compare.frequency import (
    compare_batch,
    compare_responses,
    comparison_grid,
    default_band_hz,
    hold_and_delay_factor,
)
from convert.compare.refine import maximize_in_brackets, maximize_rows
from convert.controller import Controller
from convert.digital import METHODS, discretize

FIELDS = (
    "max_gain_error_db",
    "max_gain_error_at_hz",
    "max_phase_error_deg",
    "max_phase_error_at_hz",
    "agreement_limit_hz",
    "unbounded_note",
)


def _forms():
    analog = Controller.analog([0.4, 3.0, 2.0], [0.002, 1.0, 0.0])  # a filtered PID, our own numbers
    fs = 250.0
    digitals = [discretize(analog, fs, m).controller for m in METHODS]
    # a notch put exactly on the unit circle at 40 Hz: its error is unbounded there
    zero = np.exp(2j * np.pi * 40.0 / fs)
    notch = Controller.from_zpk([zero, np.conj(zero)], [0.5, 0.3], 1.0, "digital", 1 / fs)
    return analog, fs, digitals + [notch]


@pytest.mark.parametrize("delay_s", [0.0, 0.004])
def test_each_row_of_a_batch_is_the_comparison_alone(delay_s):
    analog, fs, digitals = _forms()
    t = 1 / fs
    f = comparison_grid(default_band_hz(analog, fs), fs)
    ref = analog.frequency_response(f, via="zpk")
    hold = hold_and_delay_factor(f, t, delay_s)

    def evaluate_for(d, seen):
        def evaluate(x):
            r, c = analog.frequency_response(x, via="zpk"), d.frequency_response(x, via="zpk")
            return r, (c * hold_and_delay_factor(x, t, delay_s) if seen else c)

        return evaluate

    # the analog form against itself: a row within the limits over the whole band
    rows = [(d, seen) for seen in (False, True) for d in digitals] + [(analog, False)]
    alone = [
        compare_responses(ref, ev(f)[1], f, evaluate=ev, forms=(analog, d))
        for d, seen in rows
        for ev in [evaluate_for(d, seen)]
    ]

    def ratio_at(x, which):
        out = np.empty(x.shape, dtype=complex)
        for i in np.unique(which):
            sel = which == i
            r, c = evaluate_for(*rows[i])(x[sel])
            out[sel] = c / r
        return out

    cand = np.array([d.frequency_response(f, via="zpk") * (hold if seen else 1) for d, seen in rows])
    batch = compare_batch(ref, cand, f, ratio_at=ratio_at, forms=[(analog, d) for d, _ in rows])
    for one, many in zip(alone, batch):
        for name in FIELDS:
            assert getattr(many, name) == getattr(one, name), name
        np.testing.assert_array_equal(many.phase_error_deg, one.phase_error_deg)
    # the cases the batch had to hold: an unbounded row, a row with a limit, a row within limits
    assert any(e.unbounded_note for e in batch)
    assert any(e.agreement_limit_hz is not None and not e.unbounded_note for e in batch)
    assert batch[-1].agreement_limit_hz is None and batch[-1].max_gain_error_db < 1e-12


def test_groups_stop_as_they_would_alone():
    """Brackets of different widths and functions searched together give each group the result
    of its own call; checked also against scipy's bounded scalar search (a maximum located to
    the same tolerance, scipy.optimize.minimize_scalar)."""
    # cusps: every further round moves the value found, so a group searched for longer than it
    # would be alone shows it
    funcs = [lambda x: -np.abs(np.log(x) - 0.31), lambda x: -np.abs(np.log(x) - 1.3), lambda x: np.cos(np.log(x))]
    # widths from 1e-7 to four decades in ln f: the groups need different numbers of rounds
    lo = np.array([1.0, 2.0, 2.5, 3.0, 0.5])
    hi = np.array([2.2, 2.0000002, 9.0, 6.0, 5000.0])
    owner = np.array([0, 0, 1, 1, 2])

    def values_at(x, rows):
        out = np.empty(x.shape)
        for k, row in enumerate(rows):
            out[k] = funcs[owner[row]](x[k])
        return out

    found, at = maximize_rows(values_at, lo, hi, rel_tol=1e-8, groups=owner)
    for g, fn in enumerate(funcs):
        sel = owner == g
        one, one_at = maximize_in_brackets(fn, lo[sel], hi[sel], rel_tol=1e-8)
        np.testing.assert_array_equal(found[sel], one)
        np.testing.assert_array_equal(at[sel], one_at)
        for a, b, v in zip(np.log(lo[sel]), np.log(hi[sel]), one):
            ref = minimize_scalar(
                lambda u, fn=fn: -fn(np.exp(u)), bounds=(a, b), method="bounded", options={"xatol": 1e-10}
            )
            assert v >= -ref.fun - 1e-12
