"""Nodal analysis, two-input cards, clamps and sensitivities against closed-form circuit algebra.

The closed forms are the standard op-amp and RC results (inverting amplifier −Zf/Zin,
non-inverting 1 + Rf/Rg, unity-gain Sallen-Key low-pass, buffered RC sections multiply) —
common practice, written out in each test.
"""

from __future__ import annotations

import pathlib

import numpy as np
import pytest

from convert.circuit.card import analyze_card
from convert.circuit.clamps import find_clamps
from convert.circuit.mna import transfer_function, transfer_function_result, transfer_functions
from convert.circuit.netlist import read_netlist
from convert.controller import Controller
from convert.errors import InputError

HERE = pathlib.Path(__file__).parent / "netlists"


def same(c: Controller, num, den, rtol=1e-9):
    ref = Controller.analog(num, den)
    assert len(c.num) == len(ref.num) and len(c.den) == len(ref.den), (c.num, c.den, ref.num, ref.den)
    np.testing.assert_allclose(c.num, ref.num, rtol=rtol, atol=rtol * max(map(abs, ref.num)))
    np.testing.assert_allclose(c.den, ref.den, rtol=rtol, atol=rtol * max(map(abs, ref.den)))


def test_inverting_pi():
    """Common practice: inverting stage −Zf/Zin with Zf = R2 + 1/(sC1): −(R2/R1) − 1/(R1 C1 s)."""
    c = transfer_function(read_netlist((HERE / "pi_card.cir").read_text()))
    same(c, [-4.7, -10.0], [1.0, 0.0])
    assert c.integrator_count() == 1


def test_non_inverting_and_single_pole_follower():
    """Common practice: non-inverting gain 1 + Rf/Rg; a single-pole op-amp A(s) = a0/(1 + s a0/ωt)
    as a follower gives A/(1 + A) = a0 ωt / ((1 + a0) ωt ... ) i.e. ωt·a0/(a0+1) / (s + ωt(a0+1)/a0)."""
    c = transfer_function(read_netlist("t\nVIN in 0\nX1 in n out OPAMP\nRF out n 90k\nRG n 0 10k\n"))
    same(c, [10.0], [1.0])
    a0, gbw = 1e5, 1e6
    wt = 2 * np.pi * gbw
    c = transfer_function(read_netlist(f"t\nVIN in 0\nX1 in out out OPAMP1P gbw={gbw} a0={a0}\n"))
    pole = wt * (1 + a0) / a0
    same(c, [pole * a0 / (1 + a0)], [1.0, pole], rtol=1e-8)


def test_sallen_key_complex_poles():
    """From memory (standard unity-gain Sallen-Key low-pass, C1 to the output, C2 to ground):
    H = 1 / (R1 R2 C1 C2 s² + C2 (R1 + R2) s + 1)."""
    r1, r2, c1, c2 = 10e3, 22e3, 20e-9, 4.7e-9
    text = f"t\nVIN in 0\nR1 in a {r1}\nR2 a b {r2}\nC1 a out {c1}\nC2 b 0 {c2}\nX1 b out out OPAMP\n"
    c = transfer_function(read_netlist(text))
    same(c, [1.0], [r1 * r2 * c1 * c2, c2 * (r1 + r2), 1.0])
    assert np.all(np.abs(c.poles().imag) > 0)


def test_widely_spread_time_constants_stay_exact():
    """Common practice: buffered RC sections multiply. Time constants from 10 µs to 1000 s (eight
    decades) plus an integrator; poles must come out to 1e-8 relative."""
    taus = [1e-5, 1e-2, 1.0, 1e3]
    lines = ["t", "VIN in 0", "R0 in n0 1meg", "C0 n0 o0 1u", "X0 0 n0 o0 OPAMP"]  # -1/s
    prev = "o0"
    for i, tau in enumerate(taus, start=1):
        lines += [f"R{i} {prev} a{i} 10k", f"C{i} a{i} 0 {tau / 1e4:.12g}", f"X{i} a{i} o{i} o{i} OPAMP"]
        prev = f"o{i}"
    lines += [f"RL {prev} out 1k", "RL2 out 0 1k"]
    c = transfer_function(read_netlist("\n".join(lines) + "\n"))
    expected = np.sort([-1.0 / t for t in taus] + [0.0])
    got = np.sort(c.poles().real)
    np.testing.assert_allclose(got, expected, rtol=1e-8, atol=1e-12)
    assert c.gain * np.prod(taus) == pytest.approx(-0.5, rel=1e-8)


