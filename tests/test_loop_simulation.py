"""The loop simulation: figures that do not depend on the simulated time, checked against two
independent computations, and the same sampled-data responses as the former step loop.

References:
* ``tests/loop_reference.rk4_loop`` — an independent fixed-step simulation: classical
  Runge-Kutta (RK4) on python-control's own state-space realizations, the dead time exact as a
  whole number of steps, at a step half of ours (see its docstring);
* python-control ``step_response`` of the closed loop with a 12th-order Padé stand-in for the
  dead time (no clamp);
* ``tests/loop_reference.stepwise_sampled_loop`` — the former simulation (one Python iteration
  per sub-step), the regression reference for sampled-data loops.
Scenarios are our own.
"""

from __future__ import annotations

import functools

import numpy as np
import pytest

from convert.compare.loop import default_duration, natural_step, response_deviation, simulate_loop
from convert.controller import from_expression
from tests.loop_reference import rk4_loop, stepwise_sampled_loop

CASES = {
    "pi": ("2*(1 + 1/(5*s))", "1/((3*s + 1)*(s + 1))", 0.5, None),
    "pid_with_kick": ("8*(1 + 1/(20*s) + 2*s/(0.2*s + 1))", "0.5/((30*s + 1)*(5*s + 1))", 1.0, None),
    "pi_clamped": ("2*(1 + 1/(5*s))", "1/((3*s + 1)*(s + 1))", 0.5, (-1.0, 1.5)),
}
TOL = 1e-3  # of the step


@functools.cache
def _reference(name: str, kind: str):
    """(t, y, settling time) of the RK4 reference over a horizon of a few settling times."""
    c_text, p_text, theta, limits = CASES[name]
    c, p = from_expression(c_text), from_expression(p_text)
    horizon = 2.5 * default_duration(c, p, theta)
    h = theta / round(theta / (natural_step(c, p, theta) / 2))
    t, y, _ = rk4_loop(c, p, theta, duration_s=horizon, h=h, kind=kind, output_limits=limits)
    final = 1.0 if kind == "setpoint" else 0.0  # integral action
    outside = np.nonzero(np.abs(y - final) > 0.02 * np.max(np.abs(y)))[0]
    settling = float(t[outside[-1]])
    assert settling < 0.8 * horizon
    return t, y, settling


@pytest.mark.parametrize("mult", [10, 100, 1000])
@pytest.mark.parametrize("kind", ["setpoint", "disturbance"])
@pytest.mark.parametrize("name", list(CASES))
def test_response_does_not_depend_on_the_simulated_time(name, kind, mult):
    """Simulated for 10×, 100× and 1000× the settling time, the response agrees with the RK4
    reference (over its horizon) within 1e-3 of the step, stays settled to the end (integral
    action: the final value is the setpoint, or zero after a load step), and for loops without a
    clamp agrees with python-control's Padé closed loop over the first 20 settling times."""
    c_text, p_text, theta, limits = CASES[name]
    c, p = from_expression(c_text), from_expression(p_text)
    t_ref, y_ref, settling = _reference(name, kind)
    sim = simulate_loop(c, p, theta, duration_s=mult * settling, kind=kind, output_limits=limits)
    assert sim.t[-1] >= mult * settling - 1e-9
    assert np.max(np.abs(np.interp(t_ref, sim.t, sim.y) - y_ref)) < TOL
    final = 1.0 if kind == "setpoint" else 0.0
    tail = sim.t > min(t_ref[-1], 5 * settling)
    assert np.max(np.abs(sim.y[tail] - final)) < TOL
    if limits is None:
        import control

        num, den = control.pade(theta, 12)
        pc, cc, delay = p.to_control(), c.to_control(), control.tf(num, den)
        closed = control.feedback(cc * pc * delay, 1) if kind == "setpoint" else control.feedback(pc * delay, cc)
        first = sim.t <= 20 * settling
        _, y_pade = control.step_response(closed, T=sim.t[first])
        assert np.max(np.abs(sim.y[first] - y_pade)) < TOL


@pytest.mark.parametrize("name", ["pi", "pid_with_kick"])
def test_step_figure_does_not_depend_on_duration(name):
    """The step-deviation figure between the analog loop and a 4 Hz firmware version of it is the
    same (within 1e-4 of the step) whether 3 or 300 settling times are simulated (common
    practice: a figure must not follow a numeric setting the user did not choose)."""
    from convert.digital import discretize

    c_text, p_text, theta, _ = CASES[name]
    c, p = from_expression(c_text), from_expression(p_text)
    cd = discretize(c, 4.0, "tustin").controller
    _, _, settling = _reference(name, "setpoint")
    figs = []
    for mult in (3, 300):
        a = simulate_loop(c, p, theta, duration_s=mult * settling)
        d = simulate_loop(cd, p, theta, duration_s=mult * settling, delay_s=0.05)
        figs.append(response_deviation(a, d))
    assert abs(figs[0] - figs[1]) < 1e-4
    assert figs[0] > 1e-3  # the 4 Hz hold does change the response: the figure measures something


SAMPLED = [
    # (controller, fs, plant, dead time, computation delay, limits): ours, delays fractional or whole
    ("2*(1 + 1/(5*s))", 8.0, "1/((3*s + 1)*(s + 1))", 0.537, 0.03, None),
    ("2*(1 + 1/(5*s))", 20.0, "1/((3*s + 1)*(s + 1))", 0.0, 0.05, (-1.0, 1.5)),
    ("2*(1 + 1/(5*s))", 2.0, "1/((3*s + 1)*(s + 1))", 1.3, 0.5, (-0.5, 2.2)),
    ("3*(1 + 1/(15*s))", 10.0, "0.04/(s*(15*s + 1))", 2.0, 0.02, (-40.0, 60.0)),
    ("1.2*(1 + 1/(0.5*s))", 200.0, "1.2/(0.8*s + 1)", 0.3, 0.005, (-10.0, 10.0)),
]


