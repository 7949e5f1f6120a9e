"""Job 1, end to end: retrofit an analog card into firmware.

A card netlist (tests/netlists/jobs_retrofit_pid.cir, invented) is read by
``convert.circuit.card.analyze_card``; its controller gives PID parameters
(``convert.pid.pid_from_controller``); the PID is sampled with ``convert.digital.discretize``
(tustin and zoh); the difference equation is run with ``scipy.signal.lfilter`` (reference
library) and compared with ngspice's transient simulation (independent simulator) of the same
card driven by a step plus a ramp, sampled at the same rate.

The input: 0 until t0 = T/2, then A + slope·(t − t0). The step sits midway between two sample
instants (t_k = (k+1)·T, k = 0, 1, ...), so the firmware's samples of the input are not ambiguous
and the trapezoid (Tustin) and hold (ZOH) assumptions can be stated exactly below.
"""

from __future__ import annotations

import json
import pathlib

import numpy as np
import pytest

from tests.spice import pwl_source, require_ngspice, transient
from tests.test_mna_ngspice import spice_deck

CARD = pathlib.Path(__file__).parent / "netlists" / "jobs_retrofit_pid.cir"
FS_HZ = 1000.0
T = 1.0 / FS_HZ
SAMPLES = 250
STEP_V = 0.2
SLOPE_V_PER_S = 0.4
T0 = T / 2


def _card():
    from convert.circuit.card import analyze_card
    from convert.circuit.netlist import read_netlist_file

    return analyze_card(read_netlist_file(str(CARD)), with_sensitivities=False)


def _sample_times() -> np.ndarray:
    return T * np.arange(1, SAMPLES + 1)


def _input_samples() -> np.ndarray:
    return STEP_V + SLOPE_V_PER_S * (_sample_times() - T0)


def _deck_without_vin() -> str:
    deck = spice_deck(CARD.read_text())
    return "\n".join(line for line in deck.splitlines() if not line.strip().upper().startswith("VIN"))


def _ngspice_at_samples(source_line: str) -> np.ndarray:
    t_end = _sample_times()[-1] + T
    ts, vs = transient(_deck_without_vin() + "\n" + source_line, t_end, T / 50)
    return np.interp(_sample_times(), ts, vs)


@pytest.fixture(scope="module")
def card():
    return _card()


@pytest.fixture(scope="module")
def spice_step_ramp():
    """ngspice transient of the card: step + ramp (1 ns edge at t0), V(out) at the sample instants."""
    require_ngspice()
    t_end = _sample_times()[-1] + T
    line = pwl_source(
        "VIN", "in", [0.0, T0, T0 + 1e-9, t_end], [0.0, 0.0, STEP_V, STEP_V + SLOPE_V_PER_S * (t_end - T0)]
    )
    return _ngspice_at_samples(line)


def test_card_reads_as_the_pid_its_parts_make(card):
    """Reference: the card's transfer function in closed form (common practice, ideal op-amps):
    an inverting stage with input R1 ∥ (RD + 1/sC2) and feedback R2 + 1/sC1, then a unity
    inverter, gives (R2 + 1/sC1)·(1/R1 + sC2/(1 + s·RD·C2)). Compared coefficient by coefficient."""
    from convert.pid import pid_from_controller

    r1, c2, rd, r2, c1 = 82e3, 680e-9, 6.8e3, 330e3, 2.2e-6
    tf = rd * c2
    num = np.polymul([r2 * c1, 1.0], np.polyadd(np.polymul([1 / r1], [tf, 1.0]), [c2, 0.0]))
    den = np.polymul([c1, 0.0], [tf, 1.0])
    num, den = num / den[0], den / den[0]
    c = card.controller
    np.testing.assert_allclose(c.num, num, rtol=1e-7)
    np.testing.assert_allclose(c.den, den, rtol=1e-7, atol=1e-7 * np.max(np.abs(den)))
    pid = pid_from_controller(c)
    assert pid is not None and pid.action == "reverse"
    # the same expression expanded: R2/R1 + C2/C1 + 1/(s·R1·C1) + C2·(R2 − tf/C1)·s/(tf·s + 1)
    assert pid.tf == pytest.approx(tf, rel=1e-7)
    assert pid.ki == pytest.approx(1 / (r1 * c1), rel=1e-7)
    assert pid.kp == pytest.approx(r2 / r1 + c2 / c1, rel=1e-7)
    assert pid.kd == pytest.approx(c2 * (r2 - tf / c1), rel=1e-7)
    assert card.pid is not None and card.pid.kp == pytest.approx(pid.kp, rel=1e-12)


