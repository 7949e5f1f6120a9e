"""Regression tests for wrong numbers found in the correctness review (one test per bug)."""

from __future__ import annotations

import numpy as np
import pytest

from convert.compare.loop import loop_margins
from convert.controller import from_expression


def test_gain_margin_of_conditionally_stable_loop_is_the_upward_margin():
    """Bug: with two phase crossings the most negative gain margin was reported (-31.3 dB), so a
    stable, conditionally stable loop looked unstable. Reference: python-control
    ``stability_margins`` reports the crossing nearest 0 dB (+6.58 dB here) and the closed loop's
    poles (python-control ``feedback``) are all in the left half-plane."""
    import control

    c = from_expression("5*(s + 0.5)^2*(s + 1)/s^3")
    p = from_expression("1/((0.05*s + 1)^2*(0.2*s + 1))")
    loop = c.to_control() * p.to_control()
    assert np.all(control.feedback(loop).poles().real < 0)
    gm, pm, _, wpc, wgc, _ = control.stability_margins(loop)
    m = loop_margins(c, p, 0.0)
    assert m.gain_margin_db == pytest.approx(20 * np.log10(gm), abs=0.01)
    assert m.gain_margin_db > 0
    assert m.phase_crossover_hz == pytest.approx(wpc / (2 * np.pi), rel=1e-3)
    assert m.phase_margin_deg == pytest.approx(pm, abs=0.05)


def test_gain_margin_of_unstable_conditionally_stable_loop_matches_python_control():
    """Same rule on an unstable loop with two phase crossings: python-control
    ``stability_margins`` gives -10.41 dB (the crossing nearest 0 dB), not the -33.7 dB one."""
    import control

    c = from_expression("40*(s + 1)^2/s^3")
    p = from_expression("1/(0.1*s + 1)^2")
    gm, *_ = control.stability_margins(c.to_control() * p.to_control())
    m = loop_margins(c, p, 0.0)
    assert m.gain_margin_db == pytest.approx(20 * np.log10(gm), abs=0.01)


@pytest.mark.parametrize(
    "controller, plant",
    [
        ("30 + 15/s", "50/(2*s + 1)"),  # crossover 1500x above the plant's corner
        ("1e6", "1/s"),  # no corner at all, crossover at 159 kHz
        ("1e-6/s", "1/(s + 1)"),  # crossover far below every corner
    ],
)
def test_margin_grid_reaches_a_crossover_far_from_the_corners(controller, plant):
    """Bug: the margin grid spanned 1000x around the corners only, so a high-gain loop (a plant
    gain in engineering units times kp) had "no crossover", no phase margin and a sensitivity
    peak below 0 dB (impossible for a strictly proper loop). Reference: python-control
    ``stability_margins`` (phase margin and crossover frequency)."""
    import control

    c, p = from_expression(controller), from_expression(plant)
    _, pm, _, _, wgc, _ = control.stability_margins(c.to_control() * p.to_control())
    m = loop_margins(c, p, 0.0)
    assert m.crossover_hz == pytest.approx(wgc / (2 * np.pi), rel=1e-3)
    assert m.phase_margin_deg == pytest.approx(pm, abs=0.05)
    assert m.sensitivity_peak_db > -0.01


def test_phase_error_past_180_degrees_is_not_wrapped():
    """Bug: the phase error was the wrapped angle of cand/ref, so a zero-order hold plus a
    1.5-sample computation delay reported a maximum of 178° (at 25 Hz) instead of 324° (at the
    band's top, 45 Hz, fs = 100 Hz). Reference, by hand: the lag of ZOH + delay is
    ω·(T/2 + t_d) = 360°·45 Hz·(0.005 s + 0.015 s) = 324°, and sinc(fT) > 0 below fs."""
    from convert.compare.frequency import compare_responses, hold_and_delay_factor, log_grid

    c = from_expression("2*(1 + 1/(5*s))")
    t = 0.01
    f = log_grid(0.1, 45.0, 100)
    ref = c.frequency_response(f, via="zpk")
    err = compare_responses(ref, ref * hold_and_delay_factor(f, t, 1.5 * t), f)
    assert err.max_phase_error_deg == pytest.approx(360.0 * 45.0 * 0.02, rel=1e-9)
    assert err.max_phase_error_at_hz == pytest.approx(45.0)
    assert np.allclose(err.phase_error_deg, -360.0 * f * 0.02)


