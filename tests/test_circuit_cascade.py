"""Cascade synthesis (issue 14 item 1-2): targets no single catalog stage realizes, built as a chain
of catalog stages. Each cascade's written netlist is simulated by ngspice (the independent reference
simulator, AC analysis) and must match the target within the rounding error the tool reports; the
card reader reads the same netlist back to the realized controller to 1e-6. Targets are of our own
invention."""

from __future__ import annotations

import numpy as np
import pytest

from convert.circuit.cascade import plan_cascade
from convert.circuit.card import analyze_card
from convert.circuit.design import DesignOptions, design_circuit
from convert.circuit.netlist import read_netlist
from convert.circuit.netlist_out import design_netlist
from convert.controller import from_expression
from convert.errors import UnrealizableError
from tests.spice import ac_sweep, require_ngspice

TARGETS = {
    "notch": "(s^2 + 0.4*s + 400)/(s^2 + 8*s + 400)",
    "filtered PID with output low-pass": "1.5*(1 + 1/(2*s) + 0.3*s/(0.03*s + 1))/(0.005*s + 1)",
    "lead-lag-lag": "2*(0.5*s + 1)*(0.1*s + 1)/((0.05*s + 1)*(2*s + 1)*(0.01*s + 1))",
    "second-order low-pass, Q = 5": "90000/(s^2 + 60*s + 90000)",
    "PI with measurement filter": "0.8*(1 + 1/(0.5*s))/(0.02*s + 1)",
    "direct-acting lead with a resonance": "-3*(s + 2)/((s + 20)*(s^2 + 3*s + 25))",
    "sixth order": "(s^2 + 0.5*s + 400)*(s + 3)/((s^2 + 4*s + 400)*(s + 30)*(0.2*s + 1)*(s^2 + 3*s + 9))",
}


def _design(expr):
    return design_circuit(from_expression(expr), DesignOptions())


@pytest.mark.parametrize("name", sorted(TARGETS))
def test_cascade_netlist_against_ngspice(name):
    """Source: ngspice AC analysis of the written netlist (1e9-gain op-amps) against the target over the
    design band: the deviation stays within the rounding error the tool reports (+0.01 dB, +0.05°
    for the simulator's own numerics)."""
    require_ngspice()
    d = _design(TARGETS[name])
    assert d.topology.name == "cascade"
    text = design_netlist(d)
    f, v = ac_sweep(text, f_start_hz=d.band_hz[0], f_stop_hz=d.band_hz[1], points_per_decade=20)
    ratio = v / d.target.frequency_response(f)
    gain_db = np.max(np.abs(20 * np.log10(np.abs(ratio))))
    phase_deg = np.max(np.abs(np.degrees(np.angle(ratio))))
    best = d.candidates[0]
    assert gain_db <= best.max_gain_error_db + 0.01, (gain_db, best.max_gain_error_db)
    assert phase_deg <= best.max_phase_error_deg + 0.05, (phase_deg, best.max_phase_error_deg)


@pytest.mark.parametrize("name", sorted(TARGETS))
def test_cascade_read_back_by_the_card_reader(name):
    """The card reader (nodal analysis of the netlist, an independent derivation from the stage
    formulas) gives back the controller the rounded parts realize, to 1e-6 over the band."""
    d = _design(TARGETS[name])
    card = analyze_card(read_netlist(design_netlist(d), "cascade.cir"), band_hz=d.band_hz)
    f = np.geomspace(d.band_hz[0], d.band_hz[1], 200)
    a, b = card.controller.frequency_response(f), d.realized.frequency_response(f)
    assert np.max(np.abs(a / b - 1)) < 1e-6


def test_sign_is_kept_and_the_inverter_only_when_needed():
    """An even number of inverting stages gives +; the target's sign decides the inverter."""
    pos = _design("0.8*(1 + 1/(0.5*s))/(0.02*s + 1)")  # two inverting stages: no inverter
    neg = _design("-0.8*(1 + 1/(0.5*s))/(0.02*s + 1)")
    assert not pos.needs_inverter and neg.needs_inverter
    assert "XUINV" not in design_netlist(pos) and "XUINV" in design_netlist(neg)


