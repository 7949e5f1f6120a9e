"""Design helpers several topologies share: the PID family's parameters, the first-order and
constant-gain fits, and the summing resistor of the multi-amplifier stages."""

from __future__ import annotations

import math

import numpy as np

from convert.circuit.topologies.model import TargetShape, refuse
from convert.errors import UnrealizableError

# ----------------------------------------------------------------------------------- PID family


def pid_parameters_from_coefficients(num: list, den: list) -> dict[str, np.ndarray]:
    """Parallel-form kp, ki (1/s), kd (s), tf (s) of (n2 s² + n1 s + n0) / (d2 s² + d1 s).

    Valid for the PID family (den = d1·s·(tf·s + 1)); ti = kp/ki and td = kd/kp are added.
    """
    n = [np.asarray(c, dtype=float) for c in num]
    while len(n) < 3:
        n.insert(0, np.zeros(()))
    d = [np.asarray(c, dtype=float) for c in den]
    while len(d) < 3:
        d.insert(0, np.zeros(()))
    d2, d1 = d[0], d[1]
    tf = d2 / d1
    ki = n[2] / d1
    kp = n[1] / d1 - ki * tf
    kd = n[0] / d1 - kp * tf
    with np.errstate(divide="ignore", invalid="ignore"):
        return {"kp": kp, "ki": ki, "kd": kd, "tf": tf, "ti": kp / ki, "td": kd / kp}


def pid_fit_numbers(shape: TargetShape) -> dict[str, float]:
    """kp, ki, kd, tf of a target with one integrator and one real pole (any zeros), in the
    positive form (a direct-acting target's sign is taken out: the design adds the inverter)."""
    c = shape.controller.scaled(shape.sign)
    num = np.array(c.num)
    den = np.array(c.den)
    if shape.integrators != 1 or len(shape.poles) != 1 or len(den) != 3 or len(num) > 3:
        raise ValueError
    params = pid_parameters_from_coefficients(list(num), list(den))
    return {k: float(v) for k, v in params.items()}


# ----------------------------------------------------------------------------------- catalog

RSUM = 10e3  # summing and reference resistors of the multi-amplifier stages (ohms), an E6 value


def gain_of(shape: TargetShape) -> float:
    """The target's gain in time-constant form, sign taken out (the design handles the sign)."""
    return abs(shape.k)


def fit_constant(topo, shape, settings):
    """A constant gain k > 0 (any sign of the target's gain)."""
    if shape.integrators or len(shape.zeros) or len(shape.poles) or shape.irregular:
        raise refuse(topo, shape, "a constant gain")
    return [{"k": gain_of(shape)}]


def fit_first_order(topo, shape, settings, *, lead_only: bool):
    """One real zero and one real pole: k, tz, tp (s); ``lead_only``: kp, kd, tf with the zero below the pole."""
    if shape.integrators or len(shape.zeros) != 1 or len(shape.poles) != 1 or shape.irregular:
        raise refuse(topo, shape, "k·(tz·s + 1)/(tp·s + 1) (one real zero and one real pole)")
    z, p = shape.zeros[0], shape.poles[0]
    if math.isclose(z, p, rel_tol=1e-9):
        raise refuse(topo, shape, "a zero and a pole at different frequencies")
    if lead_only:
        if not z < p:
            raise UnrealizableError(
                f"{topo.name} needs the zero ({z / 2 / math.pi:.4g} Hz) below the pole ({p / 2 / math.pi:.4g} Hz); "
                "use lead-lag-rc for a lag",
                key="topology",
            )
        kp = gain_of(shape)
        return [{"kp": kp, "kd": kp * (1 / z - 1 / p), "tf": 1 / p}]
    return [{"k": gain_of(shape), "tz": 1 / z, "tp": 1 / p}]


def pos(x):
    """``x`` as a float array (parts may be numbers or arrays of draws)."""
    return np.asarray(x, dtype=float)
