"""tow-thomas: any second-order section (n2·s² + n1·s + n0)/(s² + a1·s + a0) on three op-amps.

Circuit: the Tow–Thomas biquad — a damped integrator, an integrator and a unity inverter in one
loop (J. Tow, "Active RC filters — a state-space realization", Proc. IEEE 56, 1968, pp. 1137–1139;
L. C. Thomas, "The biquad: part I — some practical design considerations", IEEE Trans. Circuit
Theory 18, 1971, pp. 350–357) — with feed-forward paths from the input into each amplifier for a
general numerator, the arrangement Sedra & Smith, *Microelectronic Circuits*, show for the
Tow–Thomas biquad with feed-forward (from memory). Amplifiers here: U1 integrator, U2 inverter,
U3 damped integrator (the output). The transfer function below is derived for this netlist and
checked against lcapy's symbolic nodal analysis of the same netlist and ngspice (tests).

    Vout/Vin = −[C3·C2/R5·s² + C2·(1/(R6·R5) − 1/(R2·R7))·s + 1/(R2·R4·R8)]
               / [C1·C2/R5·s² + C2/(R1·R5)·s + 1/(R2·R3·R4)]

Design (C2 = C1 = C, R4 = R5 = 10 kΩ, R3 = R2): R1 = 1/(a1·C), R2 = 1/(C·√a0), C3 = n2·C,
R6 = 1/(n1·C) when n1 > 0 or R7 = R5/(R2·C·|n1|) when n1 < 0, R8 = 1/(n0·R2·C²). Unused
feed-forward parts are left open. Realizes complex or real poles (a1, a0 > 0), complex zeros
anywhere (a notch has n1 = 0), with n2, n0 >= 0 in the positive form.
"""

from __future__ import annotations

import math

import numpy as np

from convert.circuit.topologies.model import Topology
from convert.circuit.topologies.networks import C, R, Parallel, Part, Stage
from convert.circuit.topologies.shared import RSUM, biquad_numbers, pos
from convert.errors import UnrealizableError


def _g(x):
    """Conductance of a resistor array (0 for an open, infinite one)."""
    with np.errstate(divide="ignore"):
        return 1.0 / pos(x)


def coefficients(p):
    """(num, den) of F(s) (the positive form), descending powers of s, vectorized over part arrays."""
    g5 = _g(p["R5"])
    num = [
        p["C3"] * p["C2"] * g5,
        p["C2"] * (_g(p["R6"]) * g5 - _g(p["R2"]) * _g(p["R7"])),
        _g(p["R2"]) * _g(p["R4"]) * _g(p["R8"]),
    ]
    den = [p["C1"] * p["C2"] * g5, p["C2"] * _g(p["R1"]) * g5, _g(p["R2"]) * _g(p["R3"]) * _g(p["R4"])]
    return num, den


def parameters(p):
    """Monic-denominator coefficients a1 (rad/s), a0 (rad²/s²), n2, n1, n0, with w0 and q."""
    num, den = coefficients(p)
    lead = den[0]
    a1, a0 = den[1] / lead, den[2] / lead
    with np.errstate(divide="ignore", invalid="ignore"):
        return {
            "a1": a1,
            "a0": a0,
            "n2": num[0] / lead,
            "n1": num[1] / lead,
            "n0": num[2] / lead,
            "w0": np.sqrt(a0),
            "q": np.sqrt(a0) / a1,
        }


def fit(topo, shape, settings):
    """A second-order denominator with both roots in the left half-plane; numerator of degree <= 2
    with n2, n0 >= 0 once the sign is taken out."""
    q = biquad_numbers(topo, shape, "(n2·s² + n1·s + n0)/(s² + a1·s + a0) with both poles in the left half-plane")
    num = [q["n2"], q["n1"], q["n0"]]
    if num[0] < 0 or num[2] < 0:
        raise UnrealizableError(
            f"{topo.name} realizes n2·s² + n1·s + n0 with n2 and n0 of one sign; the target's "
            f"numerator has n2 = {num[0]:.4g}, n0 = {num[2]:.4g} (a real zero in each half-plane)",
            key="topology",
        )
    return [q]


