"""Closed-loop stability of a controller with its plant, dead time exact, and the loop's sign.

Conventions as in :mod:`convert.compare.loop`: ``u = C·(r − y)``, ``y = P(s)·e^{−sθ}·u``.

How stability is decided
------------------------
* **Analog controller** — a root count of the characteristic quasi-polynomial
  ``F(s) = D(s) + N(s)·e^{−sθ}`` with ``D = den(C)·den(P)`` and ``N = num(C)·num(P)`` (all monic
  up to the gain, evaluated from their roots). Its zeros are the closed-loop poles, hidden modes
  (a controller zero cancelling an unstable plant pole) included. By the argument principle on
  the right half-plane, the number Z of closed-loop poles with Re s > 0 follows from the change
  Δ of arg F(jω) for ω from 0 to ∞: ``Z = (n − 2Δ/π)/2`` with n = deg D. Δ is followed on a grid
  that is linear at 0.05/θ spacing where the dead time turns the phase and logarithmic
  elsewhere, refined wherever the phase moves more than 0.4 rad between points; above the
  frequency where |L| < 1 for good the rest of Δ is exact (the phase of D from its roots, and
  arg(1 + L) stays within ±90°). No Padé approximation enters. A zero of F on the imaginary
  axis (|F| vanishing on the grid) is reported as marginal, i.e. not stable.
* **Digital controller** — the sampled-data loop at the controller's period T: the plant
  discretized exactly (zero-order hold, dead time plus computation delay as whole periods and a
  fractional part by the modified z-transform), the controller as it runs, and the eigenvalues
  of the closed loop's state matrix; stable when all lie inside the unit circle.

The loop's sign: ``K_L``, the loop gain at low frequency with the integrators taken out
(``L(s) ≈ K_L·s^{−m}`` as s → 0). A negative K_L is positive feedback at low frequency: a
direct-acting controller on a positive-gain plant (or the reverse). It is legitimate only for a
plant that is unstable on its own, so it is reported when the loop is unstable.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from convert.controller import Controller
from convert.compare.loop import one_blas_thread, sampled_loop_matrix

#: A root within this distance (relative) of s = 0 or z = 1 is taken as being there.
_AT_ORIGIN_RTOL = 1e-8
#: |F| below this fraction of |D| + |N| on the imaginary axis: a closed-loop pole on the axis.
_MARGINAL_RTOL = 1e-9


@dataclass(frozen=True)
class LoopStability:
    """Whether one loop (controller, plant, dead time) is stable in closed loop.

    ``unstable_poles``: closed-loop poles in the right half-plane (analog) or outside the unit
    circle (digital). ``marginal``: a closed-loop pole on the boundary. ``low_frequency_sign``:
    +1 or −1, the sign of the low-frequency loop gain K_L (0 if it could not be read).
    ``reversed_is_stable``: the same loop with the controller's sign reversed is stable.
    ``method``: how it was decided. ``message``: plain words for the report ("" when stable)."""

    stable: bool
    unstable_poles: int
    marginal: bool
    low_frequency_sign: int
    reversed_is_stable: bool | None
    method: str
    message: str = ""

    plant_unstable: bool = False

    @property
    def sign_inverted(self) -> bool:
        """Positive feedback at low frequency where the plant does not need it: the action or the
        plant's gain sign is wrong. A plant unstable on its own may need a negative low-frequency
        loop gain; then only an unstable loop that reversing the controller's sign makes stable."""
        if self.low_frequency_sign >= 0:
            return False
        if self.plant_unstable:
            return (not self.stable) and bool(self.reversed_is_stable)
        return True

    @property
    def acceptable(self) -> bool:
        """Stable and not sign-inverted: the loop works as a feedback loop."""
        return self.stable and not self.sign_inverted

    def as_dict(self) -> dict:
        return {**self.__dict__, "sign_inverted": self.sign_inverted}


def low_frequency_gain(c: Controller) -> tuple[float, int]:
    """``(K, m)`` with C ≈ K·s^{−m} as s → 0 (analog) or C ≈ K·((z − 1)/T)^{−m} as z → 1
    (digital; the same sign as the analog reading). ``m`` counts poles minus zeros at the origin."""
    x0 = 1.0 if c.is_digital else 0.0
    zeros, poles = c.zeros(), c.poles()
    scale = max(1.0, *(np.abs(np.concatenate([zeros, poles])).tolist() or [1.0]))

    def split(roots):
        at = np.abs(roots - x0) <= _AT_ORIGIN_RTOL * scale
        return roots[~at], int(np.count_nonzero(at))

    z_rest, mz = split(zeros)
    p_rest, mp = split(poles)
    k = c.gain * np.prod(x0 - z_rest) / np.prod(x0 - p_rest)
    if c.is_digital:
        k = k * c.sample_period_s ** (mz - mp)
    return float(np.real(k)), mp - mz


