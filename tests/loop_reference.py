"""An independent loop simulation for the loop tests: fixed-step classical Runge-Kutta (RK4) on
the continuous controller and plant, with the dead time exact as a whole number of steps.

Nothing here is shared with :mod:`convert.compare.loop`: the state-space models come from
python-control (``control.tf2ss``, its own realization), the integration is RK4 at a fine step
(error of order h⁴), and the delayed controller output is read from the stored samples (at
mid-steps by a cubic through the four neighbouring samples, one-sided next to t = 0 where the
output jumps). The setpoint and load steps start at grid points, so their jumps are exact.
Used only by tests; slow (a Python loop), so it runs over a few settling times.
"""

from __future__ import annotations

import math

import numpy as np


def _ss(c):
    import control

    sys = control.tf2ss(control.tf(list(c.num), list(c.den)))
    return (
        np.asarray(sys.A, float),
        np.asarray(sys.B, float)[:, 0],
        np.asarray(sys.C, float)[0],
        float(np.asarray(sys.D, float).ravel()[0]),
    )


def rk4_loop(
    controller,
    plant,
    dead_time_s: float,
    *,
    duration_s: float,
    h: float,
    kind: str = "setpoint",
    step: float = 1.0,
    output_limits=None,
):
    """(t, y, u) at steps of h (θ must be a whole number of steps, at least 2) for a setpoint or
    load step at t = 0. The plant must be strictly proper (no algebraic loop)."""
    ap, bp, cp, dp = _ss(plant)
    ac, bc, cc, dc = _ss(controller)
    assert dp == 0.0, "strictly proper plant expected"
    m = int(round(dead_time_s / h))
    assert abs(m * h - dead_time_s) < 1e-9 * max(dead_time_s, 1.0)
    assert m == 0 or m >= 2
    lo, hi = output_limits if output_limits else (-math.inf, math.inf)
    r = step if kind == "setpoint" else 0.0
    d = step if kind == "disturbance" else 0.0
    n = int(math.ceil(duration_s / h - 1e-9))
    npl = ap.shape[0]

    def ctrl_out(xc, y):
        v = cc @ xc + dc * (r - y)
        return min(max(v, lo), hi)

    def deriv(x, xc, w):
        y = cp @ x
        return ap @ x + bp * w, ac @ xc + bc * (r - y)

    x = np.zeros(npl)
    xc = np.zeros(ac.shape[0])
    us = np.zeros(n + 1)
    ys = np.zeros(n + 1)
    for k in range(n + 1):
        y = cp @ x
        ys[k] = y
        us[k] = ctrl_out(xc, y)
        if k == n:
            break
        if m == 0:  # no delay: the plant input is the controller output of the current state

            def w_of(xs, xcs):
                return ctrl_out(xcs, cp @ xs) + d

            k1 = deriv(x, xc, w_of(x, xc))
            x2, xc2 = x + h / 2 * k1[0], xc + h / 2 * k1[1]
            k2 = deriv(x2, xc2, w_of(x2, xc2))
            x3, xc3 = x + h / 2 * k2[0], xc + h / 2 * k2[1]
            k3 = deriv(x3, xc3, w_of(x3, xc3))
            x4, xc4 = x + h * k3[0], xc + h * k3[1]
            k4 = deriv(x4, xc4, w_of(x4, xc4))
        else:
            j = k - m
            if j < 0:
                w0 = wm = w1 = 0.0
            else:
                w0, w1 = us[j] + d, us[j + 1] + d
                idx = [0, 1, 2, 3] if j == 0 else [j - 1, j, j + 1, j + 2]
                xs = 0.5 if j == 0 else 1.5
                wm = d + sum(
                    us[i] * np.prod([(xs - q) / (p - q) for q in range(4) if q != p]) for p, i in enumerate(idx)
                )
            k1 = deriv(x, xc, w0)
            k2 = deriv(x + h / 2 * k1[0], xc + h / 2 * k1[1], wm)
            k3 = deriv(x + h / 2 * k2[0], xc + h / 2 * k2[1], wm)
            k4 = deriv(x + h * k3[0], xc + h * k3[1], w1)
        x = x + h / 6 * (k1[0] + 2 * k2[0] + 2 * k3[0] + k4[0])
        xc = xc + h / 6 * (k1[1] + 2 * k2[1] + 2 * k3[1] + k4[1])
    return np.arange(n + 1) * h, ys, us


