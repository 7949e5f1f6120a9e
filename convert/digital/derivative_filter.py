"""Make an improper controller (ideal PD / PID) proper by filtering its derivative action.

Definition (the usual textbook PID filter, generalized): split C(s) = Q(s) + R(s)/den(s), where
Q(s) = q0 + q1·s + ... + qm·s^m is the improper (polynomial) part. The proportional part q0 and
the proper part R/den stay as they are; the derivative part Q(s) − q0 is divided by (τs + 1)^m
with τ = T_d / N and T_d = (qm / q0)^(1/m). For m = 1 this is the familiar
Kp·Td·s / (1 + Td·s/N): the filter pole sits N times above the derivative corner 1/T_d.
"""

from __future__ import annotations

import math

import numpy as np

from convert.controller import Controller
from convert.errors import InputError


def derivative_filter_time_constant(controller: Controller, n: float) -> float | None:
    """τ (seconds) that :func:`add_derivative_filter` would use; None when already proper."""
    if controller.is_proper:
        return None
    q, _ = np.polydiv(np.asarray(controller.num), np.asarray(controller.den))
    m = len(q) - 1
    q0 = q[-1]
    if q0 == 0 or abs(q0) <= 1e-14 * float(np.max(np.abs(q))):
        raise InputError(
            "the improper part has no proportional term, so the derivative time Td (and the filter "
            "tau = Td/N) is undefined; write the filter into the expression, e.g. s/(0.01*s+1)",
            key="filter",
        )
    ratio = q[0] / q0
    td = abs(ratio) ** (1.0 / m)
    return td / n


def add_derivative_filter(controller: Controller, n: float) -> Controller:
    """``controller`` with its derivative action filtered so that it is proper (see module doc).

    ``n`` is the filter ratio N (> 0; 5–20 is common practice). A proper controller is returned
    unchanged. Analog controllers only.
    """
    if controller.is_digital:
        raise InputError("a derivative filter is added to an analog controller", key="filter")
    try:
        n = float(n)
    except (TypeError, ValueError):
        raise InputError(f"N must be a positive number, found {n!r}", key="filter") from None
    if not (math.isfinite(n) and n > 0):
        raise InputError(f"N must be a positive number, found {n!r}", key="filter")
    if controller.is_proper:
        return controller
    tau = derivative_filter_time_constant(controller, n)
    num = np.asarray(controller.num, dtype=float)
    den = np.asarray(controller.den, dtype=float)
    q, r = np.polydiv(num, den)
    m = len(q) - 1
    q0 = np.array([q[-1]])
    qd = q.copy()
    qd[-1] = 0.0
    filt = np.array([1.0])
    for _ in range(m):
        filt = np.polymul(filt, [tau, 1.0])
    # C_f = q0 + qd/filt + r/den  over the common denominator filt·den
    num_f = np.polyadd(np.polyadd(np.polymul(q0, np.polymul(filt, den)), np.polymul(qd, den)), np.polymul(r, filt))
    den_f = np.polymul(filt, den)
    return Controller.analog(num_f, den_f, controller.name)
