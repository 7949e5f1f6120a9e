"""mfb-band-pass: a second-order band-pass n1·s/(s² + a1·s + a0) on one op-amp, multiple feedback.

Circuit: the multiple-feedback band-pass section (after T. Deliyannis, "High-Q factor circuit with
reduced sensitivity", Electronics Letters 4, 1968, pp. 577–579) — R1 from the input to a middle
node, R2 from that node to ground, C1 from it into the op-amp's inverting input, C2 from it to the
output, R3 from the inverting input to the output. With C1 = C2 = C its design equations are those
of the MFB band-pass in Texas Instruments, *Op Amps for Everyone* (R. Mancini ed., SLOD006, 2002),
chapter 16 "Active Filter Design Techniques" (T. Kugelstadt): fm = (1/(2πC))·√((R1 + R2)/(R1·R2·R3)),
Am = −R3/(2·R1), Q = π·fm·R3·C (from memory; their R2/R3 are R3/R2 here). The transfer function
below is derived for this netlist by nodal analysis and checked against lcapy's symbolic nodal
analysis of the same netlist and ngspice (tests/test_circuit_stages.py):

    Vout/Vin = −[s/(R1·C2)] / [s² + s·(C1 + C2)/(R3·C1·C2) + (1/R1 + 1/R2)/(R3·C1·C2)]

Design (C1 = C2 = C chosen from the series): R3 = 2/(a1·C), R1 = 1/(n1·C), 1/R2 = a0·C²·R3 − 1/R1
(the centre gain K = n1/a1 must stay below 2·Q²; at exactly 2·Q², R2 is left open).

Q limit: the resistor spread R3/(R1 ∥ R2) is 4·Q², so this stage takes Q <= :data:`MAX_Q` (10: a
spread of 400, two decades and a half inside one resistor range), as mfb-low-pass does.
"""

from __future__ import annotations

import math

import numpy as np

from convert.circuit.topologies.model import Topology, refuse
from convert.circuit.topologies.mfb_low_pass import MAX_Q
from convert.circuit.topologies.networks import GROUND, C, Junction, Part, R, Stage
from convert.circuit.topologies.shared import biquad_numbers, pos
from convert.errors import UnrealizableError


def coefficients(p):
    """(num, den) of F(s) (the positive form), descending powers of s, vectorized over part arrays."""
    g1, g3 = 1.0 / pos(p["R1"]), 1.0 / pos(p["R3"])
    with np.errstate(divide="ignore"):
        g2 = 1.0 / pos(p["R2"])
    c1, c2 = pos(p["C1"]), pos(p["C2"])
    return [g1 * c1, 0.0 * c1], [c1 * c2, g3 * (c1 + c2), g3 * (g1 + g2)]


def parameters(p):
    """Monic-denominator a1 (rad/s), a0 (rad²/s²), n1 (rad/s), with w0 (rad/s), q and the centre gain k."""
    num, den = coefficients(p)
    a1, a0 = den[1] / den[0], den[2] / den[0]
    return {"a1": a1, "a0": a0, "n1": num[0] / den[0], "w0": np.sqrt(a0), "q": np.sqrt(a0) / a1, "k": num[0] / den[1]}


def fit(topo, shape, settings):
    """n1·s/(s² + a1·s + a0), poles in the left half-plane, Q <= MAX_Q, centre gain below 2·Q²."""
    needs = "n1·s/(s² + a1·s + a0) (a second-order band-pass) with both poles in the left half-plane"
    q = biquad_numbers(topo, shape, needs)
    if q["n2"] != 0 or q["n0"] != 0 or q["n1"] == 0:
        raise refuse(topo, shape, needs)
    n1, a1, a0 = abs(q["n1"]), q["a1"], q["a0"]
    qf = math.sqrt(a0) / a1
    if qf > MAX_Q:
        raise UnrealizableError(
            f"{topo.name} takes pole Q up to {MAX_Q:g} (its resistor spread grows as 4·Q²); the section's Q is {qf:.4g}",
            key="topology",
        )
    if n1 / a1 > 2 * qf * qf * (1 + 1e-12):
        raise UnrealizableError(
            f"{topo.name} gives a centre gain up to 2·Q² = {2 * qf * qf:.4g}; the section asks {n1 / a1:.4g}",
            key="topology",
        )
    return [{"a1": a1, "a0": a0, "n1": n1}]


def solve(q, f):
    """Parts from a1, a0, n1 and the chosen C1 (C2 = C1)."""
    c = pos(f["C1"])
    r3 = 2.0 / (q["a1"] * c)
    g1 = q["n1"] * c
    g2 = q["a0"] * c * c * r3 - g1
    with np.errstate(divide="ignore"):
        r2 = np.where(g2 > 1e-12 * g1, 1.0 / np.where(g2 > 0, g2, 1.0), np.inf)
    return {"C1": c, "C2": c, "R1": 1.0 / g1, "R2": r2, "R3": r3}


TOPOLOGY = Topology(
    name="mfb-band-pass",
    description="multiple-feedback second-order band-pass on one op-amp",
    parts=(
        Part("R1", "R", "input resistor (centre gain R3/(2·R1) with C1 = C2)"),
        Part("R2", "R", "resistor from the middle node to ground (sets w0 with R1)", optional=True),
        Part("R3", "R", "feedback resistor (Q = w0·R3·C/2 with C1 = C2)"),
        Part("C1", "C", "capacitor from the middle node into the inverting input"),
        Part("C2", "C", "capacitor from the middle node to the output (equal to C1)"),
    ),
    stages=(Stage("U1", "out", R("R3"), (("mfb", C("C1")),), role="multiple-feedback band-pass"),),
    junctions=(Junction("mfb", (("in", R("R1")), (GROUND, R("R2")), ("out", C("C2"))), role="middle node"),),
    inverting=True,
    represents="n1·s/(s² + a1·s + a0): a second-order band-pass with poles in the left half-plane, "
    f"pole Q up to {MAX_Q:g}, centre gain n1/a1 below 2·Q² (quantities a1, a0, n1)",
    free_parts=("C1",),
    equal_parts=(("C2", "C1"),),
    equations=(
        "F = [s/(R1·C2)] / [s² + s·(C1 + C2)/(R3·C1·C2) + (1/R1 + 1/R2)/(R3·C1·C2)]",
        "C2 = C1 = C",
        "R3 = 2/(a1·C)",
        "R1 = 1/(n1·C)",
        "1/R2 = a0·C²·R3 − 1/R1",
    ),
    _coefficients=coefficients,
    _parameters=parameters,
    _fit=fit,
    _solve=solve,
)
