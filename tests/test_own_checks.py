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
