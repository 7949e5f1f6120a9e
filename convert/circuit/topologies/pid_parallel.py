"""pid-parallel: separate P, I and D amplifiers added by an inverting summing amplifier.

F(s) = (R9/R6)(R2/R1) + (R9/R7)/(R3·C1·s) + (R9/R8)·R5·C2·s/(R4·C2·s + 1) = kp + ki/s + kd·s/(tf·s + 1).
"""

from __future__ import annotations

import numpy as np

from convert.circuit.topologies.model import Topology, refuse
from convert.circuit.topologies.networks import C, R, Part, Series, Stage
from convert.circuit.topologies.shared import RSUM, pid_fit_numbers, pid_parameters_from_coefficients, pos
from convert.errors import UnrealizableError


def terms(p):
    """kp, ki (1/s), kd (s), tf (s) the parts set."""
    kp = p["R9"] / p["R6"] * p["R2"] / p["R1"]
    ki = p["R9"] / (p["R7"] * p["R3"] * p["C1"])
    kd = p["R9"] / p["R8"] * p["R5"] * p["C2"]
    tf = p["R4"] * p["C2"]
    return kp, ki, kd, tf


def coefficients(p):
    """(num, den) of F(s) in descending powers of s, vectorized over part arrays."""
    kp, ki, kd, tf = terms(p)
    return [kp * tf + kd, kp + ki * tf, ki], [tf, np.ones_like(pos(kp)), 0 * pos(kp)]


def fit(topo, shape, settings):
    try:
        n = pid_fit_numbers(shape)
    except ValueError:
        raise refuse(topo, shape, "kp + ki/s + kd·s/(tf·s + 1) (one integrator, one real filter pole)") from None
    if n["kp"] < -1e-12 * abs(n["kd"] / n["tf"]) or n["ki"] <= 0 or n["kd"] <= 0:
        raise UnrealizableError(
            f"{topo.name} needs kp >= 0, ki > 0, kd > 0; the target has kp={n['kp']:.4g}, "
            f"ki={n['ki']:.4g}, kd={n['kd']:.4g}",
            key="topology",
        )
    return [{"kp": abs(n["kp"]), "ki": n["ki"], "kd": n["kd"], "tf": n["tf"]}]


TOPOLOGY = Topology(
    name="pid-parallel",
    description="parallel PID: separate P, I and D amplifiers added by an inverting summing amplifier",
    parts=(
        Part("R1", "R", "P amplifier input resistor"),
        Part("R2", "R", "P amplifier feedback (kp = R2/R1)"),
        Part("R3", "R", "I amplifier input resistor (ki = 1/(R3·C1))"),
        Part("C1", "C", "I amplifier capacitor"),
        Part("C2", "C", "D amplifier input capacitor (kd = R5·C2)"),
        Part("R4", "R", "D amplifier limiting resistor (tf = R4·C2)"),
        Part("R5", "R", "D amplifier feedback"),
        Part("R6", "R", "summing resistor, P"),
        Part("R7", "R", "summing resistor, I"),
        Part("R8", "R", "summing resistor, D"),
        Part("R9", "R", "summing feedback resistor"),
    ),
    stages=(
        Stage("U1", "np", R("R2"), (("in", R("R1")),), role="P"),
        Stage("U2", "ni", C("C1"), (("in", R("R3")),), role="I"),
        Stage("U3", "nd", R("R5"), (("in", Series(R("R4"), C("C2"))),), role="D"),
        Stage("U4", "out", R("R9"), (("np", R("R6")), ("ni", R("R7")), ("nd", R("R8"))), role="sum"),
    ),
    inverting=False,
    represents="kp + ki/s + kd·s/(tf·s + 1) with any kp >= 0, ki, kd > 0 (complex zeros too)",
    free_parts=("C1", "C2"),
    fixed_parts={"R1": RSUM, "R6": RSUM, "R7": RSUM, "R8": RSUM, "R9": RSUM},
    tunable={"kp": ("R2", 1), "kc": ("R2", 1), "ki": ("R3", -1), "kd": ("R5", 1)},
    equations=(
        "F = (R9/R6)(R2/R1) + (R9/R7)/(R3·C1·s) + (R9/R8)·R5·C2·s/(R4·C2·s + 1)",
        f"R1 = R6 = R7 = R8 = R9 = {RSUM:g} Ω",
        "R2 = kp·R1",
        "R3 = 1/(ki·C1)",
        "R5 = kd/C2",
        "R4 = tf/C2",
    ),
    _coefficients=coefficients,
    _parameters=lambda p: pid_parameters_from_coefficients(*coefficients(p)),
    _fit=fit,
    _solve=lambda q, f: {
        "C1": f["C1"],
        "C2": f["C2"],
        "R2": q["kp"] * RSUM,
        "R3": 1.0 / (q["ki"] * f["C1"]),
        "R5": q["kd"] / f["C2"],
        "R4": q["tf"] / f["C2"],
    },
)
