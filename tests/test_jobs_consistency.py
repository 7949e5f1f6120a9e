"""Job 3, end to end: one controller, every way in, every way out, the same numbers.

An ideal PID (invented): Kc = 2 (PB 50 %), Ti = 3 s (0.05 min, reset 20 repeats/min),
Td = 0.6 s (0.01 min), N = 10 (tf = 0.06 s), i.e. C(s) = 2·(1 + 1/(3s) + 0.6s/(0.06s + 1)).
Entered as an expression, as ``--pid`` words in the parallel, ideal and series forms (SI and
plant units), and as a catalog card (pid-single-amp) with parts, it must give the same
``Controller`` to 1e-12 relative; ``show``, ``digital``, ``circuit`` and ``card`` must agree on
it in their JSON. References: the closed-form polynomial of the expression (expanded by hand,
below), scipy.signal.cont2discrete (bilinear) for the digital coefficients, ngspice AC analysis
for the direct-acting circuit's sign.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from tests.spice import ac_sweep, require_ngspice

EXPRESSION = "2*(1 + 1/(3*s) + 0.6*s/(0.06*s + 1))"
# 2·(1 + 1/(3s) + 0.6s/(0.06s+1)) over the common denominator s·(0.06s + 1), made monic:
# numerator 2·(0.06s² + s + (0.06s+1)/3 + 0.6s²) = 1.32s² + 2.04s + 0.6667, over 0.06s² + s.
NUM = np.array([1.32, 2.04, 2 / 3]) / 0.06
DEN = np.array([1.0, 1 / 0.06, 0.0])

IDEAL_WORDS = [
    ("kc=2", "ti=3s", "td=0.6s", "n=10"),
    ("form=ideal", "pb=50%", "reset=20/min", "td=0.01min", "n=10"),
    ("form=standard", "kc=2", "ti=0.05min", "td=0.6s", "tf=60ms"),
    ("kc=2", "reset=0.3333333333333333/s", "td=0.6", "n=10"),
]
PARALLEL_WORDS = [
    ("kp=2", "ki=40/min", "kd=1.2s", "tf=0.06s"),
    ("form=parallel", "kp=2", "ki=0.6666666666666666", "kd=0.02min", "n=10"),
]


def _series_words(action: str = "reverse") -> tuple[str, ...]:
    """Series-form words computed from the ideal set (convert.pid's exact closed form), in full
    precision, as a firmware screen in series form would show them."""
    from convert.pid import PidSettings

    sf = PidSettings.from_ideal(2.0, 3.0, 0.6, n=10).series()
    return (
        "form=series",
        f"kc={sf.kc!r}",
        f"ti={sf.ti_s!r}s",
        f"td={sf.td_s!r}s",
        f"tf={sf.tf_s!r}s",
        f"action={action}",
    )


def _card_parts() -> dict[str, float]:
    """pid-single-amp parts that make the series set exactly: tf = R3·C1, Td' = (R1 + R3)·C1,
    K' = R2/R1, Ti' = R2·C2 (the catalog's design equations, checked against lcapy in
    test_circuit_topologies), with C1 = 1 µF."""
    from convert.pid import PidSettings

    sf = PidSettings.from_ideal(2.0, 3.0, 0.6, n=10).series()
    c1 = 1e-6
    r3 = sf.tf_s / c1
    r1 = sf.td_s / c1 - r3
    r2 = sf.kc * r1
    return {"R1": r1, "C1": c1, "R3": r3, "R2": r2, "C2": sf.ti_s / r2}


def _assert_same(c, num=NUM, den=DEN, rtol=1e-12):
    num = np.asarray(num, float)
    den = np.asarray(den, float)
    assert len(c.num) == len(num) and len(c.den) == len(den), (c.num, c.den)
    scale_n, scale_d = np.max(np.abs(num)), np.max(np.abs(den))
    assert np.all(np.abs(np.asarray(c.num) - num) <= rtol * scale_n), (c.num, num)
    assert np.all(np.abs(np.asarray(c.den) - den) <= rtol * scale_d), (c.den, den)


def test_expression_is_the_hand_expanded_polynomial():
    """Reference: the expression expanded by hand (module docstring), to 1e-12 relative."""
    from convert.controller import from_expression

    _assert_same(from_expression(EXPRESSION))


@pytest.mark.parametrize("words", IDEAL_WORDS + PARALLEL_WORDS, ids=lambda w: " ".join(w))
def test_pid_words_in_every_form_and_unit_give_the_same_controller(words):
    """Reference: the hand-expanded polynomial. Unit rules (common practice): PB % = 100/Kc,
    reset rate (repeats per unit time) = 1/Ti, minutes per repeat; parallel n means
    tf = kd/(kp·n)."""
    from convert.pid import pid_from_words

    _assert_same(pid_from_words(list(words)).to_controller())


def test_series_words_give_the_same_controller():
    """Reference: the hand-expanded polynomial; the series set comes from Åström & Hägglund's
    series ↔ ideal relations as implemented (with filter) in convert.pid."""
    from convert.pid import pid_from_words

    _assert_same(pid_from_words(list(_series_words())).to_controller())


def test_catalog_card_with_parts_gives_the_same_controller():
    """Reference: the hand-expanded polynomial, from pid-single-amp with the parts that make it
    (the stage's sign is reported separately; the controller is +C)."""
    from convert.circuit.topologies import get_topology

    _assert_same(get_topology("pid-single-amp").controller_from_parts(_card_parts()))


def _json(run_cli, *argv):
    res = run_cli(*argv, "--json")
    assert res.code == 0, res.err
    return json.loads(res.out)


def _word_sets(action="reverse"):
    suffix = () if action == "reverse" else ("action=direct",)
    sets = [w + suffix for w in IDEAL_WORDS + PARALLEL_WORDS]
    sets.append(_series_words(action))
    return sets


def test_show_circuit_card_json_agree_on_num_den(run_cli):
    """``show --json`` for the expression and every --pid form, ``circuit --json`` (its target)
    and ``card --json`` (catalog card with parts) carry the same num/den, to 1e-12 relative.
    Reference: the hand-expanded polynomial."""
    outputs = [_json(run_cli, "show", EXPRESSION)]
    outputs += [_json(run_cli, "show", "--pid", *w) for w in _word_sets()]
    parts = [f"{k}={v!r}" for k, v in _card_parts().items()]
    card = _json(run_cli, "card", "--topology", "pid-single-amp", "--part", *parts, "--no-sensitivity")
    outputs.append(card)
    for data in outputs:
        _assert_same(type("C", (), {"num": data["num"], "den": data["den"]}))
    for target in (
        _json(run_cli, "circuit", EXPRESSION, "--draws", "0")["target"],
        _json(run_cli, "circuit", "--pid", *_series_words(), "--draws", "0")["target"],
    ):
        _assert_same(type("C", (), target))
    assert card["pid"]["parallel"] == pytest.approx(
        {"kp": 2.0, "ki_per_s": 2 / 3, "kd_s": 1.2, "tf_s": 0.06}, rel=1e-12
    )


def _tustin_reference(num, den, fs_hz):
    """scipy.signal.cont2discrete(method='bilinear') as b/a in ascending powers of z^-1."""
    from scipy.signal import cont2discrete

    b, a, _ = cont2discrete((num, den), 1 / fs_hz, method="bilinear")
    b = np.ravel(b)
    return b / a[0], np.asarray(a) / a[0]


@pytest.mark.parametrize("action", ["reverse", "direct"])
def test_digital_json_agrees_for_every_input_and_carries_the_sign(run_cli, action):
    """``digital --json`` (tustin, fs = 50 Hz) gives the same b/a for the expression and every
    --pid form; the b/a equal scipy.signal.cont2discrete's bilinear transform of the
    hand-expanded polynomial (reference library) to 1e-9; direct action negates b and keeps a."""
    sign = 1.0 if action == "reverse" else -1.0
    b_ref, a_ref = _tustin_reference(sign * NUM, DEN, 50.0)
    sources = [("--pid", *w) for w in _word_sets(action)]
    if action == "reverse":
        sources.append((EXPRESSION,))
    else:
        sources.append((f"-({EXPRESSION})",))
    for src in sources:
        rows = _json(run_cli, "digital", *src, "--fs", "50Hz", "--method", "tustin")
        (row,) = rows
        np.testing.assert_allclose(row["b"], b_ref, rtol=1e-9, atol=1e-9 * np.max(np.abs(b_ref)), err_msg=str(src))
        np.testing.assert_allclose(row["a"], a_ref, rtol=1e-9, atol=1e-12, err_msg=str(src))


def test_direct_acting_circuit_realizes_minus_c_from_in_to_out(run_cli, tmp_path):
    """Direct action through ``loopshift circuit --pid ... action=direct --netlist FILE``: the
    JSON's realized num is the negative of the reverse-acting design's (same parts, the sign is
    carried, not lost), and the written netlist, simulated by ngspice AC analysis (reference
    simulator, as written), realizes −C(s) from in to out: within 0.05 dB / 0.5° of the realized
    controller, and at the lowest frequency the phase is near +90° (−ki/(jω)), not −90°."""
    require_ngspice()
    rev = _json(run_cli, "circuit", "--pid", *_series_words("reverse"), "--draws", "0")
    path = tmp_path / "direct.cir"
    dire = _json(run_cli, "circuit", "--pid", *_series_words("direct"), "--draws", "0", "--netlist", str(path))
    _assert_same(type("C", (), dire["target"]), -NUM, DEN)
    assert dire["parts"] == rev["parts"]
    np.testing.assert_allclose(dire["num"], -np.asarray(rev["num"]), rtol=1e-12)
    np.testing.assert_allclose(dire["den"], rev["den"], rtol=1e-12)
    assert rev["needs_inverter"] is True and dire["needs_inverter"] is False  # the inverting stage gives −C alone
    from convert.controller import Controller

    realized = Controller.analog(dire["num"], dire["den"])
    f, v = ac_sweep(path.read_text(), "out", 1e-3, 100.0, points_per_decade=10)
    ours = realized.frequency_response(f, via="zpk")
    assert np.max(np.abs(20 * np.log10(np.abs(ours) / np.abs(v)))) <= 0.05
    assert np.max(np.abs(np.angle(ours / v, deg=True))) <= 0.5
    assert np.angle(v[0], deg=True) == pytest.approx(90.0, abs=2.0)


def test_direct_acting_digital_and_circuit_library_paths_carry_the_sign():
    """Library level: discretize (tustin, zoh) of the direct set is −1 × that of the reverse set
    (b negated, a equal; reference: linearity of both methods, common practice), and the design's
    realized controller is −1 × the reverse design's."""
    from convert.circuit.design import design_circuit
    from convert.digital import discretize
    from convert.pid import pid_from_words

    rev = pid_from_words(["kc=2", "ti=3s", "td=0.6s", "n=10"])
    dire = pid_from_words(["kc=2", "ti=3s", "td=0.6s", "n=10", "action=direct"])
    for method in ("tustin", "zoh"):
        r, d = discretize(rev.to_controller(), 50.0, method), discretize(dire.to_controller(), 50.0, method)
        np.testing.assert_allclose(d.b, -np.asarray(r.b), rtol=1e-12, atol=1e-15)
        np.testing.assert_allclose(d.a, r.a, rtol=1e-12)
    dr = design_circuit(rev.to_controller(), settings=rev)
    dd = design_circuit(dire.to_controller(), settings=dire)
    assert dd.rounded == dr.rounded and dd.sign == -1 and dr.sign == 1
    np.testing.assert_allclose(dd.realized.num, -np.asarray(dr.realized.num), rtol=1e-12)


def test_regression_direct_pid_from_controller_has_no_negative_zero_gains():
    """Bug: reading a direct-acting PI back (pid_from_controller) gave kd = -0.0 (negation of a
    zero gain), shown as "-0" in tables and JSON. Reference: IEEE 754 sign of zero; the gains are
    non-negative by the PidSettings convention."""
    import math

    from convert.pid import pid_from_controller, pid_from_words

    pid = pid_from_controller(pid_from_words(["kc=2", "ti=0.5s", "action=direct"]).to_controller())
    assert pid.action == "direct"
    assert all(math.copysign(1.0, getattr(pid, k)) == 1.0 for k in ("kp", "ki", "kd", "tf"))


def test_regression_leaking_integrator_is_read_as_the_integrator():
    """Bug (see test_jobs_firmware_to_hardware): a PI whose integrator leaks at 1e-9 of its corner
    (finite op-amp gain) was "not a PID". It is read as the PI, and a leak at 1e-3 of the corner
    (a real lag) is not. Reference: the PI's closed form kp·(1 + 1/(Ti·s)) (common practice)."""
    from convert.controller import Controller
    from convert.pid import pid_from_controller, why_not_pid

    kp, ti = 2.0, 0.5
    leaky = Controller.analog([kp, kp / ti], [1.0, 1e-9 / ti])
    pid = pid_from_controller(leaky)
    assert pid is not None, why_not_pid(leaky)
    assert pid.kp == pytest.approx(kp, rel=1e-12) and pid.ki == pytest.approx(kp / ti, rel=1e-12)
    assert pid_from_controller(Controller.analog([kp, kp / ti], [1.0, 1e-3 / ti])) is None
