"""first-order-lag: an inverting low-pass, F(s) = (R2/R1)/(R2·C1·s + 1) = k/(tau·s + 1)."""

from __future__ import annotations

import numpy as np

from convert.circuit.topologies.model import Topology, refuse
from convert.circuit.topologies.networks import C, R, Parallel, Part, Stage
from convert.circuit.topologies.shared import gain_of, pos


def coefficients(p):
    """(num, den) of F(s) in descending powers of s, vectorized over part arrays."""
    return [p["R2"] / p["R1"]], [p["R2"] * p["C1"], np.ones_like(pos(p["R1"]))]


def fit(topo, shape, settings):
    """One real pole: k, tau (s)."""
    if shape.integrators or len(shape.zeros) or len(shape.poles) != 1 or shape.irregular:
        raise refuse(topo, shape, "k/(tau·s + 1) (one real pole)")
    return [{"k": gain_of(shape), "tau": 1.0 / shape.poles[0]}]


TOPOLOGY = Topology(
    name="first-order-lag",
    description="inverting low-pass: input resistor, feedback resistor parallel capacitor",
    parts=(
        Part("R1", "R", "input resistor"),
        Part("R2", "R", "feedback resistor (dc gain R2/R1)"),
        Part("C1", "C", "feedback capacitor (time constant R2·C1)"),
    ),
    stages=(Stage("U1", "out", Parallel(R("R2"), C("C1")), (("in", R("R1")),), role="lag"),),
    inverting=True,
    represents="k/(tau·s + 1) (a first-order lag / low-pass)",
    free_parts=("C1",),
    tunable={"k": ("R1", -1), "kp": ("R1", -1), "kc": ("R1", -1)},
    equations=("F = (R2/R1)/(R2·C1·s + 1)", "R2 = tau/C1", "R1 = R2/k"),
    _coefficients=coefficients,
    _parameters=lambda p: {"k": p["R2"] / p["R1"], "tau": p["R2"] * p["C1"]},
    _fit=fit,
    _solve=lambda q, f: {"C1": f["C1"], "R2": q["tau"] / f["C1"], "R1": q["tau"] / f["C1"] / q["k"]},
)