@pytest.mark.parametrize("kind", ["setpoint", "disturbance"])
@pytest.mark.parametrize("c_text,fs,p_text,theta,delay,limits", SAMPLED)
def test_sampled_loop_same_as_the_former_step_loop(c_text, fs, p_text, theta, delay, limits, kind):
    """Regression reference: the former step-by-step simulation (tests/loop_reference.py), on its
    own grid (duration/4000), every sub-step, within 1e-9 of the step, clamps acting or not."""
    from convert.digital import discretize

    cd = discretize(from_expression(c_text), fs, "tustin").controller
    p = from_expression(p_text)
    duration = 20.0
    t, y, u = stepwise_sampled_loop(
        cd, p, theta, duration_s=duration, steps=4000, kind=kind, delay_s=delay, output_limits=limits
    )
    sim = simulate_loop(cd, p, theta, duration_s=duration, steps=4000, kind=kind, delay_s=delay, output_limits=limits)
    assert sim.t.size == t.size and np.allclose(sim.t, t, rtol=0, atol=1e-12)
    assert np.max(np.abs(sim.y - y)) < 1e-9
    assert np.max(np.abs(sim.u - u)) < 1e-9


@pytest.mark.parametrize(
    "case", ["netlist_card_to_firmware", "pi_card_to_firmware", "slow_firmware_fails", "leadlag_position_fast"]
)
def test_demo_cases_same_as_the_former_step_loop(case):
    """The demo cases' firmware loops (their own delays, limits and signals): the new simulation
    on the former grid gives the former responses within 1e-9 of the step."""
    from pathlib import Path

    from convert.case import load_case
    from convert.digital import discretize

    c = load_case(Path(__file__).parent.parent / "cases" / f"{case}.toml")
    from convert.case import source_controller

    src = source_controller(c).controller
    if src.is_digital:
        pytest.skip("digital source: covered by the other cases")
    if not src.is_proper:
        from convert.digital import add_derivative_filter

        src = add_derivative_filter(src, c.digital.derivative_filter)
    fs = c.digital.fs_hz[0]
    cd = discretize(src, fs, c.digital.methods[0]).controller
    delay = c.digital.delay_for(fs)
    limits = c.digital.output_limits or c.signals.output_range
    duration = default_duration(src, c.plant.model, c.plant.dead_time_s)
    for kind, size in (("setpoint", c.signals.setpoint_step), ("disturbance", c.signals.disturbance_step)):
        t, y, u = stepwise_sampled_loop(
            cd,
            c.plant.model,
            c.plant.dead_time_s,
            duration_s=duration,
            steps=4000,
            kind=kind,
            step=size,
            delay_s=delay,
            output_limits=limits,
        )
        sim = simulate_loop(
            cd,
            c.plant.model,
            c.plant.dead_time_s,
            duration_s=duration,
            steps=4000,
            kind=kind,
            step=size,
            delay_s=delay,
            output_limits=limits,
        )
        assert np.max(np.abs(sim.y - y)) < 1e-9 * abs(size)


def test_analog_loop_without_dead_time_is_exact():
    """Reference: python-control step_response of feedback(C·P, 1): without dead time our analog
    loop is one exact discretization, so the two agree to rounding on any grid."""
    import control

    c, p = from_expression(CASES["pi"][0]), from_expression(CASES["pi"][1])
    for duration in (20.0, 2000.0):
        sim = simulate_loop(c, p, 0.0, duration_s=duration)
        _, y = control.step_response(control.feedback(c.to_control() * p.to_control(), 1), T=sim.t)
        assert np.max(np.abs(sim.y - y)) < 1e-9


def test_clamp_segments_are_exact_at_the_samples():
    """With the clamp acting, the sampled loop equals the former step loop (above) and the clamp
    holds: the output never leaves the limits and reaches the upper one."""
    from convert.digital import discretize

    cd = discretize(from_expression("2*(1 + 1/(5*s))"), 50.0, "tustin").controller
    sim = simulate_loop(cd, from_expression("1/((3*s + 1)*(s + 1))"), 0.2, duration_s=30.0, output_limits=(-1.0, 1.5))
    assert sim.u.max() == 1.5 and sim.u.min() >= -1.0


def test_deviation_figure_does_not_depend_on_the_step():
    """The deviation between an analog loop and its 10 Hz firmware version (an integrating plant
    with 2 s dead time and a sensitivity peak of 10 dB, ours) is the same within 1e-4 of the peak
    (the documented figure holds to 1e-3) whether both are simulated at 0.1, 0.02 or 0.005 s steps,
    or at the steps the loop's dynamics give (common practice: a figure must not follow a numeric
    setting the user did not choose)."""
    from convert.digital import discretize

    c = from_expression("3*(1 + 1/(60*s))")
    p = from_expression("0.04/(s*(15*s + 1))")
    cd = discretize(c, 10.0, "tustin").controller
    figs = []
    for h in (None, 0.1, 0.02, 0.005):
        a = simulate_loop(c, p, 2.0, duration_s=400.0, kind="disturbance", sub_step_s=h)
        d = simulate_loop(cd, p, 2.0, duration_s=400.0, kind="disturbance", delay_s=0.02, sub_step_s=h)
        figs.append(response_deviation(a, d) / np.max(np.abs(a.y)))
    assert max(figs) - min(figs) < 1e-4
    assert min(figs) > 1e-4  # the hold and delay do change the response