def loop_sign(controller: Controller, plant: Controller) -> int:
    """Sign of the low-frequency loop gain K_L of C·P (+1, −1; 0 if zero or unreadable)."""
    kc, _ = low_frequency_gain(controller)
    kp, _ = low_frequency_gain(plant)
    k = kc * kp
    return 0 if not math.isfinite(k) or k == 0 else (1 if k > 0 else -1)


def loop_stability(
    controller: Controller, plant: Controller, dead_time_s: float = 0.0, *, delay_s: float = 0.0, what: str = "the loop"
) -> LoopStability:
    """Closed-loop stability of ``controller`` with ``plant`` (analog) and ``dead_time_s``.

    A digital controller runs through a zero-order hold with ``delay_s`` computation delay; for
    an analog one ``delay_s`` adds to the dead time. ``what`` names the loop in the message
    ("the source loop")."""
    count, marginal, method = _count(controller, plant, dead_time_s, delay_s)
    stable = count == 0 and not marginal
    sign = loop_sign(controller, plant)
    reversed_ok = None
    if not stable:
        r_count, r_marg, _ = _count(controller.scaled(-1.0), plant, dead_time_s, delay_s)
        reversed_ok = r_count == 0 and not r_marg
    plant_unstable = bool(np.any(plant.poles().real > 0))
    result = LoopStability(stable, count, marginal, sign, reversed_ok, method, plant_unstable=plant_unstable)
    return LoopStability(**{**result.__dict__, "message": stability_message(result, what)})


def stability_message(s: LoopStability, what: str = "the loop") -> str:
    """Plain words for an unstable or sign-inverted loop ("" for one that works)."""
    if s.stable and not s.sign_inverted:
        return ""
    if s.stable:
        return (
            f"{what} has a negative low-frequency loop gain with this plant (positive feedback: the "
            "controller pushes the measurement away from the setpoint, held only because the loop gain is "
            "below 1): check the action (direct or reverse) or the plant gain sign."
        )
    if s.marginal and s.unstable_poles == 0:
        head = f"{what} is not stable with this plant: a closed-loop pole lies on the stability boundary"
    else:
        where = "outside the unit circle" if "eigenvalues" in s.method else "in the right half-plane"
        head = (
            f"{what} is unstable with this plant ({s.unstable_poles} closed-loop "
            f"pole{'s' if s.unstable_poles != 1 else ''} {where})"
        )
    if s.sign_inverted:
        tail = (
            "its low-frequency loop gain is negative (positive feedback): check the action (direct or "
            "reverse) or the plant gain sign"
        )
        if s.reversed_is_stable:
            tail += "; with the controller's sign reversed the loop is stable"
    elif s.reversed_is_stable:
        tail = "check the action or the plant gain sign: with the controller's sign reversed the loop is stable"
    else:
        tail = "check the action or the plant gain sign, the controller gains, the plant model and the dead time"
    return f"{head}: {tail}. Its margins are not robustness figures."


# ----------------------------------------------------------------------------- the root counts
def _count(controller: Controller, plant: Controller, dead_time_s: float, delay_s: float) -> tuple[int, bool, str]:
    if controller.is_digital:
        with one_blas_thread():
            return _count_sampled(controller, plant, dead_time_s, delay_s)
    return _count_analog(controller, plant, dead_time_s + delay_s)


def _count_sampled(
    controller: Controller, plant: Controller, dead_time_s: float, delay_s: float
) -> tuple[int, bool, str]:
    a = sampled_loop_matrix(controller, plant, dead_time_s + delay_s)
    method = "eigenvalues of the sampled-data closed loop (plant discretized exactly with its delays)"
    if a.shape[0] > _DENSE_EIG_MAX:
        counted = count_outside_unit_circle(a)
        if counted is not None:
            return counted[0], counted[1], method + ", counted on the unit circle past the delay line"
    lam = np.abs(np.linalg.eigvals(a)) if a.size else np.zeros(0)
    tol = 1e-9
    return int(np.count_nonzero(lam > 1 + tol)), bool(np.any(np.abs(lam - 1) <= tol)), method


#: above this many states the sampled loop's poles are counted through its delay line
_DENSE_EIG_MAX = 80


