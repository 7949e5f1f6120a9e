"""The source loop (and every target loop) is checked for closed-loop stability before anything
is compared with it: dead time exact, and the controller's action against the plant's gain sign.

Reference library: python-control. An analog loop's closed-loop poles are those of
``feedback(C·P·pade(θ, 12), 1)`` (a 12th-order Padé stand-in for the dead time, accurate far
beyond the frequencies that decide these loops); a digital loop's are those of
``feedback(C(z)·z^-n·sample_system(P, T, "zoh"), 1)`` with a whole number n of periods of delay.
The loops are our own invented scenarios, none within 2 % of its stability boundary.
"""

from __future__ import annotations

import numpy as np
import pytest

from convert.compare.stability import loop_stability, low_frequency_gain
from convert.controller import from_expression


def _pade_unstable_count(c, p, theta):
    import control

    loop = c.to_control() * p.to_control()
    if theta > 0:
        num, den = control.pade(theta, 12)
        loop = loop * control.tf(num, den)
    poles = control.feedback(loop, 1).poles()
    return int(np.sum(poles.real > 1e-9))


ANALOG = [
    ("2*(1 + 1/(5*s))", "1/((3*s + 1)*(s + 1))", 0.5),
    ("20*(1 + 1/(5*s))", "1/((3*s + 1)*(s + 1))", 0.5),  # too much gain: unstable
    ("-2*(1 + 1/(5*s))", "1/((3*s + 1)*(s + 1))", 0.5),  # direct action on a positive-gain plant
    ("5", "1/(2*s + 1)", 1.0),  # first order plus dead time, high gain
    ("6*(1 + 1/(2*s))", "1/(2*s + 1)", 1.0),  # ... under a PI (CASE_GAIN below)
    ("3", "1/(2*s + 1)", 1.0),
    ("1.5", "1/(2*s + 1)", 1.0),
    ("8*(1 + 1/(20*s) + 2*s/(0.2*s + 1))", "0.5/((30*s + 1)*(5*s + 1))", 1.0),
    ("0.5*(1 + 1/(2*s))", "2/(s + 1)", 3.0),
    ("2", "1/(s - 1)", 0.2),  # open-loop unstable plant, stabilized
    ("2", "1/(s - 1)", 0.8),  # ... and lost to the dead time
    ("0.5", "1/(s - 1)", 0.0),
    ("(s + 1)/(0.1*s + 1)", "1/(s*(s + 2))", 0.3),
    ("4*(s + 0.5)/(s*(0.1*s + 1))", "1/(s^2 + 0.2*s + 4)", 0.05),
    ("0.8*(1 + 1/(4*s))", "3*(1 - 0.5*s)/((2*s + 1)*(4*s + 1))", 0.7),  # right-half-plane plant zero
    ("12*(1 + 1/(4*s))", "3*(1 - 0.5*s)/((2*s + 1)*(4*s + 1))", 0.7),
]


@pytest.mark.parametrize("c_text,p_text,theta", ANALOG)
def test_analog_stability_agrees_with_pade_poles(c_text, p_text, theta):
    """Reference: python-control closed-loop poles with a 12th-order Padé (see module docstring)."""
    c, p = from_expression(c_text), from_expression(p_text)
    s = loop_stability(c, p, theta)
    assert s.unstable_poles == _pade_unstable_count(c, p, theta)
    assert s.stable == (s.unstable_poles == 0) and not s.marginal


def test_dead_time_decides_stability_where_margins_of_the_rational_part_do_not():
    """Common practice: a proportional loop on 1/(2s+1) is stable for any gain without dead time;
    with one second of dead time the limit gain is about 4.2 (python-control with Padé agrees)."""
    p = from_expression("1/(2*s + 1)")
    for k, theta, stable in ((50.0, 0.0, True), (3.0, 1.0, True), (5.0, 1.0, False)):
        c = from_expression(f"{k}")
        assert loop_stability(c, p, theta).stable is stable
        assert (_pade_unstable_count(c, p, theta) == 0) is stable


