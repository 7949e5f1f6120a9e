"""A linear digital controller run in velocity (incremental) form, with its output limits.

The velocity algorithm computes the change of the output each sample from the error history and
adds it to the output it sent last, clamped to its limits:

    Δu[k] = D(z)·e,   D(z) = (1 − z⁻¹)·B(z)/A(z),   u[k] = clamp(u[k−1] + Δu[k], low, high)

Unclamped it is the same linear law as the positional form, C(z) = B(z)/A(z). At a limit it
differs: nothing integrates while the output is held (no windup), and the output leaves the limit
as soon as the increments turn. When A has the integrator factor (1 − z⁻¹), as a PI or PID has, it
is divided out of A (D = B/A′) rather than cancelled numerically. Coefficients ascending in z⁻¹
(``b = [b0, b1, …]``, ``a = [1, a1, …]``); the arithmetic is double precision.
"""

from __future__ import annotations

import math

import numpy as np

from convert.controller import Controller


def increment_filter(b, a) -> tuple[list[float], list[float]]:
    """(d_b, d_a): D(z) = (1 − z⁻¹)·B/A, with a factor (1 − z⁻¹) of A divided out when A(1) = 0
    (to rounding), both ascending in z⁻¹ with d_a[0] = 1."""
    b = np.asarray(b, dtype=float)
    a = np.asarray(a, dtype=float)
    b, a = b / a[0], a / a[0]
    if a.size > 1 and abs(float(np.sum(a))) <= 1e-12 * float(np.sum(np.abs(a))):
        # A(1) = 0: divide A(z⁻¹) by (1 − z⁻¹) (synthetic division, q_k = a_k + q_{k−1})
        return b.tolist(), np.cumsum(a)[:-1].tolist()
    return np.convolve(b, [1.0, -1.0]).tolist(), a.tolist()


class VelocityForm:
    """``controller`` (digital) as a velocity algorithm with ``limits`` (low, high) on its output;
    :meth:`model` gives a fresh sample-by-sample model (``step(e) -> u``) for the loop simulation
    (:func:`convert.compare.loop.simulate_loop`, ``realized``)."""

    def __init__(self, controller: Controller, limits: tuple[float, float] | None):
        if not controller.is_digital:
            raise ValueError("the velocity form is a digital controller's")
        self.db, self.da = increment_filter(controller.b, controller.a)
        self.limits = (float(limits[0]), float(limits[1])) if limits else (-math.inf, math.inf)

    def model(self) -> _VelocityModel:
        return _VelocityModel(self.db, self.da, self.limits)


class _VelocityModel:
    def __init__(self, db, da, limits):
        self.db, self.da = list(db), list(da)
        self.lo, self.hi = limits
        self.e = [0.0] * len(self.db)  # e[k], e[k−1], …
        self.d = [0.0] * len(self.da)  # Δu[k], Δu[k−1], … (unclamped increments)
        self.u = 0.0

    def step(self, e: float) -> float:
        """One sample: the error in, the clamped output out (controller units, deviations from
        the operating point)."""
        self.e = [float(e)] + self.e[:-1]
        inc = sum(c * x for c, x in zip(self.db, self.e)) - sum(c * x for c, x in zip(self.da[1:], self.d))
        self.d = [inc] + self.d[:-1]
        self.u = min(max(self.u + inc, self.lo), self.hi)
        return self.u
