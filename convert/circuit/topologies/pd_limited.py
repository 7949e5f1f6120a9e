"""pd-limited: PD with a derivative-limiting resistor, F(s) = R2/R1 + R2·C1·s/(R3·C1·s + 1)."""

from __future__ import annotations

import numpy as np

from convert.circuit.topologies.model import Topology
from convert.circuit.topologies.networks import C, R, Parallel, Part, Series, Stage
from convert.circuit.topologies.shared import fit_first_order, pos


def coefficients(p):
    """(num, den) of F(s) in descending powers of s, vectorized over part arrays."""
    kp, kd, tf = p["R2"] / p["R1"], p["R2"] * p["C1"], p["R3"] * p["C1"]
    return [kp * tf + kd, kp], [tf, np.ones_like(pos(kp))]


TOPOLOGY = Topology(
    name="pd-limited",
    description="PD: input resistor parallel to (limiting resistor + capacitor), feedback resistor",
    parts=(
        Part("R1", "R", "input resistor (kp = R2/R1)"),
        Part("R2", "R", "feedback resistor"),
        Part("C1", "C", "derivative capacitor (kd = R2·C1)"),
        Part("R3", "R", "derivative-limiting resistor (tf = R3·C1)"),
    ),
    stages=(Stage("U1", "out", R("R2"), (("in", Parallel(R("R1"), Series(R("R3"), C("C1")))),), role="PD"),),
    inverting=True,
    represents="kp + kd·s/(tf·s + 1) (PD with derivative filter; any lead with the zero below the pole)",
    free_parts=("C1",),
    tunable={"kd": ("R2", 1)},
    equations=(
        "F = R2/R1 + R2·C1·s/(R3·C1·s + 1)",
        "kp = R2/R1, kd = R2·C1, tf = R3·C1",
        "R2 = kd/C1",
        "R3 = tf/C1",
        "R1 = R2/kp",
    ),
    _coefficients=coefficients,
    _parameters=lambda p: {"kp": p["R2"] / p["R1"], "kd": p["R2"] * p["C1"], "tf": p["R3"] * p["C1"]},
    _fit=lambda t, s, st: fit_first_order(t, s, st, lead_only=True),
    _solve=lambda q, f: {
        "C1": f["C1"],
        "R2": q["kd"] / f["C1"],
        "R3": q["tf"] / f["C1"],
        "R1": q["kd"] / f["C1"] / q["kp"],
    },
)