def solve(q, f):
    """Parts from a1, a0, n2, n1, n0 and the chosen C1 (arrays of C1 give arrays of parts)."""
    c = pos(f["C1"])
    r2 = 1.0 / (c * math.sqrt(q["a0"]))
    inf = np.inf + 0 * c
    out = {
        "C1": c,
        "C2": c,
        "R1": 1.0 / (q["a1"] * c),
        "R2": r2,
        "R3": r2,
        "R4": RSUM + 0 * c,
        "R5": RSUM + 0 * c,
        "C3": q["n2"] * c,
        "R6": inf,
        "R7": inf,
        "R8": inf,
    }
    if q["n1"] > 0:
        out["R6"] = 1.0 / (q["n1"] * c)
    elif q["n1"] < 0:
        out["R7"] = RSUM / (r2 * c * -q["n1"])
    if q["n0"] > 0:
        out["R8"] = 1.0 / (q["n0"] * r2 * c * c)
    return out


TOPOLOGY = Topology(
    name="tow-thomas",
    description="Tow–Thomas biquad with feed-forward: integrator, inverter and damped integrator in one loop",
    parts=(
        Part("C1", "C", "damped integrator capacitor (U3)"),
        Part("R1", "R", "damping resistor (a1 = 1/(R1·C1))"),
        Part("R2", "R", "loop resistor into U3 (a0 = 1/(R2·R3·C1·C2) with R4 = R5)"),
        Part("R3", "R", "integrator input resistor (equal to R2)"),
        Part("C2", "C", "integrator capacitor (U1, equal to C1)"),
        Part("R4", "R", "inverter input resistor"),
        Part("R5", "R", "inverter feedback resistor"),
        Part("R6", "R", "feed-forward into U3, positive s term (n1 = 1/(R6·C1))", optional=True),
        Part("R7", "R", "feed-forward into U2, negative s term", optional=True),
        Part("R8", "R", "feed-forward into U1, constant term (n0 = 1/(R2·R8·C1·C2))", optional=True),
        Part("C3", "C", "feed-forward into U3, s² term (n2 = C3/C1)", optional=True),
    ),
    stages=(
        Stage("U1", "bq_i", C("C2"), (("out", R("R3")), ("in", R("R8"))), role="integrator"),
        Stage("U2", "bq_v", R("R5"), (("bq_i", R("R4")), ("in", R("R7"))), role="inverter"),
        Stage(
            "U3",
            "out",
            Parallel(R("R1"), C("C1")),
            (("bq_v", R("R2")), ("in", R("R6")), ("in", C("C3"))),
            role="damped integrator",
        ),
    ),
    inverting=True,
    represents="(n2·s² + n1·s + n0)/(s² + a1·s + a0): low-pass, band-pass, high-pass, notch or general biquad "
    "with poles in the left half-plane (quantities a1, a0, n2, n1, n0)",
    free_parts=("C1",),
    fixed_parts={"R4": RSUM, "R5": RSUM},
    equal_parts=(("C2", "C1"), ("R3", "R2")),
    equations=(
        "F = [C3·C2/R5·s² + C2·(1/(R6·R5) − 1/(R2·R7))·s + 1/(R2·R4·R8)] / [C1·C2/R5·s² + C2/(R1·R5)·s + 1/(R2·R3·R4)]",
        "C2 = C1 = C, R4 = R5 = 10 kΩ, R3 = R2",
        "R1 = 1/(a1·C)",
        "R2 = 1/(C·√a0)",
        "C3 = n2·C",
        "R6 = 1/(n1·C) (n1 > 0) or R7 = R5/(R2·C·|n1|) (n1 < 0)",
        "R8 = 1/(n0·R2·C²)",
    ),
    _coefficients=coefficients,
    _parameters=parameters,
    _fit=fit,
    _solve=solve,
)
