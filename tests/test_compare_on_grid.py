"""``compare_on_grid`` (every row of candidates against one reference in one pass, what the
method survey uses) against the errors written out row by row here: gain error 20·log10|c/r|,
phase error by ``numpy.unwrap`` of the angle (numpy as the reference library), first grid
frequency where either exceeds its limit. The responses are Tustin and ZOH forms made by
``scipy.signal`` (``bilinear``, ``cont2discrete``) and evaluated by ``scipy.signal.freqz``,
independently of ``convert``'s conversions."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.signal import bilinear, cont2discrete, freqz

from convert.compare.frequency import compare_on_grid, compare_responses, log_grid
from convert.controller import Controller
from convert.digital import survey_methods

NUM, DEN = [0.02, 1.0, 5.0], [0.001, 1.0, 0.0]  # a PI with a lead, an integrator (descending powers of s)
FS = 200.0


def _rows(f):
    analog = np.polyval(NUM, 2j * np.pi * f) / np.polyval(DEN, 2j * np.pi * f)
    b, a = bilinear(NUM, DEN, fs=FS)
    zb, za, _ = cont2discrete((NUM, DEN), 1 / FS, method="zoh")
    tustin = freqz(b, a, worN=f, fs=FS)[1]
    zoh = freqz(np.ravel(zb), za, worN=f, fs=FS)[1]
    delayed = zoh * np.exp(-2j * np.pi * f * 3 / FS)  # three samples more: errors beyond 180°
    broken = tustin.copy()
    broken[[5, 40]] = np.nan  # points that cannot be evaluated
    return analog, np.array([tustin, zoh, delayed, broken])


def _by_hand(ref, cand, f, gain_limit, phase_limit):
    ratio = cand / ref
    gain = 20 * np.log10(np.abs(ratio))
    ok = np.isfinite(ratio)
    phase = np.full(f.shape, np.nan)
    phase[ok] = np.degrees(np.unwrap(np.angle(ratio[ok])))
    g = np.where(np.isfinite(gain), np.abs(gain), np.inf)
    p = np.where(np.isnan(phase), 180.0, np.abs(phase))
    bad = np.flatnonzero((g > gain_limit) | (p > phase_limit))
    return gain, phase, g.max(), f[np.argmax(g)], p.max(), f[np.argmax(p)], (f[bad[0]] if bad.size else None)


@pytest.mark.parametrize("limits", [(1.0, 5.0), (0.1, 1.0), (40.0, 720.0)])
def test_every_row_equals_the_errors_written_out(limits):
    """Each row's arrays, maxima (first on a tie), their frequencies and the agreement limit
    equal the row-by-row computation, NaN points included; with wide limits nothing exceeds."""
    f = log_grid(0.05, 0.49 * FS, 60)
    ref, cands = _rows(f)
    with np.errstate(divide="ignore", invalid="ignore"):
        got = compare_on_grid(ref, cands, f, gain_limit_db=limits[0], phase_limit_deg=limits[1])
        assert len(got) == len(cands)
        for row, cand in zip(got, cands):
            gain, phase, gmax, g_at, pmax, p_at, limit = _by_hand(ref, cand, f, *limits)
            np.testing.assert_array_equal(row.gain_error_db, gain)
            np.testing.assert_array_equal(row.phase_error_deg, phase)
            assert (row.max_gain_error_db, row.max_gain_error_at_hz) == (gmax, g_at)
            assert (row.max_phase_error_deg, row.max_phase_error_at_hz) == (pmax, p_at)
            assert row.agreement_limit_hz == limit
    assert got[2].max_phase_error_deg > 180  # unwrapped, not folded back
    assert got[3].max_gain_error_db == np.inf
    assert limits[0] < 40 or all(r.agreement_limit_hz is None for r in got[:3])


def test_compare_responses_without_forms_is_the_same_comparison():
    """compare_responses given neither continuous responses nor forms returns what
    compare_on_grid returns for that one row (one comparison, not two)."""
    f = log_grid(0.05, 0.49 * FS, 60)
    ref, cands = _rows(f)
    one = compare_responses(ref, cands[1], f, gain_limit_db=0.5, phase_limit_deg=2.0)
    many = compare_on_grid(ref, cands, f, gain_limit_db=0.5, phase_limit_deg=2.0)[1]
    assert one.summary() == many.summary()


def test_survey_rows_are_the_comparison_of_each_method():
    """The survey's method and loop errors are the comparison of each method's response (and of
    it times the hold and delay) with the analog response, method by method, refined on the
    continuous responses (the report's definition); their maxima are never below the grid's, and
    the agreement limit lies in the grid interval where compare_on_grid on the same grid puts it."""
    from convert.compare.frequency import hold_and_delay_factor

    c = Controller.analog(NUM, DEN)
    s = survey_methods(c, FS, delay_s=1e-3)
    ana = c.frequency_response(s.f_hz, via="zpk")
    hold = hold_and_delay_factor(s.f_hz, 1 / FS, 1e-3)
    for row in s.rows:
        cd = row.realization.controller
        dig = cd.frequency_response(s.f_hz, via="zpk")

        def alone(x, cd=cd):
            return c.frequency_response(x, via="zpk"), cd.frequency_response(x, via="zpk")

        def seen(x, cd=cd):
            return c.frequency_response(x, via="zpk"), cd.frequency_response(x, via="zpk") * hold_and_delay_factor(
                x, 1 / FS, 1e-3
            )

        for got, cand, ev in ((row.method_error, dig, alone), (row.loop_error, dig * hold, seen)):
            assert got.summary() == compare_responses(ana, cand, s.f_hz, evaluate=ev, forms=(c, cd)).summary()
            grid = compare_on_grid(ana, cand[None, :], s.f_hz)[0]
            assert got.max_gain_error_db >= grid.max_gain_error_db
            assert got.max_phase_error_deg >= grid.max_phase_error_deg
            # the agreement limit is the crossing itself (frequency.agreement_limit): at or below the
            # grid's first point beyond the limits, above the grid point before it
            if grid.agreement_limit_hz is None:
                assert got.agreement_limit_hz is None
            else:
                i = int(np.searchsorted(s.f_hz, grid.agreement_limit_hz))
                assert s.f_hz[max(i - 1, 0)] <= got.agreement_limit_hz <= grid.agreement_limit_hz