@pytest.mark.parametrize("fs,extra", [(1.0, 0), (2.0, 1), (4.0, 1), (8.0, 2)])
@pytest.mark.parametrize("kc", [2.0, 4.0, 9.0])
def test_sampled_loop_stability_agrees_with_python_control(fs, extra, kc):
    """Reference: python-control poles of the sampled loop C(z)·z^-n·P_zoh(z) (whole-period delays:
    dead time 0.5 s at these rates, plus ``extra`` periods of computation delay)."""
    import control

    from convert.digital import discretize

    c = from_expression(f"{kc}*(1 + 1/(5*s))")
    p = from_expression("1/((3*s + 1)*(s + 1))")
    t = 1.0 / fs
    theta = 0.5 if fs >= 2 else 1.0
    cd = discretize(c, fs, "tustin").controller
    s = loop_stability(cd, p, theta, delay_s=extra * t)
    n = int(round((theta + extra * t) / t))
    z = control.tf([1, 0], [1], t)
    loop = cd.to_control() * (1 / z**n) * control.sample_system(p.to_control(), t, method="zoh")
    poles = control.feedback(loop, 1).poles()
    assert s.unstable_poles == int(np.sum(np.abs(poles) > 1 + 1e-9))


def test_marginal_loop_is_not_stable():
    """Closed form: P control of a double integrator, 1 + K/s² = 0 has roots ±j√K on the axis."""
    s = loop_stability(from_expression("10"), from_expression("1/s^2"), 0.0)
    assert not s.stable and s.marginal


def test_low_frequency_gain_reads_integrators_out():
    """Closed form: 2(1 + 1/(5s)) ≈ 0.4/s as s → 0; its Tustin image at 10 Hz has the same K."""
    from convert.digital import discretize

    c = from_expression("2*(1 + 1/(5*s))")
    assert low_frequency_gain(c) == pytest.approx((0.4, 1))
    k, m = low_frequency_gain(discretize(c, 10.0, "tustin").controller)
    assert m == 1 and k == pytest.approx(0.4, rel=1e-9)


def test_sign_inverted_flag_and_words():
    """A direct-acting controller on a positive-gain plant: positive feedback at low frequency,
    and reversing the action makes it stable (python-control with Padé agrees on both)."""
    c, p = from_expression("-2*(1 + 1/(5*s))"), from_expression("1/((3*s + 1)*(s + 1))")
    s = loop_stability(c, p, 0.5, what="the source loop")
    assert s.sign_inverted and s.reversed_is_stable
    assert "the source loop is unstable with this plant" in s.message
    assert "check the action" in s.message and "plant gain sign" in s.message
    assert _pade_unstable_count(c.scaled(-1.0), p, 0.5) == 0


def test_stable_but_sign_inverted_loop_fails():
    """A direct-acting proportional controller of gain 0.5 on a positive-gain plant that is stable
    on its own: L(0) = −0.5, the closed loop is stable (python-control with Padé agrees) but the
    controller pushes the wrong way — the action is inverted, and the verdict fails on it."""
    from convert.compare.verdict import stability_judgements

    c, p = from_expression("-0.5"), from_expression("1/((3*s + 1)*(s + 1))")
    s = loop_stability(c, p, 0.5, what="the source loop")
    assert s.stable and _pade_unstable_count(c, p, 0.5) == 0
    assert s.sign_inverted and not s.acceptable
    assert "negative low-frequency loop gain" in s.message and "check the action" in s.message
    (j,) = stability_judgements({"source": s})
    assert j.status == "fail"


def test_open_loop_unstable_plant_needs_negative_loop_gain_without_a_sign_alarm():
    """1/(s − 1) with gain 2: L(0) = −2 is how this plant is stabilized (common practice), so a
    stable loop with a negative low-frequency gain raises nothing."""
    s = loop_stability(from_expression("2"), from_expression("1/(s - 1)"), 0.2)
    assert s.stable and s.low_frequency_sign < 0 and not s.sign_inverted and s.message == ""