def test_budget_row_of_many_draws_reports_phase_error_past_180_degrees():
    """Same bug in the error budget's many-draw path (Monte Carlo rows): each draw's phase error
    is unwrapped along frequency. Reference, by hand: a pure delay τ has phase error 360°·f·τ;
    draws with τ = 2, 3, 4 ms over a band to 200 Hz give 144°, 216°, 288°; the 100th percentile
    is 288°."""
    from convert.compare.budget import error_row
    from convert.compare.frequency import log_grid

    f = log_grid(1.0, 200.0, 100)
    ref = np.ones_like(f, dtype=complex)
    cand = np.array([np.exp(-2j * np.pi * f * tau) for tau in (0.002, 0.003, 0.004)])
    row = error_row("tolerances", f, ref, cand, note="test", percentile=100.0)
    assert row.max_phase_error_deg == pytest.approx(288.0, rel=1e-9)


def test_undecided_loop_stability_is_never_a_pass():
    """A loop whose stability could not be decided (None) makes the verdict UNCHECKED, not PASS,
    even when every error criterion passes (house rule: a verdict cannot pass what it did not check)."""
    from convert.compare.verdict import judge

    figures = {"tustin @ 10 Hz": {"max_gain_error_db": 0.1, "max_phase_error_deg": 1.0}}
    criteria = {"max_gain_error_db": 1.0, "max_phase_error_deg": 5.0}
    decided = judge(criteria, figures, has_plant=True, loops={})
    assert decided.overall == "pass"
    undecided = judge(criteria, figures, has_plant=True, loops={"source": None})
    assert undecided.overall == "unchecked"
    assert "could not be decided" in undecided.unchecked_reason


def test_compare_with_an_unstable_loop_fails_and_hides_margins(run_cli):
    """`compare` with a plant that the (same) controller destabilizes: FAIL, exit 1, the loop named
    unstable before the figures, margins not printed as numbers. Reference for instability:
    python-control closed-loop poles of the same loop with a 12th-order Padé dead time."""
    import control
    import numpy as np

    c = control.tf([80 * 120, 80], [120, 0])
    p = control.tf([0.04], [15, 1, 0])
    num, den = control.pade(2.0, 12)
    cl = control.feedback(c * p * control.tf(num, den), 1)
    assert np.any(np.real(control.poles(cl)) > 0)  # the reference says: unstable

    res = run_cli(
        "compare",
        "pid: kc=80 ti=2min",
        "pid: kc=80 ti=2min fs=10Hz",
        "--plant",
        "0.04/(s*(15*s + 1))",
        "--dead-time",
        "2s",
    )
    assert res.code == 1
    first = res.out.splitlines()[0]
    assert "unstable" in first
    assert "unstable loop" in res.out and "verdict: FAIL" in res.out


def test_netlist_part_value_1e308_is_refused(run_cli, tmp_path):
    """A resistor of 1e308 ohm overflowed the nodal analysis (numpy warnings, then a result with exit 0;
    found by the opt-in fuzz campaign): now one line naming the element, exit 2."""
    card = tmp_path / "huge.cir"
    card.write_text("huge part\nVIN in 0 AC 1\nR1 in n 1e308\nR2 n out 10k\nX1 0 n out OPAMP\n")
    res = run_cli("card", str(card))
    assert res.code == 2
    lines = [x for x in res.err.splitlines() if x.strip()]
    assert len(lines) == 1 and "huge.cir:3" in lines[0] and "R1" in lines[0] and "1e+24" in lines[0]