def count_outside_unit_circle(a: np.ndarray, max_rounds: int = 60) -> tuple[int, bool] | None:
    """(eigenvalues of ``a`` outside |z| = 1, any on it) for a matrix whose states are mostly a
    delay line — rows that copy one other state (x_i ← x_j) and form no cycle (a nilpotent block S,
    the held outputs of a long dead time). With the other ("core") states c:

        det(zI − a) = z^m · F(z),  F(z) = det(zI − A_cc − Σ_d G_d z^{−d}),  G_d = A_cm S^{d−1} A_mc

    (Schur complement; (zI − S)⁻¹ = Σ_k S^k z^{−k−1}), so by the argument principle the count
    inside is m plus the winding number of F around 0 on the unit circle. F is evaluated on a grid
    of 16 points per turn of its fastest term, refined by bisection wherever its phase steps by
    more than 0.4 rad (a pole close to the circle, such as the slow pole of an integrating loop
    next to z = 1). A point where |F| falls below 1e-9 of its Hadamard bound, or an interval that
    cannot be split further, is a pole on the circle. None when the rows do not have that
    structure (a cycle among the copies): the caller falls back to the eigenvalues."""
    n = a.shape[0]
    nonzero = a != 0
    single = np.count_nonzero(nonzero, axis=1) == 1
    col = np.argmax(nonzero, axis=1)
    copy = single & (a[np.arange(n), col] == 1.0) & (col != np.arange(n))
    chain = np.nonzero(copy)[0]
    core = np.nonzero(~copy)[0]
    m, c = chain.size, core.size
    if m == 0 or c == 0:
        return None
    where_in_chain = np.full(n, -1)
    where_in_chain[chain] = np.arange(m)
    src = where_in_chain[col[chain]]  # the chain state each chain state copies, −1: a core state
    a_cc = a[np.ix_(core, core)]
    a_mc = np.where((src >= 0)[:, None], 0.0, a[np.ix_(chain, core)])  # a copy of a chain state reads no core state
    a_cm = a[np.ix_(core, chain)]
    read = np.nonzero(np.any(a_cm != 0, axis=0))[0]  # the chain states the core reads
    powers, terms = [], []
    anc = read.copy()
    for d in range(1, m + 2):  # G_d = A_cm[:, read] · (S^(d−1) A_mc)[read]; (S^k v)[i] = v[src^k(i)]
        alive = anc >= 0
        if not alive.any():
            break
        g = a_cm[:, read[alive]] @ a_mc[anc[alive]]
        if np.any(g):
            powers.append(d)
            terms.append(g)
        anc = np.where(alive, src[np.maximum(anc, 0)], -1)
    else:
        return None  # a cycle among the copies: not a delay line
    dd = np.array(powers, dtype=float)
    gd = np.array(terms).reshape(len(terms), c, c)
    eye = np.eye(c)

    def f_of(theta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        out_f = np.empty(theta.size, complex)
        out_s = np.empty(theta.size)
        for lo in range(0, theta.size, 4096):
            th = theta[lo : lo + 4096]
            mats = np.exp(1j * th)[:, None, None] * eye - a_cc
            if dd.size:
                mats = mats - np.tensordot(np.exp(-1j * np.outer(th, dd)), gd, axes=(1, 0))
            out_f[lo : lo + th.size] = np.linalg.det(mats)
            out_s[lo : lo + th.size] = np.prod(np.linalg.norm(mats, axis=2), axis=1)
        return out_f, out_s

    fastest = float(dd.max()) if dd.size else 0.0
    theta = np.linspace(0.0, 2 * np.pi, int(16 * (fastest + c)) + 65)
    fv, scale = f_of(theta)
    for _ in range(max_rounds):
        if np.any(np.abs(fv) <= _MARGINAL_RTOL * scale):
            return 0, True
        step = np.angle(fv[1:] / fv[:-1])
        bad = np.nonzero(np.abs(step) > 0.4)[0]
        if bad.size == 0:
            inside = m + int(round(float(np.sum(step)) / (2 * np.pi)))
            return n - inside, False
        if np.any(theta[bad + 1] - theta[bad] <= 1e-14):
            return 0, True
        mids = 0.5 * (theta[bad] + theta[bad + 1])
        fm, sm = f_of(mids)
        theta = np.concatenate([theta, mids])
        order = np.argsort(theta, kind="stable")
        theta = theta[order]
        fv = np.concatenate([fv, fm])[order]
        scale = np.concatenate([scale, sm])[order]
    return None


def _count_analog(controller: Controller, plant: Controller, theta: float) -> tuple[int, bool, str]:
    """Right-half-plane zeros of F(s) = D(s) + N(s)·e^{−sθ} by the argument principle."""
    method = (
        "argument principle on D(s) + N(s)·e^{-sθ} along the imaginary axis (dead time exact)"
        if theta > 0
        else "argument principle on D(s) + N(s) along the imaginary axis"
    )
    d_roots = np.concatenate([controller.poles(), plant.poles()])
    n_roots = np.concatenate([controller.zeros(), plant.zeros()])
    if n_roots.size > d_roots.size:
        raise ValueError("loop stability needs a proper loop (controller times plant)")
    k = controller.gain * plant.gain
    n = d_roots.size
    if k == 0:  # no feedback at all: the open-loop poles are the closed-loop poles
        return int(np.count_nonzero(d_roots.real > 0)), bool(np.any(d_roots.real == 0)), method
    biproper = n_roots.size == n
    if biproper and abs(k) >= 1 and theta > 0:
        # |L(∞)| ≥ 1 with a dead time: a neutral loop with infinitely many poles at or right of the axis
        return 1, abs(k) == 1, method + "; |L| ≥ 1 at high frequency with a dead time"
    if biproper and theta == 0 and k == -1:
        return 0, True, method

    def parts(w):
        s = 1j * w
        dv = np.ones_like(s)
        for r in d_roots:
            dv = dv * (s - r)
        nv = np.full_like(s, k)
        for r in n_roots:
            nv = nv * (s - r)
        return dv, nv * np.exp(-s * theta)

    def f_of(w):
        dv, nv = parts(w)
        return dv + nv, np.abs(dv) + np.abs(nv)

    mags = np.abs(np.concatenate([d_roots, n_roots]))
    mags = mags[mags > 0]
    w_lo = (mags.min() if mags.size else 1.0) * 1e-4
    if theta > 0:
        w_lo = min(w_lo, 1e-4 / theta)
    # ω_top: above every root and where |L| is small for good (|L| ≈ |k|·ω^{n_N − n} up there)
    w_top = 10.0 * (mags.max() if mags.size else 1.0)
    rel = n - n_roots.size
    if rel > 0:
        w_top = max(w_top, 10.0 * (4.0 * abs(k)) ** (1.0 / rel))
    for _ in range(60):
        dv, nv = parts(np.array([w_top]))
        l_top = abs(nv[0] / dv[0])
        if l_top < (0.5 if not biproper else 0.5 * (1 + abs(k))):
            break
        w_top *= 2.0
    w = np.concatenate([[0.0], np.logspace(math.log10(w_lo), math.log10(w_top), 4000)])
    if theta > 0:
        step = 0.05 / theta
        lin = np.arange(step, w_top, step)
        if lin.size > 2_000_000:
            lin = np.linspace(step, w_top, 2_000_000)
        w = np.union1d(w, lin)
    fv, scale = f_of(w)
    marginal = bool(np.any(np.abs(fv) <= _MARGINAL_RTOL * scale))
    # refine where the phase jumps
    for _ in range(30):
        dph = np.abs(np.angle(fv[1:] / fv[:-1]))
        bad = np.nonzero(dph > 0.4)[0]
        if bad.size == 0:
            break
        mids = 0.5 * (w[bad] + w[bad + 1])
        if np.all(w[bad + 1] - w[bad] <= 1e-13 * np.maximum(w[bad + 1], 1e-300)):
            marginal = True
            break
        w = np.concatenate([w, mids])
        order = np.argsort(w)
        w = w[order]
        fm, sm = f_of(mids)
        fv = np.concatenate([fv, fm])[order]
        scale = np.concatenate([scale, sm])[order]
        marginal = marginal or bool(np.any(np.abs(fm) <= _MARGINAL_RTOL * sm))
    if marginal:
        return 0, True, method
    phase = np.unwrap(np.angle(fv))
    delta = phase[-1] - phase[0]
    # the rest up to ω = ∞: F = D·(1 + L); arg D from its roots, arg(1 + L) within ±90° and → 0
    # (a biproper loop with a dead time keeps |L| < 1, so its arg(1 + L) stays bounded there too)
    dv, nv = parts(np.array([w[-1]]))
    l_inf = k if (biproper and theta == 0) else 0.0
    tail = float(np.sum(np.pi / 2 - np.angle(1j * w[-1] - d_roots)))
    tail += float(np.angle((1.0 + l_inf) / (1.0 + nv[0] / dv[0])))
    delta += tail
    z = (n - 2.0 * delta / np.pi) / 2.0
    return int(round(z)), False, method