def _difference_equation_output(card, method: str) -> tuple[np.ndarray, object]:
    from scipy.signal import lfilter

    from convert.digital import discretize
    from convert.pid import pid_from_controller

    pid = pid_from_controller(card.controller)
    real = discretize(pid.to_controller(), FS_HZ, method)
    assert real.warnings == (), real.warnings  # the filter pole (34 Hz) is far below fs/4
    return lfilter(real.b, real.a, _input_samples()), pid


def test_tustin_difference_equation_follows_the_card_in_ngspice(card, spice_step_ramp):
    """References: scipy.signal.lfilter runs the difference equation; ngspice ``tran`` simulates the
    card. Tolerance (the trapezoid rule's error, common practice): Tustin is second order in
    T/τ; for the mode with the shortest time constant τ = tf (the derivative filter) the error
    after the step is about (T/tf)²/8 of the derivative kick (1/(1+x) against e^−x with
    x = T/(2·tf)) and the pole's mapping adds (T/tf)²/12 over the decay; we allow (T/tf)²/4 of the
    output's peak. Once the kick has decayed (t > 10·tf) the trapezoid rule integrates the ramp
    exactly, so only ngspice's accuracy (reltol 1e-6) remains: 1e-4 of the peak."""
    y, pid = _difference_equation_output(card, "tustin")
    ref = spice_step_ramp
    peak = np.max(np.abs(ref))
    err = np.abs(y - ref)
    bound = (T / pid.tf) ** 2 / 4 * peak
    assert err.max() <= bound, f"Tustin differs from ngspice by {err.max():.4g} V (bound {bound:.4g} V)"
    late = _sample_times() > T0 + 10 * pid.tf
    assert err[late].max() <= 1e-4 * peak, f"after the kick: {err[late].max():.3g} V"
    # The bound is not loose by orders of magnitude: the step's second-order error is visible.
    assert err.max() >= bound / 10


def test_zoh_difference_equation_is_exact_for_a_held_input(card):
    """References: scipy.signal.lfilter; ngspice ``tran`` of the card driven by the held input
    (the staircase the zero-order hold makes: sample k held from t_k on, 1 ns edges just before
    t_k). The ZOH equivalent is exact for a held input (step invariance, common practice), so the
    only difference is ngspice's accuracy: 1e-5 of the peak."""
    require_ngspice()
    y, _ = _difference_equation_output(card, "zoh")
    u = _input_samples()
    tt, vv = [0.0], [0.0]
    for t, uk in zip(_sample_times(), u):
        tt += [t - 2e-9, t - 1e-9]
        vv += [vv[-1], uk]
    tt.append(_sample_times()[-1] + T)
    vv.append(vv[-1])
    ref = _ngspice_at_samples(pwl_source("VIN", "in", tt, vv))
    err = np.abs(y - ref)
    assert err.max() <= 1e-5 * np.max(np.abs(ref)), f"ZOH vs held-input ngspice: {err.max():.3g} V"


def test_zoh_difference_equation_follows_the_card_within_one_sample_of_hold(card, spice_step_ramp):
    """References: scipy.signal.lfilter; ngspice ``tran`` with the continuous step + ramp.
    Tolerance (first order, common practice): the held input lags the true one by up to one
    sample, which the fastest mode (τ = tf) turns into an error of about (T/(2·tf)) of its
    response; we allow T/tf of the output's value at each sample plus 1e-4 of the peak. Two
    checks that it is the hold and not a wrong coefficient: the error is first order
    (larger than Tustin's), and it is at most T/tf of the output everywhere."""
    y, pid = _difference_equation_output(card, "zoh")
    y_t, _ = _difference_equation_output(card, "tustin")
    ref = spice_step_ramp
    err = np.abs(y - ref)
    bound = (T / pid.tf) * np.abs(ref) + 1e-4 * np.max(np.abs(ref))
    worst = int(np.argmax(err / bound))
    assert np.all(err <= bound), f"ZOH error {err[worst]:.4g} V at sample {worst} above {bound[worst]:.4g} V"
    assert err.max() > np.abs(y_t - ref).max()


def test_card_json_equals_the_library_result(card, run_cli):
    """The CLI's ``loopshift card FILE --json`` carries the library's numbers unchanged
    (num/den in descending powers of s, the PID table); reference: analyze_card itself (the
    outside references are the ngspice checks above on the same controller)."""
    res = run_cli("card", str(CARD), "--json", "--no-sensitivity")
    assert res.code == 0, res.err
    data = json.loads(res.out)
    np.testing.assert_allclose(data["num"], card.controller.num, rtol=1e-15)
    np.testing.assert_allclose(data["den"], card.controller.den, rtol=1e-15, atol=1e-300)
    table = card.pid.table()
    assert data["pid"]["parallel"] == pytest.approx(table["parallel"], rel=1e-15)
    assert data["pid"]["ideal"] == pytest.approx(table["ideal"], rel=1e-15)
    assert data["pid"]["action"] == "reverse"