@pytest.mark.parametrize("name", sorted(TARGETS))
def test_stage_outputs_peak_no_higher_than_input_or_output(name):
    """Gain distribution (common practice in cascade design: equal-peak scaling): no stage output peaks
    above the larger of the input's and the output's peak over the band, so an input range that input
    and output handle clips no stage first. Checked on the circuit itself (node_responses, rounded
    parts) over a grid of 400 points per decade, independent of the plan's own grid."""
    from convert.circuit.topologies import node_responses

    d = _design(TARGETS[name])
    f = np.geomspace(d.band_hz[0], d.band_hz[1], int(400 * np.log10(d.band_hz[1] / d.band_hz[0])))
    nodes = node_responses(d.topology, {k: np.asarray(v) for k, v in d.rounded.items()}, f)
    rounding = 10 ** (d.candidates[0].max_gain_error_db / 20)  # the rounded parts move each stage's gain too
    limit = max(np.max(np.abs(nodes["out"])), 1.0) * rounding
    outputs = [st.output for st in d.topology.stages if st.output == "out" or st.output.endswith("_out")]
    assert len(outputs) == len(d.cascade.sections)
    for node in outputs:
        assert np.max(np.abs(nodes[node])) <= limit * 1.01, node


def test_swing_check_names_a_clipping_stage():
    """A 1 V input against a 1 V rail on a Q = 5 low-pass (peak gain 5): the output stage clips near
    the resonance and the swing check says so (hand calculation: 1 V x 5 = 5 V > 1 V)."""
    from convert.circuit.opamp import swing_check

    d = _design(TARGETS["second-order low-pass, Q = 5"])
    f = np.geomspace(d.band_hz[0], d.band_hz[1], 200)
    sw = swing_check(d.topology, {k: np.asarray(v) for k, v in d.rounded.items()}, f, 1.0, 1.0)
    assert not sw.ok
    last = d.topology.stages[-1].amp
    assert sw.exceeded[last] and sw.exceeded[last][0][0] < 47.7 < sw.exceeded[last][0][1]  # 300 rad/s = 47.7 Hz


def test_max_opamps_caps_the_cascade():
    """--max-opamps: a cascade above the cap is refused with the count it needs."""
    with pytest.raises(UnrealizableError, match="needs 4 op-amps"):
        design_circuit(from_expression(TARGETS["notch"]), DesignOptions(max_opamps=3))
    assert design_circuit(from_expression(TARGETS["notch"]), DesignOptions(max_opamps=4)).topology.name == "cascade"


def test_unstable_target_is_refused():
    with pytest.raises(UnrealizableError, match="right half-plane"):
        plan_cascade(from_expression("1/((s - 2)*(s + 5))"), (0.01, 100))


def test_catalog_first():
    """--topology auto keeps a single catalog stage where one realizes the target."""
    assert _design("2*(1 + 1/(3*s))").topology.name == "pi-rc-feedback"


@pytest.mark.parametrize("name", ["notch", "sixth order"])
def test_cascade_gain_bandwidth_model_against_ngspice(name):
    """Source: ngspice AC analysis of the cascade's netlist with the single-pole op-amp subcircuit
    (GBW 2 kHz on every amplifier, loops included) against the tool's own circuit solution with the
    same A(jw) (the op-amp error row): within 0.05 dB and 0.5 deg, and the model must matter."""
    require_ngspice()
    from convert.circuit.opamp import OpAmpModel, gbw_response

    d = _design(TARGETS[name])
    model = OpAmpModel(gbw_hz=2e3)
    text = design_netlist(d, opamp=model, add_inverter=False)
    f, v = ac_sweep(text, f_start_hz=d.band_hz[0], f_stop_hz=d.band_hz[1], points_per_decade=10)
    parts = {k: np.asarray(x) for k, x in d.rounded.items()}
    expected = d.topology.sign * gbw_response(d.topology, parts, f, model)
    ratio = v / expected
    assert np.max(np.abs(20 * np.log10(np.abs(ratio)))) < 0.05
    assert np.max(np.abs(np.degrees(np.angle(ratio)))) < 0.5
    ideal = d.topology.sign * d.topology.response({k: np.asarray([x]) for k, x in d.rounded.items()}, f)[0]
    assert np.max(np.abs(20 * np.log10(np.abs(expected / ideal)))) > 0.01


