"""Small state-space helpers for the conversions: realization, zeros, evaluation.

Matrices are plain numpy arrays; a SISO system is ``(A, B, C, D)`` with ``B`` of shape
(n, 1), ``C`` of shape (1, n) and ``D`` a float. The linear algebra is numpy's
(:mod:`convert.digital.smallmatrix`: matrix exponential, balancing); nothing here imports scipy.

BLAS threads: the matrices here are a few rows wide, where starting and synchronizing the BLAS
thread pool costs more than the arithmetic (issue 15 measured ``scipy.linalg.expm`` of a 3×3
matrix at 11.7 ms with the default threads and 0.014 ms with one). numpy's own BLAS, which is
all the work here uses now, still gains from the limit around the loop checks and simulations:
the pi_card_to_firmware report took 1.9 s of CPU with it and 2.4 s without (5 runs each, one
machine). :data:`small_dense` limits BLAS to one thread for the duration of a call
(threadpoolctl, scoped: the previous limits come back on exit; nested uses cost nothing), so
large work elsewhere — a netlist's nodal solve — keeps every core.
"""

from __future__ import annotations

import contextlib
import sys
import threading

import numpy as np
from convert.controller import Controller
from convert.digital import smallmatrix
from convert.digital.roots import RootForm


class _SmallDense(contextlib.ContextDecorator):
    """Context manager and decorator: one BLAS thread inside, the previous limits restored on
    exit. The limit is process-wide while it lasts (BLAS has no per-thread setting)."""

    def __init__(self):
        self._local = threading.local()
        self._controller = None
        self._saw_scipy = False
        self._lock = threading.Lock()

    def _limiter(self):
        # the BLAS libraries are found once; again if scipy's own BLAS was loaded since
        scipy_now = "scipy.linalg" in sys.modules
        if self._controller is None or (scipy_now and not self._saw_scipy):
            from threadpoolctl import ThreadpoolController

            with self._lock:
                if self._controller is None or (scipy_now and not self._saw_scipy):
                    self._controller = ThreadpoolController()
                    self._saw_scipy = scipy_now
        return self._controller.limit(limits=1, user_api="blas")

    def __enter__(self):
        depth = getattr(self._local, "depth", 0)
        self._local.depth = depth + 1
        if depth == 0:
            self._local.limit = self._limiter()
        return self

    def __exit__(self, *exc):
        self._local.depth -= 1
        if self._local.depth == 0:
            self._local.limit.restore_original_limits()
            self._local.limit = None
        return False


small_dense = _SmallDense()


def expm(m: np.ndarray) -> np.ndarray:
    """e^M of a small matrix: :func:`convert.digital.smallmatrix.expm` (numpy only)."""
    return smallmatrix.expm(m)


@small_dense
def zoh_matrices(a: np.ndarray, b: np.ndarray, t: float) -> tuple[np.ndarray, np.ndarray]:
    """Exact sampling of ``x' = A x + B w`` for ``w`` held constant over ``t`` (s): Φ = e^{At} and
    Γ = ∫₀ᵗ e^{Aσ}dσ·B, read from one block-matrix exponential (Van Loan's construction)
    exp([[A t, B t], [0, 0]]) = [[Φ, Γ], [0, I]]. ``b`` of shape (n, m); Γ has the same shape."""
    n = a.shape[0]
    m = np.zeros((n + b.shape[1], n + b.shape[1]))
    m[:n, :n] = a * t
    m[:n, n:] = b * t
    e = expm(m)
    return e[:n, :n], e[:n, n:]


