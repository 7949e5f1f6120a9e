"""pi-rc-feedback: a PI stage, F(s) = (R2·C1·s + 1)/(R1·C1·s) = kp·(1 + 1/(ti·s))."""

from __future__ import annotations

import numpy as np

from convert.circuit.topologies.model import Topology, refuse
from convert.circuit.topologies.networks import C, R, Part, Series, Stage
from convert.circuit.topologies.shared import gain_of, pos


def coefficients(p):
    """(num, den) of F(s) in descending powers of s, vectorized over part arrays."""
    return [p["R2"] * p["C1"], np.ones_like(pos(p["R1"]))], [p["R1"] * p["C1"], 0 * pos(p["R1"])]


def fit(topo, shape, settings):
    """One integrator and one real zero: kp, ti (s)."""
    if shape.integrators != 1 or len(shape.zeros) != 1 or len(shape.poles) or shape.irregular:
        raise refuse(topo, shape, "kp·(1 + 1/(ti·s)) (one integrator and one real zero)")
    ti = 1.0 / shape.zeros[0]
    return [{"kp": gain_of(shape) * ti, "ti": ti}]


TOPOLOGY = Topology(
    name="pi-rc-feedback",
    description="PI: input resistor, feedback resistor in series with a capacitor",
    parts=(
        Part("R1", "R", "input resistor (kp = R2/R1)"),
        Part("R2", "R", "feedback resistor"),
        Part("C1", "C", "feedback capacitor (ti = R2·C1)"),
    ),
    stages=(Stage("U1", "out", Series(R("R2"), C("C1")), (("in", R("R1")),), role="PI"),),
    inverting=True,
    represents="kp·(1 + 1/(ti·s)) (PI)",
    free_parts=("C1",),
    tunable={"kp": ("R1", -1), "kc": ("R1", -1)},
    equations=("F = (R2·C1·s + 1)/(R1·C1·s) = kp·(1 + 1/(ti·s))", "kp = R2/R1, ti = R2·C1", "R2 = ti/C1", "R1 = R2/kp"),
    _coefficients=coefficients,
    _parameters=lambda p: {"kp": p["R2"] / p["R1"], "ti": p["R2"] * p["C1"]},
    _fit=fit,
    _solve=lambda q, f: {"C1": f["C1"], "R2": q["ti"] / f["C1"], "R1": q["ti"] / f["C1"] / q["kp"]},
)