CASE_SIGN = """
[case]
title = "Mixing tank: direct-acting PI on a positive-gain valve"

[source.pid]
kc = 2
ti = "5 s"
action = "direct"

[target.digital]
fs = "20 Hz"
methods = ["tustin"]

[plant]
model = "1/((3s + 1)(s + 1))"
dead_time = "0.5 s"

[criteria]
band = ["1 mHz", "0.2 Hz"]
max_gain_error_db = 1
max_phase_error_deg = 10
max_phase_margin_change_deg = 5
"""

CASE_GAIN = """
[case]
title = "Dosing pump: first order plus dead time under a PI with far too much gain"

[source.pid]
kc = 6
ti = "2 s"

[target.digital]
fs = "20 Hz"
methods = ["tustin"]

[plant]
model = "1/(2s + 1)"
dead_time = "1 s"

[criteria]
band = ["1 mHz", "0.2 Hz"]
max_gain_error_db = 1
max_phase_error_deg = 10
"""

CASE_TARGET = """
[case]
title = "Conveyor speed: a 2 Hz task that loses the loop"

[source.pid]
kc = 4
ti = "5 s"

[target.digital]
fs = "2 Hz"
methods = ["tustin"]
delay_samples = 1

[plant]
model = "1/((3s + 1)(s + 1))"
dead_time = "0.5 s"

[criteria]
band = ["1 mHz", "0.05 Hz"]
max_gain_error_db = 3
max_phase_error_deg = 60
"""


def _write(tmp_path, text):
    path = tmp_path / "case.toml"
    path.write_text(text)
    return path


@pytest.mark.parametrize("text,sign", [(CASE_SIGN, True), (CASE_GAIN, False)])
def test_unstable_source_fails_with_the_message_on_top(tmp_path, run_cli, text, sign):
    """An unstable source loop (ours: a direct-acting PI on a positive-gain plant; a first order
    plus dead time plant under too much gain — unstable by python-control's Padé-12 poles too,
    see ANALOG above) is stated at the top of the terminal output, report.html and report.md, the
    verdict fails, and no margin of it is shown."""
    from convert.case import parse_case, source_controller

    case = parse_case(text, "case.toml")
    assert _pade_unstable_count(source_controller(case).controller, case.plant.model, case.plant.dead_time_s) > 0
    path = _write(tmp_path, text)
    out = tmp_path / "rep"
    res = run_cli("report", str(path), "--out", str(out))
    assert res.code == 1
    first = res.out.splitlines()[1]
    assert first.startswith("WARNING: The source loop is unstable with this plant")
    assert "check the action or the plant gain sign" in res.out.replace("\n", " ").replace("(direct or reverse) ", "")
    assert ("positive feedback" in res.out) is sign
    html = (out / "report.html").read_text()
    md = (out / "report.md").read_text()
    assert html.index('class="alarm"') < html.index('class="verdict')
    assert md.index("Warning: The source loop is unstable") < md.index("**Verdict: FAIL**")
    row = next(line for line in md.splitlines() if line.startswith("| source | ") and "unstable loop" in line)
    assert "dB" not in row and "°" not in row  # no margins of the unstable loop
    # the budget's margin columns say which loop was unstable, not that each row's effect made it so
    budget_rows = [line for line in md.splitlines() if line.startswith("| Discretization method")]
    assert budget_rows and all("source loop unstable" in line for line in budget_rows)
    import json

    data = json.loads((out / "results.json").read_text())
    assert data["loop_check"]["source_stability"]["stable"] is False
    assert data["verdict"] == "fail"


