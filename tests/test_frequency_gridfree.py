"""Max gain/phase error over a band is independent of the frequency grid (review finding 5).

References: scipy.signal.freqs / freqz (a general-purpose library, evaluating the coefficients
independently of loopshift's own response code) on a dense linear grid around the maximum; and the
closed form of a notch: s^2 + w0^2 is zero at f = w0 / (2 pi) on the jw axis.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from convert.compare.budget import error_row
from convert.compare.frequency import (
    compare_controllers,
    compare_responses,
    log_grid,
    phase_error_across,
    response_seen_from_loop,
)
from convert.compare.verdict import judge
from convert.controller import Controller, from_expression
from convert.digital import discretize


def _resonant():
    """Lightly damped second-order lead (zeta = 0.02 at 20 Hz) against its Tustin form at 200 Hz:
    the gain error has a narrow peak that a coarse grid misses."""
    w0 = 2 * np.pi * 20
    src = Controller.analog([1, 2 * 0.3 * w0, w0**2], [1, 2 * 0.02 * w0, w0**2])
    dig = discretize(src, 200.0, "tustin").controller
    return src, dig


def _scipy_error_near(src, dig, f_center, rel=0.01, n=400001):
    """Independent figure: |gain error| (dB) from scipy.signal.freqs/freqz on a dense linear grid
    of ``n`` points within ±rel of ``f_center`` (no hold: compared with hold="none")."""
    from scipy import signal

    f = np.linspace(f_center * (1 - rel), f_center * (1 + rel), n)
    w = 2 * np.pi * f
    _, ha = signal.freqs(src.num, src.den, worN=w)
    _, hd = signal.freqz(dig.num, dig.den, worN=w * dig.sample_period_s)
    return float(np.max(np.abs(20 * np.log10(np.abs(hd / ha)))))


@pytest.mark.parametrize("ppd", [7, 30, 100, 1000])
def test_max_gain_error_does_not_change_with_grid_density(ppd):
    """The refined maximum at 7..1000 points per decade equals the dense scipy figure within 1e-6
    relative (the grid's own maximum at 7 points per decade is far below it)."""
    src, dig = _resonant()
    f = log_grid(1.0, 90.0, ppd)
    err = compare_controllers(src, dig, f, hold="none", via="zpk")
    fine = compare_controllers(src, dig, log_grid(1.0, 90.0, 1000), hold="none", via="zpk")
    assert err.max_gain_error_db == pytest.approx(fine.max_gain_error_db, rel=1e-6)
    assert err.max_phase_error_deg == pytest.approx(fine.max_phase_error_deg, rel=1e-6)
    independent = _scipy_error_near(src, dig, fine.max_gain_error_at_hz)
    assert err.max_gain_error_db == pytest.approx(independent, rel=1e-6)


def test_coarse_grid_alone_would_miss_the_peak():
    """Guard that the case above is a real test: the plain grid maximum at 7 points per decade is
    more than 1 % below the independent figure."""
    src, dig = _resonant()
    f = log_grid(1.0, 90.0, 7)
    with np.errstate(divide="ignore"):
        grid = np.max(np.abs(20 * np.log10(np.abs(dig.frequency_response(f) / src.frequency_response(f)))))
    fine = compare_controllers(src, dig, log_grid(1.0, 90.0, 1000), hold="none", via="zpk")
    assert grid < 0.99 * fine.max_gain_error_db


NOTCH = "2*(1+1/(0.5s))*(s^2+9869.6)/(s^2+62.8s+9869.6)"


@pytest.mark.parametrize("top_hz", [38.0, 40.0, 41.0])
@pytest.mark.parametrize("ppd", [100, 1000])
def test_notch_on_the_axis_is_unbounded_whatever_the_band_edge(top_hz, ppd):
    """The analog zero of s^2 + 9869.6 is on the jw axis at sqrt(9869.6)/(2 pi) = 15.811 Hz
    (closed form); Tustin moves it along the unit circle, so the ratio has a zero and a pole on
    the axis: the error is unbounded, and the gain criterion fails with that reason."""
    src = from_expression(NOTCH)
    dig = discretize(src, 200.0, "tustin").controller
    err = compare_controllers(src, dig, log_grid(0.1, top_hz, ppd), hold="zoh", via="zpk")
    assert err.max_gain_error_db == math.inf and err.max_phase_error_deg == math.inf
    assert "unbounded" in err.unbounded_note
    f0 = math.sqrt(9869.6) / (2 * math.pi)
    assert any(
        abs(float(x) - f0) < 1e-6 * f0 for x in [t.split(" Hz")[0].split()[-1] for t in err.unbounded_note.split(";")]
    )
    v = judge(
        {"max_gain_error_db": 12.0},
        {"tustin": {"max_gain_error_db": err.max_gain_error_db, "max_gain_error_db_note": err.unbounded_note}},
        has_plant=False,
    )
    assert v.overall == "fail" and "unbounded" in v.failures[0].note


def test_same_root_in_both_forms_cancels():
    """A form compared with itself (notch on the axis in both) has zero error, not unbounded."""
    src = from_expression(NOTCH)
    err = compare_controllers(src, src, log_grid(0.1, 40.0, 100))
    assert err.unbounded_note == "" and err.max_gain_error_db == pytest.approx(0.0, abs=1e-9)


def test_phase_error_is_not_a_full_turn_off_after_a_notch():
    """Reference zero at 15.81 Hz, candidate zero at 15.49 Hz, candidate otherwise 3 degrees
    behind plus a 0.1 ms delay: beyond both zeros the phase error is the closed form
    -3 - 360 * f * 0.1 ms (-4.44 deg at 40 Hz). Plain smallest-turn unwrapping reads the two
    half turns the same way and gives 355.56 deg there (checked below, so the case is a real test)."""
    a = Controller.analog([1, 0, (2 * np.pi * 15.81) ** 2], [1, 60, 9869.6])
    b = Controller.analog([1, 0, (2 * np.pi * 15.49) ** 2], [1, 60, 9869.6])
    tau = 1e-4
    for ppd in (97, 100, 333, 1000):
        f = log_grid(1.0, 40.0, ppd)
        ra = a.frequency_response(f)
        rb = b.frequency_response(f) * np.exp(-1j * np.radians(3) - 2j * np.pi * f * tau)
        err = compare_responses(ra, rb, f, forms=(a, b))
        closed = -3 - 360 * f * tau
        outside = (f < 15.4) | (f > 15.9)
        np.testing.assert_allclose(err.phase_error_deg[outside], closed[outside], atol=1e-6)
        plain = phase_error_across(rb / ra, f)  # no roots given: the smallest turn at each step
        assert plain[-1] == pytest.approx(closed[-1] + 360, abs=1e-6)


def test_budget_row_uses_the_same_refined_maximum():
    """A budget row given the continuous responses reports compare_controllers' figure."""
    src, dig = _resonant()
    f = log_grid(1.0, 90.0, 10)
    row = error_row(
        "discretization",
        f,
        src.frequency_response(f),
        dig.frequency_response(f),
        note="",
        forms=(src, dig),
        evaluate=lambda x: (src.frequency_response(x), dig.frequency_response(x)),
    )
    ref = compare_controllers(src, dig, log_grid(1.0, 90.0, 1000), hold="none")
    assert row.max_gain_error_db == pytest.approx(ref.max_gain_error_db, rel=1e-6)
    assert response_seen_from_loop(src, f).shape == f.shape


def test_digital_source_made_into_a_circuit_names_its_own_hold():
    """Review finding 10: a digital source made into a circuit has a budget row for the source's
    own zero-order hold (the circuit aims at its analog equivalent). Computed alone, the row equals
    compare_controllers(digital source seen with its ZOH, analog equivalent); with it, the rows'
    phase errors add up to at least the total (a phase error is a sum along the chain; the
    triangle inequality bounds the total by the sum of the rows)."""
    from convert import case_from_dict, evaluate

    case = case_from_dict(
        {
            "source": {"digital": {"b": [1.9, -3.5, 1.62], "a": [1, -1.3, 0.3], "fs": "40 Hz", "method": "tustin"}},
            "target": {"circuit": {"draws": 200}},
            "criteria": {"band": ["10 mHz", "4 Hz"], "max_gain_error_db": 3, "max_phase_error_deg": 30},
        },
        name="kiln",
    )
    res = evaluate(case)
    r = next(x for x in res.realizations if x.form == "circuit")
    rows = {row.key: row for row in r.budget if row.applicable}
    assert "source_hold" in rows
    src = res.reference
    f = res.band_f_hz
    hold_alone = rows["source_hold"].max_phase_error_deg  # ZOH lag at 4 Hz, fs 40 Hz: 360*4/40/2 = 18 deg
    assert hold_alone == pytest.approx(360 * f[-1] / src.fs_hz / 2, rel=0.1)
    parts = sum(row.max_phase_error_deg for k, row in rows.items() if k != "total")
    assert parts >= rows["total"].max_phase_error_deg * 0.999


def test_notch_case_fails_whatever_the_band_top():
    """Review finding 5 through a whole case: a Tustin notch at 200 Hz fails the gain criterion as
    unbounded for band tops 38, 40 and 41 Hz (closed form: zero on the jw axis at 15.81 Hz)."""
    from convert import case_from_dict, evaluate

    for top in ("38 Hz", "40 Hz", "41 Hz"):
        case = case_from_dict(
            {
                "source": {"expression": NOTCH},
                "target": {"digital": {"fs": "200 Hz", "methods": ["tustin"]}},
                "criteria": {"band": ["0.1 Hz", top], "max_gain_error_db": 12},
            },
            name="notch",
        )
        res = evaluate(case)
        assert res.verdict.overall == "fail"
        (j,) = [j for j in res.verdict.failures if j.criterion == "max_gain_error_db"]
        assert j.value == math.inf and "unbounded" in j.note and "15.81" in j.note


def test_circuit_rounding_row_and_best_part_set_agree_and_do_not_move_with_the_grid():
    """Review finding 5 (circuit): a finite notch (zeta = 0.0015) built from rounded parts. The
    rounding row at 10..5000 points per decade, the first "best part set" figure and an independent
    scipy.signal.freqs evaluation on a dense linear grid around the peak agree within 1e-6."""
    from scipy import signal

    from convert.circuit.design import design_circuit, error_sources

    d = design_circuit(from_expression("1.5*(1+1/(2s))*(s^2+0.3s+9869.6)/(s^2+62.8s+9869.6)"))
    figs = [error_sources(d, draws=0, points_per_decade=p)["rounding"]["response"] for p in (10, 100, 5000)]
    for x in figs[1:]:
        assert x["max_gain_error_db"] == pytest.approx(figs[0]["max_gain_error_db"], rel=1e-6)
    assert d.candidates[0].max_gain_error_db == pytest.approx(figs[0]["max_gain_error_db"], rel=1e-6)
    fc = figs[-1]["max_gain_error_at_hz"]
    w = 2 * np.pi * np.linspace(fc * 0.99, fc * 1.01, 400001)
    _, ht = signal.freqs(d.target.num, d.target.den, worN=w)
    _, hr = signal.freqs(d.realized.num, d.realized.den, worN=w)
    dense = float(np.max(np.abs(20 * np.log10(np.abs(hr / ht)))))
    assert figs[0]["max_gain_error_db"] == pytest.approx(dense, rel=1e-6)
