"""integrator-rc: an inverting integrator, F(s) = 1/(R1·C1·s) (pure integral action k/s)."""

from __future__ import annotations

import numpy as np

from convert.circuit.topologies.model import Topology, refuse
from convert.circuit.topologies.networks import C, R, Part, Stage
from convert.circuit.topologies.shared import gain_of, pos


def coefficients(p):
    """(num, den) of F(s) in descending powers of s, vectorized over part arrays."""
    return [np.ones_like(pos(p["R1"]))], [p["R1"] * p["C1"], 0 * pos(p["R1"])]


def fit(topo, shape, settings):
    """k/s: ti = 1/k (s)."""
    if shape.integrators != 1 or len(shape.zeros) or len(shape.poles) or shape.irregular:
        raise refuse(topo, shape, "k/s (one integrator, nothing else)")
    return [{"ti": 1.0 / gain_of(shape)}]


TOPOLOGY = Topology(
    name="integrator-rc",
    description="inverting integrator: input resistor, feedback capacitor",
    parts=(Part("R1", "R", "input resistor (integral time R1·C1)"), Part("C1", "C", "feedback capacitor")),
    stages=(Stage("U1", "out", C("C1"), (("in", R("R1")),), role="integral"),),
    inverting=True,
    represents="k/s (pure integral action)",
    free_parts=("C1",),
    tunable={"ti": ("R1", 1)},
    equations=("F = 1/(R1·C1·s)", "R1 = ti/C1"),
    _coefficients=coefficients,
    _parameters=lambda p: {"ti": p["R1"] * p["C1"]},
    _fit=fit,
    _solve=lambda q, f: {"C1": f["C1"], "R1": q["ti"] / f["C1"]},
)
