"""inverting-gain: an inverting amplifier, F(s) = R2/R1 (a constant gain k > 0)."""

from __future__ import annotations

import numpy as np

from convert.circuit.topologies.model import Topology
from convert.circuit.topologies.networks import R, Part, Stage
from convert.circuit.topologies.shared import fit_constant, pos


def coefficients(p):
    """(num, den) of F(s) in descending powers of s, vectorized over part arrays."""
    return [p["R2"] / p["R1"]], [np.ones_like(pos(p["R1"]))]


TOPOLOGY = Topology(
    name="inverting-gain",
    description="inverting amplifier: proportional gain R2/R1",
    parts=(Part("R1", "R", "input resistor"), Part("R2", "R", "feedback resistor (gain = R2/R1)")),
    stages=(Stage("U1", "out", R("R2"), (("in", R("R1")),), role="proportional"),),
    inverting=True,
    represents="a constant gain k > 0",
    free_parts=("R1",),
    tunable={"k": ("R2", 1), "kp": ("R2", 1), "kc": ("R2", 1)},
    equations=("F = R2/R1", "R2 = k·R1"),
    _coefficients=coefficients,
    _parameters=lambda p: {"k": p["R2"] / p["R1"]},
    _fit=fit_constant,
    _solve=lambda q, f: {"R1": f["R1"], "R2": q["k"] * f["R1"]},
)
