"""mfb-low-pass: a second-order low-pass n0/(s² + a1·s + a0) on one op-amp, multiple feedback.

Circuit: the multiple-feedback (MFB) low-pass section — R1 from the input to a middle node, C1 from
that node to ground, R3 from it back to the output, R2 from it into the op-amp's inverting input,
C2 from the inverting input to the output. Its design equations are those of the MFB low-pass in
Texas Instruments, *Op Amps for Everyone* (R. Mancini ed., SLOD006, 2002), chapter 16 "Active
Filter Design Techniques" (T. Kugelstadt), section on the multiple-feedback low-pass (from memory;
their R2/R3 are R3/R2 here). The transfer function below is derived for this netlist by nodal
analysis and checked against lcapy's symbolic nodal analysis of the same netlist and ngspice
(tests/test_circuit_stages.py):

    Vout/Vin = −[1/(R1·R2·C1·C2)] / [s² + s·(1/R1 + 1/R2 + 1/R3)/C1 + 1/(R2·R3·C1·C2)]

so the dc gain is −R3/R1 = −K, w0² = 1/(R2·R3·C1·C2) and w0/Q = (1/R1 + 1/R2 + 1/R3)/C1.

Design (both capacitors chosen from the series, C1 the larger): with G = 1/R3 the quadratic
(1 + K)·G² − (w0·C1/Q)·G + w0²·C1·C2 = 0 has real roots only when C1/C2 >= 4·Q²·(1 + K); each
root is a design (``root`` = +1 the larger conductance); then R3 = 1/G, R1 = R3/K,
R2 = 1/(w0²·C1·C2·R3).

Sensitivity and the Q limit: the capacitor spread C1/C2 grows as 4·Q²·(1 + K), and with it the loop
gain the op-amp must supply near w0. Measured on 90000/(s² + (300/Q)·s + 90000) (our own runs of
``error_sources``, 1 % resistors and 5 % capacitors, 10,000 draws; op-amp 1 MHz gain-bandwidth):
part tolerances cost this stage what they cost tow-thomas (p99 gain error 2.44 against 2.50 dB at
Q = 5, 4.31 against 4.43 dB at Q = 10), but the op-amp error grows about as Q² (0.023 dB at Q = 5,
0.088 dB at Q = 10, against 0.008 and 0.014 dB for tow-thomas) and the capacitor spread was 214 and
839. This stage is used for Q <= :data:`MAX_Q` = 10: there the spread (at least 400·(1 + K)) still
fits one capacitor family (C0G parts come from 10 pF to about 100 nF) and the op-amp error stays
below 0.1 dB with a 1 MHz part at 50 Hz; above it, tow-thomas (no spread with Q, three op-amps)
realizes the section, and the op-amp row of the error budget states the effect for the op-amp given.
"""

from __future__ import annotations

import math

import numpy as np

from convert.circuit.topologies.model import Topology, refuse
from convert.circuit.topologies.networks import GROUND, C, Junction, Part, R, Stage
from convert.circuit.topologies.shared import biquad_numbers, pos
from convert.errors import UnrealizableError

MAX_Q = 10.0
"""Highest pole Q this stage takes (see the module docstring: capacitor spread 4·Q²·(1 + K))."""


def coefficients(p):
    """(num, den) of F(s) (the positive form), descending powers of s, vectorized over part arrays."""
    g1, g2, g3 = 1.0 / pos(p["R1"]), 1.0 / pos(p["R2"]), 1.0 / pos(p["R3"])
    c1, c2 = pos(p["C1"]), pos(p["C2"])
    return [g1 * g2], [c1 * c2, c2 * (g1 + g2 + g3), g2 * g3]


def parameters(p):
    """Monic-denominator a1 (rad/s), a0 (rad²/s²), n0 (rad²/s²), with w0 (rad/s), q and the dc gain k."""
    num, den = coefficients(p)
    a1, a0 = den[1] / den[0], den[2] / den[0]
    return {"a1": a1, "a0": a0, "n0": num[0] / den[0], "w0": np.sqrt(a0), "q": np.sqrt(a0) / a1, "k": num[0] / den[2]}


def fit(topo, shape, settings):
    """n0/(s² + a1·s + a0) with both poles in the left half-plane and Q <= MAX_Q; two designs (the
    two roots of the quadratic in 1/R3)."""
    q = biquad_numbers(
        topo, shape, "n0/(s² + a1·s + a0) (a second-order low-pass) with both poles in the left half-plane"
    )
    if q["n2"] != 0 or q["n1"] != 0 or q["n0"] <= 0:
        raise refuse(topo, shape, "n0/(s² + a1·s + a0) (a second-order low-pass, no finite zeros)")
    qf = math.sqrt(q["a0"]) / q["a1"]
    if qf > MAX_Q:
        raise UnrealizableError(
            f"{topo.name} takes pole Q up to {MAX_Q:g} (its capacitor spread grows as 4·Q²·(1 + gain)); "
            f"the section's Q is {qf:.4g}",
            key="topology",
        )
    base = {"a1": q["a1"], "a0": q["a0"], "n0": q["n0"]}
    return [dict(base, root=1.0), dict(base, root=-1.0)]


def solve(q, f):
    """Parts from a1, a0, n0, the root choice and the chosen C1, C2 (arrays give arrays)."""
    c1, c2 = pos(f["C1"]), pos(f["C2"])
    k = q["n0"] / q["a0"]
    b = q["a1"] * c1  # w0·C1/Q
    with np.errstate(invalid="ignore", divide="ignore"):
        disc = b * b - 4 * (1 + k) * q["a0"] * c1 * c2
        root = np.sqrt(np.where(disc >= 0, disc, np.nan))
        g3 = (b + q["root"] * root) / (2 * (1 + k))
        r3 = 1.0 / g3
        return {"C1": c1, "C2": c2, "R3": r3, "R1": r3 / k, "R2": 1.0 / (q["a0"] * c1 * c2 * r3)}


TOPOLOGY = Topology(
    name="mfb-low-pass",
    description="multiple-feedback second-order low-pass on one op-amp",
    parts=(
        Part("R1", "R", "input resistor (dc gain R3/R1)"),
        Part("R2", "R", "resistor from the middle node into the inverting input"),
        Part("R3", "R", "feedback resistor from the output to the middle node"),
        Part("C1", "C", "capacitor from the middle node to ground (C1/C2 >= 4·Q²·(1 + K))"),
        Part("C2", "C", "feedback capacitor from the output to the inverting input"),
    ),
    stages=(Stage("U1", "out", C("C2"), (("mfb", R("R2")),), role="multiple-feedback low-pass"),),
    junctions=(Junction("mfb", (("in", R("R1")), ("out", R("R3")), (GROUND, C("C1"))), role="middle node"),),
    inverting=True,
    represents="n0/(s² + a1·s + a0): a second-order low-pass with poles in the left half-plane, "
    f"pole Q up to {MAX_Q:g} (quantities a1, a0, n0)",
    free_parts=("C1", "C2"),
    equations=(
        "F = [1/(R1·R2·C1·C2)] / [s² + s·(1/R1 + 1/R2 + 1/R3)/C1 + 1/(R2·R3·C1·C2)]",
        "K = n0/a0, C1/C2 >= 4·Q²·(1 + K)",
        "1/R3 = [w0·C1/Q ± √((w0·C1/Q)² − 4·(1 + K)·w0²·C1·C2)] / (2·(1 + K))",
        "R1 = R3/K",
        "R2 = 1/(w0²·C1·C2·R3)",
    ),
    _coefficients=coefficients,
    _parameters=parameters,
    _fit=fit,
    _solve=solve,
)
