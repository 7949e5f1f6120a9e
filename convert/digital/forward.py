"""Analog -> digital: one function per method, each returning the digital zeros/poles/gain.

All functions take the analog controller's :class:`RootForm` (and, for the state-space methods,
its coefficients), the sample period ``t`` in seconds, and return ``(RootForm, notes)``.
Poles are always mapped directly (e^{pT}, (1+pT/2)/(1−pT/2), ...), never found again as roots
of a rounded polynomial. scipy is imported inside the functions.
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np

from convert.controller import Controller
from convert.digital import statespace as ss
from convert.digital.roots import RootForm
from convert.errors import UnrealizableError


def _unit_circle_points(n: int = 41) -> np.ndarray:
    return np.exp(1j * np.linspace(0.05, 3.0, n))


def _gain_from_point(digital_unit: RootForm, value_at_z0, z0: complex) -> float:
    ratio = value_at_z0 / digital_unit.unit_gain_at(z0)
    return float(np.real(ratio))


@lru_cache(maxsize=64)
def realized(analog: Controller) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """:func:`convert.digital.statespace.realize` of an analog controller, kept per (immutable)
    controller so that the state-space methods (zoh, foh, impulse) of one survey build it once.
    The arrays are read-only (shared between callers)."""
    a, b, c, d = ss.realize(analog.num, analog.den)
    for m in (a, b, c):
        m.setflags(write=False)
    return a, b, c, d


def _state_space_result(poles_z, a, b, c, d, t) -> RootForm:
    """Zeros and gain of a sampled state-space system whose poles are already known."""
    n = a.shape[0]
    count = n if d != 0.0 else n - 1
    zeros = ss.transmission_zeros(a, b, c, d, count)
    zeros = np.where(np.abs(zeros) < 1e-12, 0.0, zeros)  # a zero at z = 0 is exact in theory
    shape = RootForm(tuple(zeros), tuple(poles_z), 1.0, t)
    z0 = ss.quiet_point(np.concatenate([zeros, poles_z]), _unit_circle_points())
    value = ss.evaluate(a, b, c, d, [z0])[0]
    return RootForm(shape.zeros, shape.poles, _gain_from_point(shape, value, z0), t)


def zoh(analog: Controller, src: RootForm, t: float) -> tuple[RootForm, list[str]]:
    """Zero-order hold equivalent (step invariant): Φ = e^{AT}, Γ = ∫₀ᵀ e^{Aσ}dσ·B."""
    a, b, c, d = realized(analog)
    n = a.shape[0]
    if n == 0:
        return RootForm((), (), d, t), []
    phi, gam = ss.zoh_matrices(a, b, t)
    poles = np.exp(np.asarray(src.poles) * t)
    return _state_space_result(poles, phi, gam, c, d, t), []


def foh(analog: Controller, src: RootForm, t: float) -> tuple[RootForm, list[str]]:
    """First-order (triangle) hold equivalent, the non-causal ramp interpolation between samples
    (the construction scipy.signal.cont2discrete calls 'foh')."""
    a, b, c, d = realized(analog)
    n = a.shape[0]
    if n == 0:
        return RootForm((), (), d, t), []
    phi, g1, g2 = ss.foh_matrices(a, b, t)
    bd = g1 - g2 + phi @ g2
    dd = float(d + (c @ g2)[0, 0])
    poles = np.exp(np.asarray(src.poles) * t)
    return _state_space_result(poles, phi, bd, c, dd, t), []


def impulse(analog: Controller, src: RootForm, t: float) -> tuple[RootForm, list[str]]:
    """Impulse invariant: C_d(z) = T·Σ_{k≥0} h(kT)·z^-k + D, where h is the impulse response of
    the strictly proper part (h(0) included in full, as scipy does) and D, the direct term, passes
    unchanged."""
    a, b, c, d = realized(analog)
    n = a.shape[0]
    if n == 0:
        return RootForm((), (), d, t), []
    phi = ss.expm(a * t)
    bd = phi @ b * t
    dd = float((c @ b)[0, 0] * t + d)
    poles = np.exp(np.asarray(src.poles) * t)
    notes = []
    if d != 0.0:
        notes.append(
            f"impulse: the direct term {d:.6g} passes unchanged (T-scaling applies to the strictly proper part only)"
        )
    return _state_space_result(poles, phi, bd, c, dd, t), notes


def tustin(analog: Controller, src: RootForm, t: float, prewarp_hz: float | None = None) -> tuple[RootForm, list[str]]:
    """Bilinear map s = (2/T')·(z−1)/(z+1); T' = T, or with prewarp at f_p:
    T' = 2·tan(π f_p T)/(2π f_p), which makes the responses equal at f_p. Zeros at infinity go to
    z = −1."""
    tw = t
    notes = []
    if prewarp_hz is not None:
        wp = 2 * math.pi * prewarp_hz
        tw = 2 * math.tan(wp * t / 2) / wp
        notes.append(f"tustin: prewarped at {prewarp_hz:.6g} Hz (T' = {tw:.6g} s instead of T = {t:.6g} s)")
    c2 = 2.0 / tw
    for p in src.poles:
        if abs(c2 - p) <= 1e-12 * c2:
            raise UnrealizableError(
                f"the pole at s = {p:.6g} maps to z = infinity under Tustin at this rate; change fs", key="method"
            )
    gain = src.gain * np.prod([c2 - z for z in src.zeros]) / np.prod([c2 - p for p in src.poles])
    res = RootForm(
        tuple([(c2 + z) / (c2 - z) for z in src.zeros] + [-1.0] * src.relative_degree),
        tuple((c2 + p) / (c2 - p) for p in src.poles),
        float(np.real(gain)),
        t,
    )
    return res, notes


def forward_euler(analog: Controller, src: RootForm, t: float) -> tuple[RootForm, list[str]]:
    """s = (z−1)/T: roots map by z = 1 + sT; zeros at infinity stay there (gain k·T^r)."""
    return RootForm(
        tuple(1 + z * t for z in src.zeros), tuple(1 + p * t for p in src.poles), src.gain * t**src.relative_degree, t
    ), []


def backward_euler(analog: Controller, src: RootForm, t: float) -> tuple[RootForm, list[str]]:
    """s = (z−1)/(zT): roots map by z = 1/(1 − sT); zeros at infinity go to z = 0."""
    gain = (
        src.gain
        * t**src.relative_degree
        * np.prod([1 - z * t for z in src.zeros])
        / np.prod([1 - p * t for p in src.poles])
    )
    for p in src.poles:
        if abs(1 - p * t) <= 1e-15:
            raise UnrealizableError(
                f"the pole at s = {p:.6g} maps to z = infinity under backward Euler; change fs", key="method"
            )
    return RootForm(
        tuple([1 / (1 - z * t) for z in src.zeros] + [0.0] * src.relative_degree),
        tuple(1 / (1 - p * t) for p in src.poles),
        float(np.real(gain)),
        t,
    ), []


def default_match_frequency_hz(src: RootForm, fs_hz: float) -> tuple[float, str]:
    """Where the matched method matches gain when DC cannot be used: a decade below the lowest
    non-zero corner, but never above fs/100; fs/100 when there is no such corner."""
    corners = [abs(r) / (2 * math.pi) for r in list(src.zeros) + list(src.poles) if abs(r) > 1e-12]
    cap = fs_hz / 100
    if corners and min(corners) / 10 < cap:
        low = min(corners)
        return low / 10, f"a decade below the lowest corner, {low:.6g} Hz"
    if corners:
        return cap, "fs/100 (a decade below the lowest corner would be higher)"
    return cap, "fs/100 (the controller has no corner other than s = 0)"


def matched(
    analog: Controller, src: RootForm, t: float, match_at_hz: float | None = None, keep_delay: bool = False
) -> tuple[RootForm, list[str]]:
    """Matched pole-zero: poles and finite zeros by z = e^{sT}; the r zeros at infinity go to
    z = −1, except one kept as a one-sample delay when ``keep_delay``; gain matched at DC, or at
    ``match_at_hz`` (|C_d(e^{jωT})| = |C(jω)|, sign from the phase) when asked or when the
    controller has a pole or zero at s = 0."""
    notes = []
    r = src.relative_degree
    n_minus_one = max(r - 1, 0) if keep_delay else r
    if keep_delay and r == 0:
        notes.append("matched: keep_delay had nothing to keep (the controller has as many zeros as poles)")
    shape = RootForm(
        tuple([np.exp(z * t) for z in src.zeros] + [-1.0] * n_minus_one),
        tuple(np.exp(p * t) for p in src.poles),
        1.0,
        t,
    )
    at_origin = any(
        abs(x) <= 1e-12 * max(1.0, max(abs(y) for y in list(src.zeros) + list(src.poles)))
        for x in list(src.zeros) + list(src.poles)
    )
    fs = 1.0 / t
    if match_at_hz is None and not at_origin:
        gain = src.at(0.0) / shape.unit_gain_at(1.0)
        return RootForm(shape.zeros, shape.poles, float(np.real(gain)), t), notes
    if match_at_hz is None:
        match_at_hz, why = default_match_frequency_hz(src, fs)
        notes.append(
            f"matched: the controller has a pole or zero at s = 0, so gain is matched at "
            f"{match_at_hz:.6g} Hz ({why}); choose it with --match-at (API: match_at_hz)"
        )
    else:
        notes.append(f"matched: gain matched at {match_at_hz:.6g} Hz as asked")
    w = 2 * math.pi * match_at_hz
    ratio = src.at(1j * w) / shape.unit_gain_at(np.exp(1j * w * t))
    gain = abs(ratio) * (1.0 if np.real(ratio) >= 0 else -1.0)
    return RootForm(shape.zeros, shape.poles, float(gain), t), notes