def test_degree_never_exceeds_reactive_parts():
    """Issue 5 item 4: numerator and denominator degrees ≤ the number of reactive parts."""
    for path in sorted(HERE.glob("*.cir")):
        n = read_netlist(path.read_text(), path.name)
        reactive = sum(e.is_reactive for e in n.linear_elements)
        inputs = ["VSP", "VPV"] if path.name.startswith("sp_pv") else ["VIN"]
        for r in transfer_functions(n, inputs).values():
            assert r.controller.order <= reactive and len(r.controller.num) - 1 <= reactive, path.name
            assert r.max_fit_error < 1e-6


def test_two_input_card_structure_and_cancellation():
    """Closed form for tests/netlists/sp_pv_card.cir: u = Zf/Rsp·r − Zf·(1/Rpv + sCd/(1 + s Rd Cd))·y with
    Zf = R2 + 1/(s C1); the setpoint path never sees the derivative network's pole at 1/(Rd Cd)."""
    r2, c1, rsp, rpv, cd, rd = 150e3, 10e-6, 100e3, 100e3, 1e-6, 10e3
    a = analyze_card(
        read_netlist((HERE / "sp_pv_card.cir").read_text(), "sp_pv_card.cir"),
        setpoint="VSP",
        measurement="VPV",
        with_sensitivities=False,
    )
    zf = Controller.analog([r2 * c1, 1.0], [c1, 0.0])
    y = Controller.analog([rd * cd + rpv * cd, 1.0], [rpv * rd * cd, rpv])
    feedback = zf.series(y)
    same(a.controller, feedback.num, feedback.den, rtol=1e-8)
    same(a.results["VSP"].controller, [r2 / rsp, 1.0 / (rsp * c1)], [1.0, 0.0], rtol=1e-8)
    ((zero, pole),) = a.results["VSP"].cancelled
    assert pole.real == pytest.approx(-1.0 / (rd * cd), rel=1e-6)
    pid = a.pid
    assert pid.c == 0.0 and pid.ki == pytest.approx(1.0 / (c1 * rpv))
    assert pid.b * pid.kp == pytest.approx(r2 / rsp, rel=1e-8)  # b·kp = R2/Rsp
    assert pid.tf == pytest.approx(rd * cd, rel=1e-8)
    assert "must reproduce" in a.structure.description


def test_two_input_general_filter_when_integrals_differ():
    """When Rsp ≠ Rpv the setpoint integral differs from the feedback one: no b/c weighting fits,
    so a general setpoint filter F = H_sp / C is reported (F(0) = Rpv/Rsp by the closed form)."""
    text = (HERE / "sp_pv_card.cir").read_text().replace("RSP spn n1 100k", "RSP spn n1 200k")
    a = analyze_card(read_netlist(text), setpoint="VSP", measurement="VPV", with_sensitivities=False)
    assert a.structure.pid is None
    assert a.structure.setpoint_filter.dc_gain() == pytest.approx(0.5, rel=1e-8)
    assert "general filter" in a.structure.description


def test_clamp_limits():
    """Common practice: back-to-back zeners limit at BV + one forward drop each way; a diode from
    ground (anode) to the output stops the output going below about −0.65 V."""
    n = read_netlist((HERE / "clamped_pi.cir").read_text(), "clamped_pi.cir")
    clamps = {c.diodes: c for c in find_clamps(n)}
    zener = clamps[("DZ2", "DZ1")] if ("DZ2", "DZ1") in clamps else clamps[("DZ1", "DZ2")]
    assert zener.positive_v == pytest.approx(4.7 + 0.65) and zener.negative_v == pytest.approx(4.7 + 0.65)
    assert "feedback of X1" in zener.role
    d3 = clamps[("D3",)]
    assert {d3.node_a, d3.node_b} == {"0", "out"}
    down = d3.positive_v if d3.node_a == "0" else d3.negative_v
    up = d3.negative_v if d3.node_a == "0" else d3.positive_v
    assert down == pytest.approx(0.65) and up == np.inf
    a = analyze_card(n, with_sensitivities=False)
    assert any("DZ1" in note and "left out" in note for note in a.notes)
    same(a.controller, [-5.0, -1.0 / (20e3 * 470e-9)], [1.0, 0.0])


def test_sensitivities_of_a_pi_card():
    """Closed form for the inverting PI: kp = R2/R1, ki = 1/(R1 C1), zero at 1/(2π R2 C1): the
    elasticities are ±1 or 0."""
    a = analyze_card(read_netlist((HERE / "pi_card.cir").read_text()))
    rows = {r.part: r.effects for r in a.sensitivities}
    assert rows["R2"]["kp"] == pytest.approx(1.0, abs=1e-5)
    assert rows["R1"]["kp"] == pytest.approx(-1.0, abs=1e-5)
    assert rows["R1"]["ki (1/s)"] == pytest.approx(-1.0, abs=1e-5)
    assert rows["C1"]["ki (1/s)"] == pytest.approx(-1.0, abs=1e-5)
    assert rows["R2"]["ki (1/s)"] == pytest.approx(0.0, abs=1e-5)
    assert rows["C1"]["zero 1 (Hz)"] == pytest.approx(-1.0, abs=1e-5)


