"""The fast evaluations the tolerance engine runs on every draw: P(jω) in real arithmetic and a
circuit with single-pole op-amps written out as one rational function of s.

References: numpy's ``polyval`` (a general-purpose library) at s = jω for P(jω); for the circuit,
ngspice AC analysis checks the written-out form over the catalog
(tests/test_circuit_spice.py::test_gain_bandwidth_model_matches_simulator); here it is held
against the node-by-node solution of the same stage equations for drawn parts (the two must agree
to rounding, draw by draw, or the Monte Carlo would not be drawing the simulated circuit)."""

from __future__ import annotations

import numpy as np
import pytest

from convert.circuit.opamp import OpAmpModel, gbw_response
from convert.circuit.topologies import TOPOLOGIES, node_responses, output_node
from convert.circuit.topologies.model import circuit_polynomials, polyval_jw
from tests.test_circuit_spice import PARTS


@pytest.mark.parametrize("degree", range(0, 8))
def test_polyval_jw_matches_numpy(degree):
    """P(jω) from E(−ω²) + jω·O(−ω²) against numpy.polyval at s = jω, for polynomials with real
    roots spread over eight decades (as an RC network's), 64 draws × 300 frequencies."""
    rng = np.random.default_rng(degree)
    roots = -(10 ** rng.uniform(-3, 5, (64, degree)))
    gains = 10 ** rng.uniform(-6, 6, 64)
    coeffs = np.array([np.atleast_1d(np.poly(r)) * g for r, g in zip(roots, gains)])  # (64, degree + 1)
    w = np.logspace(-4, 6, 300)
    got = polyval_jw(list(coeffs.T), w)
    expected = np.array([np.polyval(c, 1j * w) for c in coeffs])
    assert got.shape == (64, 300)
    assert np.max(np.abs(got / expected - 1)) < 1e-13
    # scalar coefficients give one row, as the nominal parts do
    assert polyval_jw([float(c) for c in coeffs[0]], w).shape == (300,)


@pytest.mark.parametrize("name", sorted(TOPOLOGIES))
@pytest.mark.parametrize("gbw_hz", [None, 1e3, 1e6])
def test_written_out_circuit_equals_node_solution(name, gbw_hz):
    """For 50 draws of every catalog topology's parts (±10 %), ideal and single-pole op-amps:
    gbw_response (the circuit written out as a rational function of s, stages in a loop and
    middle nodes by Cramer's rule) equals the node-by-node solution within 1e-12 relative from
    1e-4 Hz to 1 MHz."""
    topo = TOPOLOGIES[name]
    rng = np.random.default_rng(len(name))
    drawn = {k: v * (1 + 0.1 * rng.uniform(-1, 1, 50)) for k, v in topo.check_parts(PARTS[name]).items()}
    model = OpAmpModel(gbw_hz=gbw_hz)
    assert circuit_polynomials(topo, drawn, model.open_loop_polynomials()) is not None
    f = np.logspace(-4, 6, 200)
    nodes = node_responses(topo, drawn, f, open_loop_gain=model.open_loop_gain(f))
    expected = topo.sign * nodes[output_node(topo)]
    got = gbw_response(topo, drawn, f, model)
    assert got.shape == expected.shape == (50, 200)
    assert np.max(np.abs(got / expected - 1)) < 1e-12


def test_open_optional_parts():
    """pid-two-input with its optional setpoint parts left off (R3, R8 ∞ Ω, C2 0 F) in every draw is
    written out and equals the node solution; with R3 open in one draw and fitted in the other
    there is no single polynomial form, so the node solution is used and each draw keeps its own
    response."""
    topo = TOPOLOGIES["pid-two-input"]
    model = OpAmpModel(gbw_hz=1e5)
    f = np.logspace(-1, 4, 40)
    base = {k: np.repeat(v, 2) for k, v in topo.check_parts(PARTS["pid-two-input"]).items()}
    off = dict(base, R3=np.full(2, np.inf), R8=np.full(2, np.inf), C2=np.zeros(2))
    assert circuit_polynomials(topo, off, model.open_loop_polynomials()) is not None
    nodes = node_responses(topo, off, f, open_loop_gain=model.open_loop_gain(f))
    assert np.allclose(gbw_response(topo, off, f, model), topo.sign * nodes[output_node(topo)], rtol=1e-12, atol=0)
    mixed = dict(base, R3=np.array([np.inf, base["R3"][0]]))
    assert circuit_polynomials(topo, mixed, model.open_loop_polynomials()) is None
    got = gbw_response(topo, mixed, f, model)
    for i in range(2):
        one = {k: v[i : i + 1] for k, v in mixed.items()}
        alone = gbw_response(topo, one, f, model)[0]
        assert np.allclose(got[i], alone, rtol=1e-12, atol=0)
    assert not np.allclose(got[0], got[1], rtol=1e-3)  # the open part matters


@pytest.mark.parametrize(
    "target",
    [
        "-1.2*(1 + 1/(0.8*s))*900/(s^2 + 45*s + 900)",
        "1e8/((s^2 + 40*s + 10000)*(s^2 + 100*s + 10000))",
        "2*(0.1*s + 1)*s/((s^2 + 10*s + 400)*(0.01*s + 1))",
    ],
)
def test_written_out_cascade_equals_node_solution(target):
    """Cascades the design makes (multiple-feedback sections with their middle nodes, a PI stage,
    targets of our own): for 40 draws (±5 %) with ideal and single-pole op-amps (GBW 10 kHz), the
    written-out circuit equals the node solution within 1e-12 relative from 1 mHz to 100 kHz."""
    from convert.circuit.design import DesignOptions, design_circuit
    from convert.controller import from_expression

    design = design_circuit(from_expression(target), DesignOptions(topology="auto"))
    topo = design.topology
    assert topo.junctions  # a middle node is among the blocks written out
    rng = np.random.default_rng(5)
    drawn = {k: float(v) * (1 + 0.05 * rng.uniform(-1, 1, 40)) for k, v in design.rounded.items()}
    f = np.logspace(-3, 5, 150)
    for gbw_hz in (None, 1e4):
        model = OpAmpModel(gbw_hz=gbw_hz)
        assert circuit_polynomials(topo, drawn, model.open_loop_polynomials()) is not None
        nodes = node_responses(topo, drawn, f, open_loop_gain=model.open_loop_gain(f))
        expected = topo.sign * nodes[output_node(topo)]
        assert np.max(np.abs(gbw_response(topo, drawn, f, model) / expected - 1)) < 1e-12