def test_unstable_target_loop_fails_though_error_criteria_pass(tmp_path):
    """The source loop is stable (python-control with Padé agrees); the 2 Hz task with one sample
    of delay is not (python-control's sampled poles agree): the gain and phase errors pass their
    loose limits, and the verdict still fails on the target's stability."""
    from convert.case import load_case
    from convert.compare.evaluate import evaluate_case

    res = evaluate_case(load_case(_write(tmp_path, CASE_TARGET)))
    assert res.source_stability.stable
    (r,) = res.realizations
    assert not r.stability.stable
    status = {j.criterion: j.status for j in res.verdict.judgements if j.realization == r.name}
    assert status["max_gain_error_db"] == "pass" and status["max_phase_error_deg"] == "pass"
    assert status["closed_loop_stable"] == "fail" and res.verdict.overall == "fail"
    assert res.alarms and "tustin @ 2 Hz is unstable" in res.alarms[0]
    # the budget table leaves out the margin changes and says which loop was unstable: the total
    # (every effect on), not each row's own effect
    from convert.report.tables import all_tables

    _, _, rows = next(t for t in all_tables(res) if t[0].startswith("Error budget"))
    assert rows and all(row[3] == "total loop unstable" for row in rows if row[1] != "not applicable")


@pytest.mark.parametrize("fs", [20.0, 50.0])
@pytest.mark.parametrize("kc", [0.5, 2.0, 6.0, 12.0])
def test_long_delay_line_count_agrees_with_eigenvalues(fs, kc):
    """A sampled loop whose dead time is many periods (4 s at 20–50 Hz: 80–200 held outputs)
    is counted on the unit circle past its delay line, not by eigenvalues of the full matrix.
    Reference: numpy.linalg.eigvals of the full sampled-loop state matrix. (python-control's
    feedback() poles are no reference here: they root a polynomial of degree 80–200, and for
    kc = 0.5 put 12 poles outside |z| = 1 where the state matrix has none.) The larger gains
    are unstable (the count is not always zero)."""
    from convert.compare.loop import sampled_loop_matrix
    from convert.compare.stability import count_outside_unit_circle
    from convert.digital import discretize

    c = from_expression(f"{kc}*(1 + 1/(20*s))")
    p = from_expression("1/((8*s + 1)*(2*s + 1))")
    cd = discretize(c, fs, "tustin").controller
    s = loop_stability(cd, p, 4.0)
    assert "delay line" in s.method
    a = sampled_loop_matrix(cd, p, 4.0)
    lam = np.abs(np.linalg.eigvals(a))
    want = int(np.sum(lam > 1 + 1e-9))
    assert s.unstable_poles == want and count_outside_unit_circle(a) == (want, False)
    assert (want > 0) == (kc >= 6.0)


def test_long_delay_count_agrees_with_eigenvalues_on_random_loops():
    """40 random loops of our own (PI by Tustin, ZOH or forward Euler, first- or second-order
    plant, dead time 0–3 s at 1–100 Hz, gains to instability): the count past the delay line
    equals numpy.linalg.eigvals of the full sampled-loop matrix (|λ| > 1 + 1e-9)."""
    from convert.compare.loop import sampled_loop_matrix
    from convert.compare.stability import count_outside_unit_circle
    from convert.controller import Controller
    from convert.digital import discretize

    rng = np.random.default_rng(7)
    seen = unstable = 0
    for _ in range(40):
        fs = float(rng.choice([1.0, 10.0, 100.0]))
        kc, ti, tau = rng.uniform(0.1, 20), rng.uniform(0.5, 50), rng.uniform(0.5, 20)
        cd = discretize(Controller.analog([kc * ti, kc], [ti, 0]), fs, str(rng.choice(["tustin", "zoh"]))).controller
        p = (
            Controller.analog([1.0], [tau * tau / 4, tau, 1])
            if rng.random() < 0.5
            else Controller.analog([1.0], [tau, 1])
        )
        a = sampled_loop_matrix(cd, p, float(rng.uniform(0, 3)))
        got = count_outside_unit_circle(a)
        if got is None:  # no delay line (dead time under a period)
            continue
        lam = np.abs(np.linalg.eigvals(a))
        assert got == (int(np.sum(lam > 1 + 1e-9)), False)
        seen += 1
        unstable += got[0] > 0
    assert seen >= 25 and unstable >= 3