def test_pot_sensitivity_matches_the_divider_formula():
    """Closed form: the pot's wiper feeds R1 into a virtual ground, so the gain is
    k(θ) = θ_b / (R1 + R_T θ_a θ_b) with θ_a + θ_b = 1 (Thevenin of the divider); the row is
    d ln k / d θ_a per 1 % of travel."""
    a = analyze_card(read_netlist((HERE / "pot_gain.cir").read_text()))
    rows = {r.part: r for r in a.sensitivities}
    assert rows["RP1"].kind == "pot" and rows["RP1"].value == pytest.approx(100e3)
    rt, r1, ta = 100e3, 47e3, 0.3

    def k(t):
        return (1 - t) / (r1 + rt * t * (1 - t))

    h = 1e-6
    expected = (np.log(k(ta + h)) - np.log(k(ta - h))) / (2 * h)  # per unit travel = % per 1 % of travel
    assert rows["RP1"].effects["kp"] == pytest.approx(expected, rel=1e-4)


def test_input_and_output_names_and_other_sources_zeroed():
    """Issue 5 item 1: input and output are nameable; other sources are zeroed (a DC offset source in
    series does not change the small-signal gain — superposition, common practice)."""
    text = "t\nVERR e 0\nVOFF e x DC 2.5\nR1 x n 10k\nR2 n u1 20k\nX1 0 n u1 OPAMP\n"
    c = transfer_function(read_netlist(text), "verr", "U1")
    same(c, [-2.0], [1.0])
    with pytest.raises(InputError, match="input source 'VIN' not found; voltage sources in the file: VERR, VOFF"):
        transfer_function(read_netlist(text))
    with pytest.raises(InputError, match="output node 'out' not found"):
        transfer_function(read_netlist(text), "VERR")


@pytest.mark.parametrize(
    "text, pattern",
    [
        ("t\nVIN in 0\nR1 in out 1k\nR2 out 0 1k\nR3 a b 1k\n", r"^n.cir:5: R3: node 'a' is floating"),
        (
            "t\nVIN in 0\nC1 in n1 1u\nC2 n1 out 1u\nX1 0 n1 out OPAMP\n",
            r"^n.cir:5: X1: the op-amp's inverting input \(node 'n1'\) has no DC path",
        ),
        (
            "t\nVIN in 0\nR1 in n1 1k\nX1 n1 0 out OPAMP\nR2 out 0 1k\n",
            r"^n.cir:4: X1: the circuit equations are singular",
        ),
        ("t\nVIN in 0\nV2 in 0\nR1 in out 1k\nR2 out 0 1k\n", r"^n.cir:3: V2: the circuit equations are singular"),
        (
            "t\nVIN in 0\nR1 in 0 1k\nR2 out 0 1k\nR3 out 0 1k\n",
            r"^n.cir: output: the output node does not depend on VIN",
        ),
    ],
)
def test_circuit_errors(text, pattern):
    """Issue 5 item 6: floating node, op-amp input without DC path, singular circuit: file:line: element."""
    with pytest.raises(InputError, match=pattern):
        transfer_function(read_netlist(text, "n.cir"))


def test_result_is_a_controller_other_commands_use():
    """The result is the canonical Controller; scipy.signal.tf2zpk agrees on its zeros, poles, gain
    (reference library: scipy)."""
    from scipy.signal import tf2zpk

    r = transfer_function_result(read_netlist((HERE / "two_stage_filter.cir").read_text()))
    z, p, k = tf2zpk(r.controller.num, r.controller.den)
    np.testing.assert_allclose(np.sort_complex(p), np.sort_complex(r.controller.poles()), rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(np.sort_complex(z), np.sort_complex(r.controller.zeros()), rtol=1e-9)
    assert k == pytest.approx(r.controller.gain)


def test_regression_zero_near_origin_not_cancelled_against_integrator():
    """Regression (found by a random-card run): a zero at −1.738e-3 rad/s was cancelled against a pole
    at 0 because the cancellation floor scaled with the highest frequency. Reference: the built-in
    check against a direct complex solve (numpy LU) at 60+ frequencies, plus the closed-form fact
    that two integrating stages give two poles at the origin (common practice)."""
    r = transfer_function_result(read_netlist((HERE / "regression_spread_integrators.cir").read_text()))
    assert not r.cancelled
    assert r.controller.integrator_count() == 2
    assert np.min(np.abs(r.controller.zeros())) == pytest.approx(1.738e-3, rel=1e-3)
    assert r.max_fit_error < 1e-6
