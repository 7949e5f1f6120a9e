"""difference-error: a difference amplifier forming k·(setpoint − measurement).

u = R4/(R3+R4)·(1 + R2/R1)·sp − (R2/R1)·meas; with R3 = R1 and R4 = R2 both paths have gain k = R2/R1.
"""

from __future__ import annotations

import numpy as np

from convert.circuit.topologies.model import Topology
from convert.circuit.topologies.networks import R, Part, Stage
from convert.circuit.topologies.shared import fit_constant, pos


def setpoint_coefficients(p):
    """(num, den) of the setpoint path Cr(s)."""
    return [p["R4"] / (p["R3"] + p["R4"]) * (1 + p["R2"] / p["R1"])], [np.ones_like(pos(p["R1"]))]


TOPOLOGY = Topology(
    name="difference-error",
    description="difference amplifier forming k·(setpoint − measurement)",
    parts=(
        Part("R1", "R", "measurement input resistor"),
        Part("R2", "R", "feedback resistor (k = R2/R1)"),
        Part("R3", "R", "setpoint input resistor (equal to R1)"),
        Part("R4", "R", "setpoint divider to ground (equal to R2)"),
    ),
    stages=(Stage("U1", "out", R("R2"), (("meas", R("R1")),), plus=("sp", R("R3"), R("R4")), role="error"),),
    inverting=False,
    inputs=("sp", "meas"),
    represents="k·(setpoint − measurement), k > 0 (an error stage)",
    free_parts=("R1",),
    equal_parts=(("R3", "R1"),),
    equations=("u = R4/(R3+R4)·(1 + R2/R1)·sp − (R2/R1)·meas", "R3 = R1, R4 = R2 = k·R1"),
    _coefficients=lambda p: ([p["R2"] / p["R1"]], [np.ones_like(pos(p["R1"]))]),
    _setpoint_coefficients=setpoint_coefficients,
    _parameters=lambda p: {"k": p["R2"] / p["R1"], "setpoint_gain": setpoint_coefficients(p)[0][0]},
    _fit=fit_constant,
    _solve=lambda q, f: {"R1": f["R1"], "R2": q["k"] * f["R1"], "R4": q["k"] * f["R1"]},
)