def stepwise_sampled_loop(
    controller, plant, dead_time_s, *, duration_s, steps, kind="setpoint", step=1.0, delay_s=0.0, output_limits=None
):
    """The sampled-data loop as this project simulated it before the simulation became matrix
    powers: one Python iteration per sub-step h = T/ceil(T/(duration/steps)), the plant
    discretized by scipy (matrix exponential, zero-order hold) on python-control-independent
    ``scipy.signal.tf2ss`` companion realizations, fractional delays by splitting the sub-step
    (modified z-transform). Kept as the regression reference: the new simulation must give the
    same response within 1e-9 of the step. Returns (t, y, u)."""
    from scipy.linalg import expm
    from scipy.signal import tf2ss

    def ss(num, den):
        a, b, c, d = tf2ss(list(num), list(den))
        return np.atleast_2d(a), np.atleast_2d(b), np.atleast_2d(c), float(np.atleast_2d(d)[0, 0])

    def phi_gamma(a, b, t):
        n = a.shape[0]
        m = np.zeros((n + 1, n + 1))
        m[:n, :n] = a * t
        m[:n, n:] = b * t
        e = expm(m)
        return e[:n, :n], e[:n, n:]

    def taps(a, b, h, delay):
        n = int(math.floor(delay / h + 1e-9))
        tau = delay - n * h
        if tau < 1e-12 * h:
            tau = 0.0
        phi_rest, gamma_rest = phi_gamma(a, b, h - tau)
        if tau == 0.0:
            return n, gamma_rest[:, 0], np.zeros(a.shape[0])
        _, gamma_tau = phi_gamma(a, b, tau)
        return n, gamma_rest[:, 0], (phi_rest @ gamma_tau)[:, 0]

    t_s = controller.sample_period_s
    h = duration_s / steps
    every = max(1, int(math.ceil(t_s / h - 1e-9)))
    h = t_s / every
    steps = int(math.ceil(duration_s / h))
    ac, bc, cc, dc = ss(controller.num, controller.den)
    ap, bp, cp, dp = ss(plant.num, plant.den)
    phi, _ = phi_gamma(ap, bp, h)
    n_u, g0u, g1u = taps(ap, bp, h, dead_time_s + delay_s)
    n_d, g0d, g1d = taps(ap, bp, h, dead_time_s)
    lo, hi = output_limits if output_limits else (-math.inf, math.inf)
    r = step if kind == "setpoint" else 0.0
    dist = step if kind == "disturbance" else 0.0
    x = np.zeros(ap.shape[0])
    xc = np.zeros(ac.shape[0])
    u_hist = []
    y_out = np.zeros(steps + 1)
    u_out = np.zeros(steps + 1)
    u_now = 0.0
    prev_input = 0.0
    for k in range(steps + 1):
        y = float(cp[0] @ x) + dp * prev_input
        if k % every == 0:
            e = r - y
            v = float(cc[0] @ xc) + dc * e
            xc = ac @ xc + bc[:, 0] * e
            u_now = min(max(v, lo), hi)
        u_hist.append(u_now)
        y_out[k], u_out[k] = y, u_now
        if k == steps:
            break
        j = k - n_u
        wu0 = u_hist[j] if j >= 0 else 0.0
        wu1 = u_hist[j - 1] if j >= 1 else 0.0
        wd0 = dist if k >= n_d else 0.0
        wd1 = dist if k >= n_d + 1 else 0.0
        x = phi @ x + g0u * wu0 + g1u * wu1 + g0d * wd0 + g1d * wd1
        prev_input = wu0 + wd0
    return np.arange(steps + 1) * h, y_out, u_out
