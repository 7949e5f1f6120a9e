"""unity-inverter: an inverting amplifier with equal resistors (output = −input).

Used after an inverting stage when the target's sign needs it. F(s) = R2/R1 = 1.
"""

from __future__ import annotations

import math

import numpy as np

from convert.circuit.topologies.model import Topology
from convert.circuit.topologies.networks import R, Part, Stage
from convert.circuit.topologies.shared import fit_constant, gain_of, pos
from convert.errors import UnrealizableError


def coefficients(p):
    """(num, den) of F(s) in descending powers of s, vectorized over part arrays."""
    return [p["R2"] / p["R1"]], [np.ones_like(pos(p["R1"]))]


def fit(topo, shape, settings):
    """A gain of exactly 1."""
    out = fit_constant(topo, shape, settings)
    if not math.isclose(gain_of(shape), 1.0, rel_tol=1e-9):
        raise UnrealizableError(
            f"unity-inverter realizes a gain of exactly 1, the target's is {gain_of(shape):.6g}", key="topology"
        )
    return out


TOPOLOGY = Topology(
    name="unity-inverter",
    description="inverting amplifier with equal resistors: output = −input",
    parts=(Part("R1", "R", "input resistor"), Part("R2", "R", "feedback resistor, equal to R1")),
    stages=(Stage("U1", "out", R("R2"), (("in", R("R1")),), role="inverter"),),
    inverting=True,
    represents="a gain of exactly 1 (used to correct an inverting stage's sign)",
    free_parts=("R1",),
    equal_parts=(("R2", "R1"),),
    equations=("F = R2/R1 = 1",),
    _coefficients=coefficients,
    _parameters=lambda p: {"k": p["R2"] / p["R1"]},
    _fit=fit,
    _solve=lambda q, f: {"R1": f["R1"], "R2": f["R1"]},
)
