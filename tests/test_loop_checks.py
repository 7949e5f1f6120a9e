"""Loop checks: margins and the sampled-data simulation against python-control."""

from __future__ import annotations

import numpy as np
import pytest

from convert.compare.loop import default_duration, loop_margins, response_deviation, simulate_loop
from convert.controller import Controller, from_expression

PI = from_expression("2*(1 + 1/(5*s))")
PLANT = from_expression("1/((3*s + 1)*(s + 1))")


def _tustin(c: Controller, fs: float) -> Controller:
    from convert.digital import discretize

    return discretize(c, fs, "tustin").controller


def test_analog_step_matches_python_control():
    """Reference: python-control step_response of feedback(C·P, 1) (no dead time, no limits)."""
    import control

    sim = simulate_loop(PI, PLANT, 0.0, duration_s=20.0, steps=8000)
    cl = control.feedback(PI.to_control() * PLANT.to_control(), 1)
    _, y = control.step_response(cl, T=sim.t)
    assert np.max(np.abs(sim.y - y)) < 1e-3


def test_disturbance_response_matches_python_control():
    """Reference: python-control step_response of P/(1 + C·P) (load disturbance at the plant input)."""
    import control

    sim = simulate_loop(PI, PLANT, 0.0, duration_s=20.0, steps=8000, kind="disturbance", step=0.5)
    p, c = PLANT.to_control(), PI.to_control()
    _, y = control.step_response(0.5 * control.feedback(p, c), T=sim.t)
    assert np.max(np.abs(sim.y - y)) < 1e-3


def test_dead_time_delays_the_response_exactly():
    """Common practice: a pure input delay shifts the open-loop response; with a dead time that is
    not a multiple of the sub-step, the measurement stays 0 until t = θ (modified z-transform)."""
    sim = simulate_loop(PI, PLANT, 0.537, duration_s=10.0, steps=1000)
    before = sim.t < 0.537 - 1e-9
    assert np.all(sim.y[before] == 0.0)
    assert sim.y[-1] != 0.0


def test_digital_loop_converges_to_analog_as_fs_grows():
    """Sampled-data convergence (common practice): the hold's effect shrinks like T, so the step
    deviation from the analog loop falls as fs rises."""
    analog = simulate_loop(PI, PLANT, 0.5, duration_s=20.0, steps=20000)
    devs = [
        response_deviation(analog, simulate_loop(_tustin(PI, fs), PLANT, 0.5, duration_s=20.0))
        for fs in (2.0, 8.0, 32.0)
    ]
    assert devs[0] > devs[1] > devs[2]
    assert devs[2] < 0.25 * devs[0]
    assert devs[2] < 0.01


def test_margins_match_python_control_stability_margins():
    """Reference: python-control stability_margins on a loop with finite gain and phase margins
    (no dead time): C = 4(1 + 1/(2s)), P = 1/(s+1)^3."""
    import control

    c = from_expression("4*(1 + 1/(2*s))")
    p = from_expression("1/(s+1)^3")
    m = loop_margins(c, p, 0.0)
    gm, pm, _, wpc, wgc, _ = control.stability_margins(c.to_control() * p.to_control())
    assert m.gain_margin_db == pytest.approx(20 * np.log10(gm), abs=0.01)
    assert m.phase_margin_deg == pytest.approx(pm, abs=0.05)
    assert m.crossover_hz == pytest.approx(wgc / (2 * np.pi), rel=1e-3)
    assert m.phase_crossover_hz == pytest.approx(wpc / (2 * np.pi), rel=1e-3)


def test_dead_time_margins_match_pade_reference():
    """Reference: python-control stability_margins with a 9th-order Padé stand-in for the dead
    time (control.pade), which is accurate near the crossovers; ours adds −ωθ exactly."""
    import control

    theta = 0.5
    num, den = control.pade(theta, 9)
    loop = PI.to_control() * PLANT.to_control() * control.tf(num, den)
    gm, pm, _, wpc, wgc, _ = control.stability_margins(loop)
    m = loop_margins(PI, PLANT, theta)
    assert m.gain_margin_db == pytest.approx(20 * np.log10(gm), abs=0.02)
    assert m.phase_margin_deg == pytest.approx(pm, abs=0.1)


def test_sensitivity_peak_is_max_of_one_over_one_plus_l():
    """Definition (common practice): Ms = max_ω |1/(1 + L(jω))|, checked on python-control's
    frequency response of the sensitivity function."""
    import control

    m = loop_margins(PI, PLANT, 0.0)
    s = control.feedback(1, PI.to_control() * PLANT.to_control())
    w = np.logspace(-3, 3, 20000)
    mag = np.abs(s(1j * w))
    assert m.ms == pytest.approx(mag.max(), rel=1e-4)


def test_output_limits_clamp_the_controller_output():
    sim = simulate_loop(PI, PLANT, 0.0, duration_s=10.0, output_limits=(-1.0, 1.5))
    assert sim.u.max() <= 1.5 and sim.u.min() >= -1.0
    assert sim.u.max() == 1.5


def test_digital_margins_include_hold_and_delay():
    """Common practice: ZOH + computation delay add about ω_c·(T/2 + t_d) of phase lag at crossover."""
    fs, delay = 20.0, 0.01
    m0 = loop_margins(PI, PLANT, 0.0)
    md = loop_margins(_tustin(PI, fs), PLANT, 0.0, delay_s=delay)
    expected = np.degrees(2 * np.pi * m0.crossover_hz * (0.5 / fs + delay))
    assert m0.phase_margin_deg - md.phase_margin_deg == pytest.approx(expected, rel=0.05)


def test_default_duration_is_finite_and_positive():
    t = default_duration(PI, PLANT, 0.5)
    assert 1.0 < t < 1000.0
