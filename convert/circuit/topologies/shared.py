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


def biquad_numbers(topo, shape: TargetShape, needs: str) -> dict[str, float]:
    """a1, a0 (monic denominator, both > 0: poles in the left half-plane) and n2, n1, n0 of a
    second-order section (n2·s² + n1·s + n0)/(s² + a1·s + a0), the sign taken out so that n0 >= 0
    (n2 >= 0 when n0 = 0); coefficients below 1e-12 of the largest term at w0 are exactly 0.
    Raises the topology's refusal naming ``needs``."""
    c = shape.controller
    num, den = np.array(c.num, dtype=float), np.array(c.den, dtype=float)
    if den.size != 3 or num.size > 3 or not (den[1] / den[0] > 0 and den[2] / den[0] > 0):
        raise refuse(topo, shape, needs)
    num = np.concatenate([np.zeros(3 - num.size), num]) / den[0]
    a1, a0 = den[1] / den[0], den[2] / den[0]
    scale = max(abs(num[0]) * a0, abs(num[1]) * math.sqrt(a0), abs(num[2]))
    num = np.where(np.abs(num) * np.array([a0, math.sqrt(a0), 1.0]) <= 1e-12 * scale, 0.0, num)
    if num[2] < 0 or (num[2] == 0 and num[0] < 0):
        num = -num
    return {"a1": float(a1), "a0": float(a0), "n2": float(num[0]), "n1": float(num[1]), "n0": float(num[2])}