@small_dense
def foh_matrices(a: np.ndarray, b: np.ndarray, t: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Exact sampling for a single input ``w`` linear over each step of ``t`` (s):
    exp([[A t, B t, 0], [0, 0, 1], [0, 0, 0]]) = [[Φ, Γ1, Γ2], [0, 1, 1], [0, 0, 1]] with
    Γ1 = ∫₀ᵗ e^{Aσ}dσ·B and Γ2 = ∫₀ᵗ e^{Aσ}(t − σ)/t dσ·B, so that
    x(t) = Φ x(0) + (Γ1 − Γ2) w(0) + Γ2 w(t). ``b`` of shape (n, 1); Γ1, Γ2 of shape (n, 1)."""
    n = a.shape[0]
    m = np.zeros((n + 2, n + 2))
    m[:n, :n] = a * t
    m[:n, n : n + 1] = b * t
    m[n, n + 1] = 1.0
    e = expm(m)
    return e[:n, :n], e[:n, n : n + 1], e[:n, n + 1 :]


@small_dense
def realize(num, den) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """A balanced cascade realization of a proper num/den (descending powers), built from its roots.

    ``D`` is the direct term num[0]/den[0] when the degrees are equal, else exactly 0.
    The roots (roots at s = 0 divided out exactly first) become a chain of first- and second-order
    sections (:func:`cascade`); balancing (a diagonal similarity) then evens the entries' scales.
    Why not the companion form of num/den: its sampled matrices e^{AT}, ∫e^{Aσ}dσ·B keep the
    frequency response to rounding, but the zeros of the sampled system are then fixed by tiny
    differences of O(1) entries; with a double pole at fs/100 the system-pencil zeros came out
    wrong by 5e-4 relative and the sampled gain by 6e-5 (against a 50-digit reference), which the
    cascade form brings down to rounding level.
    """
    den = np.trim_zeros(np.asarray(den, dtype=float), "f")
    num = np.trim_zeros(np.asarray(num, dtype=float), "f")
    if den.size == 0:
        raise ValueError("realize: the denominator is zero")
    if num.size > den.size:
        raise ValueError("realize: improper num/den")
    if num.size == 0:
        n = den.size - 1
        return np.zeros((n, n)), np.zeros((n, 1)), np.zeros((1, n)), 0.0
    rf = RootForm.of(Controller.analog(num, den))
    a, b, c, d = cascade(rf.zeros, rf.poles, float(num[0] / den[0]))
    if a.shape[0] == 0:
        return a, b, c, d
    ab, t = smallmatrix.balance(a)
    return ab, np.linalg.solve(t, b), c @ t, d


@small_dense
def evaluate(a, b, c, d, points) -> np.ndarray:
    """C (xI − A)^-1 B + D at each complex point x (s or z)."""
    pts = np.atleast_1d(np.asarray(points, dtype=complex))
    n = a.shape[0]
    out = np.empty(pts.shape, dtype=complex)
    for i, x in enumerate(pts):
        if n == 0:
            out[i] = d
        else:
            out[i] = (c @ np.linalg.solve(x * np.eye(n) - a, b))[0, 0] + d
    return out


def transmission_zeros(a, b, c, d, count: int, bound: float | None = None) -> np.ndarray:
    """The ``count`` finite zeros of a SISO system G(x) = C (xI − A)⁻¹ B + D (x is s or z).

    The caller states how many finite zeros the system has (states minus relative degree); the
    most finite ones are kept. With ``bound``, of those only the ones with magnitude below
    ``bound`` are kept (for when the relative degree is not known beforehand).

    Method (numpy only, an ordinary eigenproblem instead of the generalized one of the system
    pencil): a bilinear change of variable x = σ + 1/w about a real point σ that is no pole and
    no zero (:func:`_by_quiet`) gives G as a system in w with state matrix −M, input
    M B, output −C M and direct term G(σ) = D + C M B ≠ 0, where M = (σI − A)⁻¹. A system with a
    nonzero direct term has its zeros at the eigenvalues of A − B C / D, here
    w = eig(−M + M B C M / G(σ)); a finite zero is x = σ + 1/w, a zero at infinity is w = 0, so
    the ``count`` eigenvalues of largest magnitude are the finite zeros. σ is real, so the
    arithmetic stays real and complex zeros come in exact conjugate pairs; it is taken far from
    the poles, and again far from the zeros found if the first σ lies nearer a zero than a pole.
    Accuracy: on zero- and first-order-hold samplings the zeros agree with a 50-digit reference
    to 1e-12 relative (where the pencil's generalized eigenvalues, ``scipy.linalg.eig``, the
    former method, were off by up to 7e-8 on sampling zeros far outside the unit circle)
    (tests/test_smallmatrix.py)."""
    n = a.shape[0]
    if count <= 0 or n == 0:
        return np.zeros(0, complex)
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float).reshape(n, 1)
    c = np.asarray(c, dtype=float).reshape(1, n)
    if not (np.all(np.isfinite(a)) and np.all(np.isfinite(b)) and np.all(np.isfinite(c)) and np.isfinite(d)):
        return np.full(count, np.nan, complex)  # the caller refuses a form that is not finite
    poles = np.linalg.eigvals(a)
    rho = float(np.abs(poles).max())
    if not rho > 0:
        rho = float(np.abs(a).sum(axis=0).max()) or 1.0
    candidates = rho * np.linspace(-2.0, 2.0, 81)
    zeros, sigma = _zeros_about(a, b, c, d, count, _by_quiet(candidates, poles, (), rho))
    if zeros is None:  # G vanishes at every candidate: G ≡ 0, which has no zeros to count
        return np.zeros(0, complex)
    if zeros.size and float(np.abs(zeros - sigma).min()) < float(np.abs(poles - sigma).min()):
        # σ lies nearer a zero than a pole: again from a point far from both
        again, sigma2 = _zeros_about(a, b, c, d, count, _by_quiet(candidates, poles, zeros, rho))
        if again is not None and sigma2 != sigma:
            zeros = again
    if bound is not None:
        zeros = zeros[np.isfinite(zeros) & (np.abs(zeros) < bound)]
    return _conjugate_clean(zeros)


def _by_quiet(candidates: np.ndarray, poles, zeros, rho: float) -> np.ndarray:
    """The candidates, farthest from every pole and zero given first."""
    roots = np.concatenate([np.asarray(poles, complex), np.asarray(zeros, complex)])
    dist = np.min(np.abs(candidates[:, None] - roots[None, :]), axis=1) / rho
    return candidates[np.argsort(-dist, kind="stable")]


def _zeros_about(a, b, c, d, count: int, sigmas) -> tuple[np.ndarray | None, float]:
    """The finite zeros by the change of variable x = σ + 1/w (see :func:`transmission_zeros`)
    about the first σ of ``sigmas`` that is neither a pole nor a zero (the matrix σI − A
    invertible, and G(σ) not lost in the rounding of D + C M B), and that σ; (None, nan) when
    there is none."""
    n = a.shape[0]
    for sigma in sigmas:
        sigma = float(sigma)
        try:
            m = np.linalg.inv(sigma * np.eye(n) - a)
        except np.linalg.LinAlgError:
            continue
        mb = m @ b
        cm = c @ m
        terms = c[0] * mb[:, 0]
        g_sigma = float(d + terms.sum())
        if not np.isfinite(g_sigma) or abs(g_sigma) <= 1e-12 * (abs(d) + float(np.abs(terms).sum())):
            continue
        w = np.linalg.eigvals(-m + (mb @ cm) / g_sigma)
        order = np.argsort(-np.abs(w), kind="stable")[:count]
        with np.errstate(divide="ignore", invalid="ignore"):
            return sigma + 1.0 / w[order], sigma
    return None, float("nan")


def _conjugate_clean(roots: np.ndarray) -> np.ndarray:
    """Snap nearly real roots to the real axis (relative imaginary part below 1e-9)."""
    roots = np.asarray(roots, dtype=complex)
    small = np.abs(roots.imag) <= 1e-9 * np.maximum(np.abs(roots), 1e-300)
    roots = roots.copy()
    roots[small] = roots[small].real
    return roots


def quiet_point(roots: np.ndarray, candidates: np.ndarray) -> complex:
    """The candidate point farthest (relatively) from every root: where a gain is best read."""
    roots = np.asarray(roots, dtype=complex)
    cands = np.asarray(candidates, dtype=complex)
    if roots.size == 0:
        return complex(cands[len(cands) // 2])
    dist = np.min(np.abs(cands[:, None] - roots[None, :]) / np.maximum(np.abs(cands[:, None]), 1e-300), axis=1)
    return complex(cands[int(np.argmax(dist))])


def cascade(zeros, poles, gain) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """A state-space realization as a chain of first-order (real pole) and second-order (complex
    pair) sections built from the roots, so repeated or clustered poles stay explicit (a Jordan
    chain instead of a companion matrix) and the sampled system keeps its zeros to rounding.

    Needs as many poles as zeros or more (a proper system)."""
    sections: list[list] = [[np.array([1.0]), q] for q in _real_factors(poles)]  # [num, den], descending
    factors = _real_factors(zeros)
    pairs = [q for q in factors if len(q) == 3]
    singles = [q for q in factors if len(q) == 2]

    def spare(sec):
        return (len(sec[1]) - 1) - (len(sec[0]) - 1)

    for q in pairs:
        target = next((s for s in sections if spare(s) >= 2), None)
        if target is None:  # merge two first-order sections into one second-order section
            firsts = [s for s in sections if len(s[1]) == 2 and len(s[0]) == 1]
            a, b = firsts[0], firsts[1]
            sections = [s for s in sections if s is not b]
            a[1] = np.polymul(a[1], b[1])
            target = a
        target[0] = np.polymul(target[0], q)
    for q in singles:
        target = max(sections, key=spare)
        target[0] = np.polymul(target[0], q)
    if not sections:
        return np.zeros((0, 0)), np.zeros((0, 1)), np.zeros((1, 0)), float(gain)
    sections[0][0] = sections[0][0] * gain
    a, b, c, d = _section(*sections[0])
    for num, den in sections[1:]:
        a2, b2, c2, d2 = _section(num, den)
        n1, n2 = a.shape[0], a2.shape[0]
        a = np.block([[a, np.zeros((n1, n2))], [b2 @ c, a2]])
        b = np.vstack([b, b2 * d])
        c = np.hstack([d2 * c, c2])
        d = d2 * d
    return a, b, c, d


def _real_factors(roots) -> list[np.ndarray]:
    """Monic real factors (descending) of Π(x − r): [1, −r] for a real root, [1, −2 Re r, |r|²]
    for a complex root and its nearest conjugate partner."""
    roots = list(np.asarray(roots, complex))
    used = [False] * len(roots)
    out = []
    for i, r in enumerate(roots):
        if used[i]:
            continue
        used[i] = True
        if abs(r.imag) > 1e-12 * max(abs(r), 1e-300):
            j = min((k for k in range(len(roots)) if not used[k]), key=lambda k: abs(roots[k] - np.conj(r)))
            used[j] = True
            out.append(np.array([1.0, -2 * r.real, abs(r) ** 2]))
        else:
            out.append(np.array([1.0, -r.real]))
    return out


def _section(num, den):
    den = np.asarray(den, float)
    n = den.size - 1
    num = np.concatenate([np.zeros(n + 1 - len(num)), np.asarray(num, float)])
    d = float(num[0])
    rest = num[1:] - d * den[1:]
    a = np.zeros((n, n))
    a[0, :] = -den[1:]
    a[1:, :-1] = np.eye(n - 1)
    b = np.zeros((n, 1))
    b[0, 0] = 1.0
    return a, b, rest.reshape(1, n), d
