"""pid-two-input: a PID with setpoint weights, u = kp·(b·r − y) + ki/s·(r − y) + kd·s/(tf·s + 1)·(c·r − y).

A setpoint inverter, P, I and D amplifiers each summing setpoint and measurement through their own
networks, and a summing amplifier. F(s) is the measurement path Cy(s); the setpoint path Cr(s) is
:meth:`Topology.setpoint_coefficients`.
"""

from __future__ import annotations

import numpy as np

from convert.circuit.topologies.model import Topology
from convert.circuit.topologies.networks import C, R, Part, Series, Stage
from convert.circuit.topologies.shared import RSUM, pid_parameters_from_coefficients, pos
from convert.errors import UnrealizableError


def terms(p):
    """((kp, ki, kd, tf) of the measurement path, the same of the setpoint path)."""
    with np.errstate(invalid="ignore"):
        g = p["R2"] / p["R1"]  # setpoint inverter gain (1 by design)
        meas = (
            p["R14"] / p["R11"] * p["R5"] / p["R4"],
            p["R14"] / (p["R12"] * p["R7"] * p["C1"]),
            p["R14"] / p["R13"] * p["R10"] * p["C3"],
            p["R9"] * p["C3"],
        )
        sp = (
            g * p["R14"] / p["R11"] * p["R5"] / p["R3"],
            g * p["R14"] / (p["R12"] * p["R6"] * p["C1"]),
            g * p["R14"] / p["R13"] * p["R10"] * p["C2"],
            p["R8"] * p["C2"],
        )
        return meas, sp


def pid_poly(kp, ki, kd, tf):
    """(num, den) of kp + ki/s + kd·s/(tf·s + 1); an open D path (tf NaN) counts as tf = 0."""
    tf = np.nan_to_num(np.asarray(tf, dtype=float), nan=0.0)
    return [kp * tf + kd, kp + ki * tf, ki], [tf, np.ones_like(pos(kp)), 0 * pos(kp)]


def solve(q, f):
    """Parts from kp, ki, kd, tf, b, c and the chosen C1, C3 (b = 0 or c = 0 leaves parts open)."""
    c1, c3 = f["C1"], f["C3"]
    r7 = 1.0 / (q["ki"] * c1)
    out = {
        "C1": c1,
        "C3": c3,
        "R4": np.asarray(RSUM),
        "R5": q["kp"] * RSUM + 0 * c1,
        "R7": r7,
        "R6": r7,
        "R10": q["kd"] / c3,
        "R9": q["tf"] / c3,
    }
    out["R3"] = (RSUM / q["b"] + 0 * c1) if q["b"] > 0 else np.inf + 0 * c1
    if q["c"] > 0:
        out["C2"] = q["c"] * c3
        out["R8"] = q["tf"] / (q["c"] * c3)
    else:
        out["C2"] = 0 * c3
        out["R8"] = np.inf + 0 * c3
    return out


def parameters(p):
    """kp, ki, kd, tf, ti, td of the measurement path and the weights b, c."""
    meas, sp = terms(p)
    return {**pid_parameters_from_coefficients(*pid_poly(*meas)), "b": sp[0] / meas[0], "c": sp[2] / meas[2]}


def fit(topo, shape, settings):
    if settings is None:
        raise UnrealizableError(
            f"{topo.name} needs PID settings with setpoint weights (e.g. b=0.5 c=0)", key="topology"
        )
    if settings.ki <= 0:
        raise UnrealizableError(f"{topo.name} needs integral action (ki > 0)", key="topology")
    if settings.kd <= 0:
        raise UnrealizableError(
            f"{topo.name} builds its D amplifier from kd and tf; this {settings.kind} has no "
            "derivative action (kd = 0), which the catalog has no weighted stage for: give kd and "
            "tf, or b = 1 for a single-input PI",
            key="topology",
        )
    if settings.tf <= 0:
        raise UnrealizableError(f"{topo.name} needs a derivative filter (tf > 0 or n=...) with kd > 0", key="topology")
    if settings.kp <= 0:
        raise UnrealizableError(f"{topo.name} needs kp > 0", key="topology")
    return [
        {
            "kp": abs(settings.kp),
            "ki": abs(settings.ki),
            "kd": abs(settings.kd),
            "tf": settings.tf,
            "b": settings.b,
            "c": settings.c,
        }
    ]


