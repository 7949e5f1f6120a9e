"""pid-single-amp: a series (interacting) PID with a derivative filter on one amplifier.

F(s) = (1 + R2·C2·s)(1 + (R1+R3)·C1·s) / (R1·C2·s·(1 + R3·C1·s)) = K′·(1 + 1/(Ti′·s))·(1 + Td′·s)/(1 + Tf·s).
"""

from __future__ import annotations

import math

from convert.circuit.topologies.model import Topology
from convert.circuit.topologies.networks import C, R, Parallel, Part, Series, Stage
from convert.circuit.topologies.shared import gain_of, pid_parameters_from_coefficients, pos
from convert.errors import UnrealizableError


def coefficients(p):
    """(num, den) of F(s) in descending powers of s, vectorized over part arrays."""
    k = p["R2"] / p["R1"]
    ti = p["R2"] * p["C2"]
    td = (p["R1"] + p["R3"]) * p["C1"]
    tf = p["R3"] * p["C1"]
    return [k * ti * td, k * (ti + td), k], [ti * tf, ti, 0 * pos(k)]


def solve(q, f):
    """Parts from kc', ti', td', tf and the chosen C1."""
    c1 = f["C1"]
    r1 = (q["td'"] - q["tf"]) / c1
    r2 = q["kc'"] * r1
    return {"C1": c1, "R1": r1, "R3": q["tf"] / c1, "R2": r2, "C2": q["ti'"] / r2}


def parameters(p):
    """Series kc', ti', td' and the parallel-form kp, ki, kd, tf, ti, td the parts set."""
    return {
        "kc'": p["R2"] / p["R1"],
        "ti'": p["R2"] * p["C2"],
        "td'": (p["R1"] + p["R3"]) * p["C1"],
        **pid_parameters_from_coefficients(*coefficients(p)),
    }


def fit(topo, shape, settings):
    if shape.integrators != 1 or len(shape.zeros) != 2 or len(shape.poles) != 1 or shape.irregular:
        why = (
            "complex zeros (ti < 4·td in the ideal form): use pid-parallel" if shape.complex_zeros else shape.describe()
        )
        raise UnrealizableError(
            f"{topo.name} realizes k·(1 + ti·s)(1 + td·s)/(ti·s·(1 + tf·s)) with real zeros "
            f"and td > tf; the target has {why}",
            key="topology",
        )
    tf = 1.0 / shape.poles[0]
    kint = gain_of(shape)  # low-frequency asymptote kint/s
    out = []
    for a, b in ((0, 1), (1, 0)):
        ti, td = 1.0 / shape.zeros[a], 1.0 / shape.zeros[b]
        if td > tf * (1 + 1e-9):
            out.append({"kc'": kint * ti, "ti'": ti, "td'": td, "tf": tf})
    if not out:
        raise UnrealizableError(
            f"{topo.name} needs one zero below the filter pole ({1 / tf / 2 / math.pi:.4g} Hz)", key="topology"
        )
    return out


TOPOLOGY = Topology(
    name="pid-single-amp",
    description="PID on one amplifier (series/interacting form): input R1 parallel (R3 + C1), feedback R2 + C2",
    parts=(
        Part("R1", "R", "input resistor (K′ = R2/R1, series gain)"),
        Part("C1", "C", "derivative capacitor (Td′ = (R1+R3)·C1, series derivative time)"),
        Part("R3", "R", "derivative-limiting resistor (Tf = R3·C1 = Td′/N′)"),
        Part("R2", "R", "feedback resistor (K′ = R2/R1)"),
        Part("C2", "C", "integral capacitor (Ti′ = R2·C2, series integral time)"),
    ),
    stages=(
        Stage(
            "U1", "out", Series(R("R2"), C("C2")), (("in", Parallel(R("R1"), Series(R("R3"), C("C1")))),), role="PID"
        ),
    ),
    inverting=True,
    represents="K′·(1 + 1/(Ti′·s))·(1 + Td′·s)/(1 + Tf·s): series PID with real zeros and derivative filter "
    "(Td′ > Tf); quantities kc', ti', td', tf",
    free_parts=("C1",),
    equations=(
        "F = (1 + R2·C2·s)(1 + (R1+R3)·C1·s) / (R1·C2·s·(1 + R3·C1·s))",
        "kc' = R2/R1, ti' = R2·C2, td' = (R1+R3)·C1, tf = R3·C1 (series form: K′, Ti′, Td′)",
        "R1 = (td' − tf)/C1",
        "R3 = tf/C1",
        "R2 = kc'·R1",
        "C2 = ti'/R2",
    ),
    _coefficients=coefficients,
    _parameters=parameters,
    _fit=fit,
    _solve=solve,
)
