"""Always-on checks of a realization against its source (convert.compare.ownchecks): an unstable
controller and a sign-inverted one fail the verdict with or without a plant, whatever criteria
are set. The case files are the reviewer's (tests/cases/review)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from convert.case import load_case
from convert.compare.evaluate import evaluate_case

CASES = Path(__file__).parent / "cases" / "review"


def _checks(results, key):
    return {j.realization: j for j in results.verdict.judgements if j.criterion == key}


def test_forward_euler_unstable_controller_fails_without_a_plant():
    """fe.toml: (s+2)/(0.005s+1) by forward Euler at 50 Hz puts the pole at z = 1 − 200/50 = −3
    (numpy.roots of the denominator 1 + 3 z^-1 agrees); the verdict FAILS on it with |z| = 3,
    while the matched form (pole e^(−200/50), inside) passes the check."""
    res = evaluate_case(load_case(CASES / "fe.toml"))
    assert res.verdict.overall == "fail"
    own = _checks(res, "controller_stable")
    fe = next(r for r in res.realizations if r.name.startswith("forward-euler"))
    ref = max(abs(np.roots(fe.controller.a)))
    assert ref == pytest.approx(3.0)
    assert own[fe.name].status == "fail" and own[fe.name].value == pytest.approx(ref, rel=1e-9)
    matched = next(r for r in res.realizations if r.name.startswith("matched"))
    assert own[matched.name].status == "pass"
    assert own[matched.name].value == pytest.approx(np.exp(-200 / 50), rel=1e-9)


def test_rate_advice_never_passes_an_unstable_forward_euler_rate():
    """Forward Euler maps s = −200 1/s to z = 1 − 200/fs, inside |z| = 1 only for fs > 100 Hz
    (numpy.roots checks both sides). The advised rate lies above it (the reviewer saw 3.34 Hz)."""
    from convert.digital import discretize

    res = evaluate_case(load_case(CASES / "fe.toml"))
    fe = next(a for a in res.rate_advice if a.method == "forward-euler")
    assert fe.checked_fs_hz is not None and fe.checked_fs_hz > 100.0
    src = res.reference
    below = discretize(src, 99.0, "forward-euler").controller
    above = discretize(src, fe.checked_fs_hz, "forward-euler").controller
    assert max(abs(np.roots(below.a))) > 1 > max(abs(np.roots(above.a)))


def test_compare_given_unstable_firmware_fails(run_cli):
    """The reviewer's compare: b = 200, −192, a = 1, 3 at 50 Hz against (s+2)/(0.005s+1), no
    plant: the pole z = −3 (numpy.roots([1, 3])) fails the verdict, exit 1."""
    assert max(abs(np.roots([1, 3]))) == pytest.approx(3.0)
    out = run_cli("compare", "(s+2)/(0.005s+1)", "digital: b=200,-192 a=1,3 fs=50Hz", "--band", "1m", "0.1")
    assert out.code == 1 and "controller stable on its own" in out.out and "FAIL" in out.out


def test_analog_right_half_plane_pole_fails_even_when_errors_pass():
    """B = −(s+2)(s+1)/((0.005s+1)(s−1)) has a pole at s = +1 (python-control agrees) and the
    same low-frequency action as A = (s+2)/(0.005s+1); with error limits wide enough to pass,
    the controller's own right-half-plane pole still fails the verdict (figure +1 1/s)."""
    import control

    from convert.compare.pair import compare_pair
    from convert.given import read_spec

    b_poles = control.tf([-1, -3, -2], np.polymul([0.005, 1], [1, -1])).poles()
    assert max(b_poles.real) == pytest.approx(1.0)
    res = compare_pair(
        read_spec("(s+2)/(0.005s+1)", "A"),
        read_spec("-(s+2)*(s+1)/((0.005s+1)*(s-1))", "B"),
        band_hz=(1e-3, 0.1),
        limits={"max_gain_error_db": 40, "max_phase_error_deg": 180},
    ).results
    status = {j.criterion: j for j in res.verdict.judgements}
    assert status["max_gain_error_db"].status == "pass" and status["max_phase_error_deg"].status == "pass"
    assert status["same_sign"].status == "pass"
    assert status["controller_stable"].status == "fail"
    assert status["controller_stable"].value == pytest.approx(max(b_poles.real), rel=1e-9)
    assert res.verdict.overall == "fail"


def test_sign_inverted_firmware_fails_with_only_a_gain_criterion():
    """signflip.toml: b = [−2.01, 1.99], a = [1, −1] at 10 Hz against 2(1 + 1/(10s)), only
    max_gain_error_db set, no plant. Evaluated directly with numpy.polyval, B/A at the band's
    bottom (1 mHz) is ≈ −1 (phase 180°): the "same action" check FAILS with that figure."""
    res = evaluate_case(load_case(CASES / "signflip.toml"))
    assert res.verdict.overall == "fail"
    (j,) = _checks(res, "same_sign").values()
    f = 1e-3
    z1 = np.exp(-2j * np.pi * f / 10.0)  # z^-1
    b_over_a = np.polyval([1.99, -2.01], z1) / np.polyval([-1.0, 1.0], z1)
    s = 2j * np.pi * f
    ratio = b_over_a / (2 * (1 + 1 / (10 * s)))
    assert abs(ratio + 1) < 1e-3
    assert j.status == "fail" and j.value == pytest.approx(abs(np.degrees(np.angle(ratio))), abs=1e-6)


def test_same_firmware_with_the_right_sign_passes(tmp_path):
    """The same case with b = [2.01, −1.99] (sign restored): the check passes with |phase| near 0
    and the verdict passes on its gain criterion."""
    text = (CASES / "signflip.toml").read_text().replace("b = [-2.01, 1.99]", "b = [2.01, -1.99]")
    (tmp_path / "ok.toml").write_text(text)
    res = evaluate_case(load_case(tmp_path / "ok.toml"))
    (j,) = _checks(res, "same_sign").values()
    assert j.status == "pass" and j.value < 1.0
    assert res.verdict.overall == "pass"