def band_against_direct(d, *, seed: int, draws: int = 4000):
    """(the engine's band, numpy's 0.5/99.5 % gain percentiles of the same draws evaluated in float64
    from the circuit's formulas, the draws) for a design, 1 %/5 % parts, 20 points per decade."""
    from convert.circuit.tolerance import Comparison, draw_parts, run_tolerances

    tol = {"R": 0.01, "C": 0.05}
    f = d.f_grid(20)
    ref = d.topology.response({k: np.asarray([v]) for k, v in d.rounded.items()}, f)[0]
    mc = run_tolerances(
        d.topology,
        d.rounded,
        tol,
        band_f_hz=f,
        comparisons=[Comparison("t", ref)],
        draws=draws,
        seed=seed,
        display_f_hz=f,
    ).band
    drawn = draw_parts(d.topology, d.rounded, tol, draws, seed)
    h = d.topology.response(drawn, f)
    direct = np.percentile(20 * np.log10(np.abs(h)), [0.5, 99.5], axis=0)  # the engine's band (no median)
    return mc, direct, drawn


def test_cascade_monte_carlo_over_all_parts():
    """The tolerance analysis of a cascade draws every fitted part of every stage: its gain percentiles
    equal numpy's percentiles of the same draws evaluated one by one in float64 from the circuit's own
    formulas (an independent evaluation path), to 0.01 dB; and every stage's parts move the result."""
    d = _design(TARGETS["PI with measurement filter"])
    mc, direct, drawn = band_against_direct(d, seed=3)
    assert np.max(np.abs(np.asarray(mc.gain_db) - direct)) < 0.01
    moved = {k for k, v in drawn.items() if np.ptp(v) > 0}
    assert moved == set(d.fitted_parts())


def test_sixth_order_error_budget_is_finite():
    """Regression: the sixth-order cascade's Monte Carlo row was NaN (its degree-6 polynomials overflowed
    the float32 arithmetic of the tolerance engine, with a RuntimeWarning). Now the cascade's coefficients
    are normalized at the band's geometric mean and every figure of the budget is a finite number."""
    from convert.circuit.design import error_sources

    d = _design(TARGETS["sixth order"])
    mc = error_sources(d, draws=2000)["tolerance"]["monte_carlo"]

    def numbers(x):
        if isinstance(x, dict):
            for v in x.values():
                yield from numbers(v)
        elif isinstance(x, (list, tuple)):
            for v in x:
                yield from numbers(v)
        elif isinstance(x, float):
            yield x

    values = list(numbers(mc))
    assert values and all(np.isfinite(values))


CASE_WITH_CAP = """\
[source]
expression = "(s^2 + 0.4*s + 400)/(s^2 + 8*s + 400)"

[target.circuit]
max_opamps = {cap}

[criteria]
band = ["0.1 Hz", "100 Hz"]
max_gain_error_db = 1
"""


def test_case_file_max_opamps_key():
    """[target.circuit] max_opamps has the meaning of --max-opamps: read as a whole number and passed
    to the design, where a cascade above it is refused naming the key (the line is the key's)."""
    from convert.case import parse_case
    from convert.errors import InputError

    assert parse_case(CASE_WITH_CAP.format(cap=4), "c.toml").circuit.max_opamps == 4
    assert parse_case(CASE_WITH_CAP.format(cap='"3"'), "c.toml").circuit.max_opamps == 3
    plain = CASE_WITH_CAP.replace("max_opamps = {cap}\n", 'topology = "auto"\n')
    assert parse_case(plain, "c.toml").circuit.max_opamps is None
    for bad in ("0", "2.5", "-1", "true", '"many"', '"nan"', "100000"):
        with pytest.raises(InputError) as info:
            parse_case(CASE_WITH_CAP.format(cap=bad), "c.toml")
        assert str(info.value).startswith("c.toml:5: target.circuit.max_opamps:"), (bad, str(info.value))
        assert "whole number" in str(info.value) or "number" in str(info.value)


def test_case_file_max_opamps_caps_the_report(run_cli, tmp_path):
    """A case whose cascade needs more op-amps than its max_opamps: exit 2 and one line naming the
    case file, the line and target.circuit.max_opamps (no traceback, no report folder written)."""
    case = tmp_path / "capped.toml"
    case.write_text(CASE_WITH_CAP.format(cap=1))
    res = run_cli("report", str(case), "--out", str(tmp_path / "r"))
    text = res.out + res.err
    assert res.code == 2, text
    assert "target.circuit.max_opamps" in text and "capped.toml:5" in text, text
    assert "Traceback" not in text
    assert not (tmp_path / "r").exists()