TOPOLOGY = Topology(
    name="pid-two-input",
    description=(
        "PID with setpoint weights: setpoint inverter, P, I and D amplifiers each summing setpoint and "
        "measurement through their own networks, and a summing amplifier"
    ),
    parts=(
        Part("R1", "R", "setpoint inverter input"),
        Part("R2", "R", "setpoint inverter feedback"),
        Part("R3", "R", "P amplifier, setpoint resistor (b·kp = R5/R3)", optional=True),
        Part("R4", "R", "P amplifier, measurement resistor (kp = R5/R4)"),
        Part("R5", "R", "P amplifier feedback"),
        Part("R6", "R", "I amplifier, setpoint resistor (equal to R7)"),
        Part("R7", "R", "I amplifier, measurement resistor (ki = 1/(R7·C1))"),
        Part("C1", "C", "I amplifier capacitor"),
        Part("C2", "C", "D amplifier, setpoint capacitor (c·kd = R10·C2)", optional=True),
        Part("R8", "R", "D amplifier, setpoint limiting resistor (tf = R8·C2)", optional=True),
        Part("C3", "C", "D amplifier, measurement capacitor (kd = R10·C3)"),
        Part("R9", "R", "D amplifier, measurement limiting resistor (tf = R9·C3)"),
        Part("R10", "R", "D amplifier feedback"),
        Part("R11", "R", "summing resistor, P"),
        Part("R12", "R", "summing resistor, I"),
        Part("R13", "R", "summing resistor, D"),
        Part("R14", "R", "summing feedback resistor"),
    ),
    stages=(
        Stage("U1", "spn", R("R2"), (("sp", R("R1")),), role="setpoint inverter"),
        Stage("U2", "np", R("R5"), (("spn", R("R3")), ("meas", R("R4"))), role="P"),
        Stage("U3", "ni", C("C1"), (("spn", R("R6")), ("meas", R("R7"))), role="I"),
        Stage("U4", "nd", R("R10"), (("spn", Series(R("R8"), C("C2"))), ("meas", Series(R("R9"), C("C3")))), role="D"),
        Stage("U5", "out", R("R14"), (("np", R("R11")), ("ni", R("R12")), ("nd", R("R13"))), role="sum"),
    ),
    inverting=True,
    inputs=("sp", "meas"),
    represents="u = kp·(b·r − y) + ki/s·(r − y) + kd·s/(tf·s + 1)·(c·r − y) exactly (b, c >= 0; c = 0 is "
    "derivative on measurement)",
    free_parts=("C1", "C3"),
    fixed_parts={"R1": RSUM, "R2": RSUM, "R4": RSUM, "R11": RSUM, "R12": RSUM, "R13": RSUM, "R14": RSUM},
    equal_parts=(("R6", "R7"),),
    tunable={"kp": ("R5", 1), "kc": ("R5", 1), "kd": ("R10", 1)},
    equations=(
        "measurement path Cy = (R14/R11)(R5/R4) + (R14/R12)/(R7·C1·s) + (R14/R13)·R10·C3·s/(R9·C3·s + 1)",
        "setpoint path Cr = (R2/R1)·[(R14/R11)(R5/R3) + (R14/R12)/(R6·C1·s) + (R14/R13)·R10·C2·s/(R8·C2·s + 1)]",
        "R5 = kp·R4, R3 = R4/b, R7 = R6 = 1/(ki·C1), R10 = kd/C3, R9 = tf/C3, C2 = c·C3, R8 = tf/C2",
    ),
    _coefficients=lambda p: pid_poly(*terms(p)[0]),
    _setpoint_coefficients=lambda p: pid_poly(*terms(p)[1]),
    _parameters=parameters,
    _fit=fit,
    _solve=solve,
)