def test_diverging_loop_simulation_shows_no_numpy_warning(run_cli):
    """Finding 12: the unstable firmware of the compare above in a loop with 1/(s+1). python-control
    (plant sampled with a zero-order hold at 50 Hz, unity feedback) puts a closed-loop pole
    outside |z| = 1, so the true output leaves the float range within the simulated time; the
    simulation returns inf/nan there without numpy's overflow warning (pytest turns warnings into
    errors), the deviation figure is inf, and the CLI prints no RuntimeWarning."""
    import math

    import control

    from convert.compare.loop import response_deviation, simulate_loop
    from convert.controller import Controller

    c = control.tf([200, -192], [1, 3], 1 / 50)
    p = control.c2d(control.tf([1], [1, 1]), 1 / 50, "zoh")
    assert max(abs(control.feedback(c * p, 1).poles())) > 1
    ctrl = Controller.from_b_a([200, -192], [1, 3], 1 / 50)
    plant = Controller.analog([1], [1, 1])
    bad = simulate_loop(ctrl, plant, duration_s=60.0)
    assert not np.all(np.isfinite(bad.y))
    good = simulate_loop(Controller.analog([200, 400], [1, 200]), plant, duration_s=60.0)
    assert response_deviation(good, bad) == math.inf
    out = run_cli(
        "compare", "(s+2)/(0.005s+1)", "digital: b=200,-192 a=1,3 fs=50Hz", "--band", "1m", "0.1", "--plant", "1/(s+1)"
    )
    assert out.code == 1 and "RuntimeWarning" not in out.out + out.err and "overflow" not in out.out + out.err


def test_pole_on_the_unit_circle_that_is_not_an_integrator_fails():
    """Forward Euler of 2(1 + 1/(10s) + 0.5s/(1 + 0.05s)) at 10 Hz maps the filter pole s = −20
    to z = 1 − 20/10 = −1 (numpy.roots of a = [1, 0, −1] gives ±1): undamped at the Nyquist
    frequency, so the controller alone grows without bound for an input at fs/2. The check fails
    although |z| does not exceed 1; the integrator at z = +1 is not counted."""
    from convert.compare.ownchecks import stability_check
    from convert.controller import Controller
    from convert.digital import discretize

    src = Controller.analog([22, 40.2, 4], [1, 20, 0])
    fe = discretize(src, 10.0, "forward-euler").controller
    assert sorted(np.round(np.real(np.roots(fe.a)), 9)) == [-1.0, 1.0]
    assert stability_check(src, fe)["status"] == "fail"
    ok = discretize(src, 10.0, "tustin").controller
    assert stability_check(src, ok)["status"] == "pass"


def test_resonator_kept_on_the_unit_circle_passes():
    """A source with an undamped pair s = ±j·2 (a resonant controller, 1/(s² + 4)) keeps the pair
    on the unit circle under Tustin (|z| = 1 by the bilinear map; numpy.roots agrees): as many
    boundary poles as the source has, so the check passes (the pair is designed, not added)."""
    from convert.compare.ownchecks import stability_check
    from convert.controller import Controller
    from convert.digital import discretize

    src = Controller.analog([1, 1], [1, 0, 4])
    tu = discretize(src, 20.0, "tustin").controller
    assert np.allclose(np.abs(np.roots(tu.a)), 1.0, atol=1e-12)
    assert stability_check(src, tu)["status"] == "pass"


def test_step_deviation_of_an_unstable_loop_is_unbounded_not_a_number_of_the_run(tmp_path):
    """The closed loop of the forward-Euler form above with the plant 1/((2s + 1)(s + 1)) is
    unstable (python-control: plant sampled by ZOH at 10 Hz, unity feedback, a pole outside
    |z| = 1). Its simulated step deviation is only what the run's length made it, so the figure is
    +∞, "unbounded", and the criterion FAILS; the stable Tustin form keeps a finite figure."""
    import control

    c = control.tf([22, -39.98, 18.02], [1, 0, -1], 0.1)
    p = control.c2d(control.tf([1], [2, 3, 1]), 0.1, "zoh")
    assert max(abs(control.feedback(c * p, 1).poles())) > 1
    (tmp_path / "u.toml").write_text(
        '[case]\ntitle = "u"\n[source]\nexpression = "2*(1 + 1/(10s) + 0.5s/(1+0.05s))"\n'
        '[target.digital]\nfs = "10 Hz"\nmethods = ["forward-euler", "tustin"]\n'
        '[plant]\nmodel = "1/((2s+1)*(s+1))"\n[criteria]\nband = ["1 mHz", "2 Hz"]\nmax_step_deviation = "3 %"\n'
    )
    res = evaluate_case(load_case(tmp_path / "u.toml"))
    step = _checks(res, "max_step_deviation")
    fe = next(n for n in step if n.startswith("forward-euler"))
    tu = next(n for n in step if n.startswith("tustin"))
    assert step[fe].status == "fail" and step[fe].value == np.inf and step[fe].note.startswith("unbounded")
    assert np.isfinite(step[tu].value)


def test_library_evaluate_refuses_too_few_draws():
    """Below 200 draws the 0.5 %/99.5 % envelope has no draw beyond each end (1/0.005 = 200,
    arithmetic): the library refuses them as the command line does."""
    from convert.errors import InputError

    with pytest.raises(InputError, match="at least 200"):
        evaluate_case(load_case(Path(__file__).parents[1] / "cases" / "firmware_pid_to_opamp.toml"), draws=50)
