"""lead-lag-rc: input R1 ∥ C1, feedback R2 ∥ C2; F(s) = (R2/R1)·(R1·C1·s + 1)/(R2·C2·s + 1)."""

from __future__ import annotations

import numpy as np

from convert.circuit.topologies.model import Topology
from convert.circuit.topologies.networks import C, R, Parallel, Part, Stage
from convert.circuit.topologies.shared import fit_first_order, pos


def coefficients(p):
    """(num, den) of F(s) in descending powers of s, vectorized over part arrays."""
    return [p["R2"] * p["C1"], p["R2"] / p["R1"]], [p["R2"] * p["C2"], np.ones_like(pos(p["R1"]))]


TOPOLOGY = Topology(
    name="lead-lag-rc",
    description="lead or lag: input R1 parallel C1, feedback R2 parallel C2",
    parts=(
        Part("R1", "R", "input resistor"),
        Part("C1", "C", "input capacitor (zero: tz = R1·C1)"),
        Part("R2", "R", "feedback resistor (dc gain R2/R1)"),
        Part("C2", "C", "feedback capacitor (pole: tp = R2·C2)"),
    ),
    stages=(Stage("U1", "out", Parallel(R("R2"), C("C2")), (("in", Parallel(R("R1"), C("C1"))),), role="lead/lag"),),
    inverting=True,
    represents="k·(tz·s + 1)/(tp·s + 1): a lead (tz > tp) or a lag (tz < tp)",
    free_parts=("C1",),
    equations=("F = (R2/R1)·(R1·C1·s + 1)/(R2·C2·s + 1)", "R1 = tz/C1", "R2 = k·R1", "C2 = tp/R2"),
    _coefficients=coefficients,
    _parameters=lambda p: {"k": p["R2"] / p["R1"], "tz": p["R1"] * p["C1"], "tp": p["R2"] * p["C2"]},
    _fit=lambda t, s, st: fit_first_order(t, s, st, lead_only=False),
    _solve=lambda q, f: {
        "C1": f["C1"],
        "R1": q["tz"] / f["C1"],
        "R2": q["k"] * q["tz"] / f["C1"],
        "C2": q["tp"] / (q["k"] * q["tz"] / f["C1"]),
    },
)
