"""Roots of a real polynomial with their multiplicities and a stated accuracy.

Why not plain ``numpy.roots``: a root of multiplicity m is found by an eigenvalue solver as m
roots scattered on a small circle of radius about (ε·cond)^(1/m) — ``(s+1)^20`` gives twenty
roots between −0.73 and −1.40. Here the scattered roots are **grouped and refined**:

1. ``numpy.roots`` gives the approximate roots.
2. Roots closer than a relative distance are grouped (single linkage); a group of m roots is
   accepted as one root of multiplicity m when, at its centroid c (the mean of a scattered
   cluster is far more accurate than its members), the Taylor coefficients t_0 … t_{m−1} of
   p(c + w) = Σ t_k w^k all lie within their rounding-error bounds (evaluated with the
   coefficients' own magnitudes, so the test is scale-free). A group that fails is split with a
   smaller distance, down to single roots.
3. The centre of an accepted group is refined by Newton's method on the (m−1)-th derivative,
   where the root is simple. A simple root keeps the eigenvalue (backward stable).

Each root carries ``error``: an estimate of its absolute accuracy — for a simple root the
Newton correction plus the rounding bound of the evaluation divided by |p'|; for a repeated
root the same on the (m−1)-th derivative. Two distinct roots closer than that accuracy cannot be
told apart in double precision; they are reported as one repeated root, which is what the
coefficients support.

Roots exactly at a **point** (s = 0, z = 1, z = −1) are counted separately (see
:func:`count_at`): with a relative rule, not an absolute threshold.

Pure numpy; conventions: coefficients in descending powers, real.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

_EPS = float(np.finfo(float).eps)
# slack on the rounding-error bounds in the multiplicity test (a few units per degree is typical)
_SLACK = 64.0
# A root counts as exactly at a point (s = 0, z = ±1) when it is this much closer to the point
# than every other root of the controller (its zeros and poles): beyond any band a controller is
# judged in. An exact zero coefficient (or a residue at the rounding level) always counts.
AT_POINT_RATIO = 1e-12
_ROUNDING_ULPS = 8.0


@dataclass(frozen=True)
class Root:
    """One distinct root: ``value``, ``multiplicity`` and ``error`` (estimated absolute accuracy of
    ``value``; 0 for a root known exactly, such as an integrator read from an exact zero)."""

    value: complex
    multiplicity: int
    error: float

    def as_dict(self) -> dict:
        return {
            "re": float(self.value.real),
            "im": float(self.value.imag),
            "multiplicity": self.multiplicity,
            "accuracy": float(self.error),
        }


def _taylor(p: np.ndarray, c: complex, upto: int) -> tuple[np.ndarray, np.ndarray]:
    """Taylor coefficients t_k of p(c + w) for k = 0..upto and their rounding-error bounds.

    t_k = Σ_j a_j·C(j, k)·c^(j−k) (a_j the coefficient of x^j), all k at once as one
    matrix-vector product; the bound is (n + 2)·eps·Σ_j |a_j|·C(j, k)·|c|^(j−k)."""
    n = p.size - 1
    upto_n = min(upto, n)
    a = p[::-1].astype(float)
    binom, shift = _binomials(n, upto_n)
    powers = np.power(complex(c), shift) * binom  # [k, j] = C(j, k)·c^(j−k), 0 below the diagonal
    t = np.zeros(upto + 1, complex)
    bound = np.zeros(upto + 1)
    t[: upto_n + 1] = powers @ a
    bound[: upto_n + 1] = (n + 2) * _EPS * ((np.power(abs(c), shift) * binom) @ np.abs(a))
    return t, bound


@functools.lru_cache(maxsize=256)
def _binomials(n: int, upto: int) -> tuple[np.ndarray, np.ndarray]:
    """(C(j, k), j − k) for k = 0..upto, j = 0..n; C is 0 and the shift 0 where j < k."""
    k = np.arange(upto + 1)[:, None]
    j = np.arange(n + 1)[None, :]
    binom = np.array([[math.comb(jj, kk) if jj >= kk else 0 for jj in range(n + 1)] for kk in range(upto + 1)], float)
    shift = np.where(j >= k, j - k, 0)
    binom.setflags(write=False)
    shift.setflags(write=False)
    return binom, shift


def _is_multiple(p: np.ndarray, c: complex, m: int) -> bool:
    t, bound = _taylor(p, c, m)
    if m >= p.size:
        return False
    return bool(np.all(np.abs(t[:m]) <= _SLACK * bound[:m]) and abs(t[m]) > _SLACK * bound[m])


def _refine(p: np.ndarray, c: complex, m: int) -> tuple[complex, float]:
    """Newton on the (m−1)-th derivative from c; returns (centre, accuracy estimate)."""
    q = np.polyder(p, m - 1) if m > 1 else p
    dq = np.polyder(q)
    real = abs(c.imag) <= 1e-14 * abs(c)
    if real:
        c = complex(c.real)
    err = math.inf
    for _ in range(8):
        num = np.polyval(q, c)
        den = np.polyval(dq, c)
        if den == 0:
            break
        step = num / den
        if real:
            step = complex(step.real)
        c_new = c - step
        err = abs(step)
        c = c_new
        if err <= 4 * _EPS * max(abs(c), 1e-300):
            break
    # rounding: the evaluation error of q at c divided by |q'(c)|
    mag = float(np.polyval(np.abs(q), abs(c)))
    den = abs(np.polyval(dq, c))
    rounding = (q.size + 1) * _EPS * mag / den if den > 0 else math.inf
    return c, float(max(err, rounding, _EPS * abs(c)))


def _groups(roots: np.ndarray, rel: float) -> list[list[int]]:
    """Single-linkage groups of roots within ``rel`` relative distance of each other."""
    distance, scale = _separation(roots)
    return _linked(distance <= rel * scale)


def _separation(roots: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Pairwise distances of ``roots`` and the scale each is relative to (the larger magnitude)."""
    mag = np.abs(roots)
    return np.abs(roots[:, None] - roots[None, :]), np.maximum(np.maximum(mag[:, None], mag[None, :]), 1e-300)


def _linked(close: np.ndarray) -> list[list[int]]:
    """The connected parts (index lists, ascending) of the graph whose edges are ``close``."""
    n = close.shape[0]
    parent = list(range(n))

    def find(a):
        while parent[a] != a:
            parent[a] = parent[parent[a]]
            a = parent[a]
        return a

    for i, j in zip(*np.nonzero(np.triu(close, 1))):
        parent[find(int(i))] = find(int(j))
    out: dict[int, list[int]] = {}
    for i in range(n):
        out.setdefault(find(i), []).append(i)
    return list(out.values())


def _simple_roots(p: np.ndarray, cs: np.ndarray) -> list[Root]:
    """Simple roots keep their eigenvalues (backward stable; a Newton step in double precision
    only wanders inside the rounding noise); the accuracy of each is the Newton correction or the
    rounding bound of the evaluation over |p'|, whichever is larger (all roots at once)."""
    if cs.size == 0:
        return []
    dp = np.polyval(np.polyder(p), cs)
    mag = np.polyval(np.abs(p), np.abs(cs))
    with np.errstate(divide="ignore", invalid="ignore"):
        err = np.maximum(np.abs(np.polyval(p, cs) / dp), (p.size + 1) * _EPS * mag / np.abs(dp))
    err = np.where(dp != 0, err, np.inf)
    return [Root(complex(c), 1, float(max(e, _EPS * abs(c)))) for c, e in zip(cs, err)]


def _cluster(p: np.ndarray, roots: np.ndarray, idx: list[int], rel: float, out: list[Root], simple: list[int]) -> None:
    """Split the group ``idx`` of approximate roots until each part is one multiple root (into
    ``out``) or a single root (its index into ``simple``, evaluated by :func:`_simple_roots`)."""
    if len(idx) == 1:
        simple.append(idx[0])
        return
    c0 = complex(np.mean(roots[idx]))
    m = len(idx)
    if _is_multiple(p, c0, m):
        c, err = _refine(p, c0, m)
        if np.isfinite(c) and _is_multiple(p, c, m):
            out.append(Root(c, m, err))
            return
    # the same group fails the same test at every distance that keeps it whole: split it at the
    # first distance (a quarter at a time) that breaks it up
    distance, scale = _separation(roots[idx])
    while True:
        rel = rel / 4
        parts = _linked(distance <= rel * scale)
        if len(parts) > 1 or rel == 0:
            break
    for sub in parts:
        _cluster(p, roots, [idx[k] for k in sub], rel, out, simple)


def find_roots(p_desc) -> tuple[Root, ...]:
    """Distinct roots of the real polynomial ``p_desc`` (descending powers) with multiplicity and
    accuracy; complex roots come in conjugate pairs. Sorted by magnitude, then angle."""
    p = _trim_front(np.asarray(p_desc, dtype=float))
    if p.size <= 1:
        return ()
    # exact roots at 0 (trailing zero coefficients) are not the eigen solver's business
    zeros_at_origin = p.size - _trim_back(p).size
    p = _trim_back(p)
    out: list[Root] = [Root(0j, zeros_at_origin, 0.0)] if zeros_at_origin else []
    if p.size > 1:
        approx = np.roots(p).astype(complex)
        found: list[Root] = []
        simple: list[int] = []
        # start with every root in one group (its centroid, −p1/(n·p0), is exact): a root of high
        # multiplicity scatters over a circle as wide as the root itself
        _cluster(p, approx, list(range(approx.size)), 8.0, found, simple)
        found += _simple_roots(p, approx[sorted(simple)])
        found = _conjugate_pairs(found)
        out += found
    return tuple(sorted(out, key=lambda r: (abs(r.value), np.angle(r.value))))


def _conjugate_pairs(found: list[Root]) -> list[Root]:
    """Make the roots of a real polynomial exact conjugate pairs (average each with its partner)."""
    out: list[Root] = []
    used = [False] * len(found)
    for i, r in enumerate(found):
        if used[i]:
            continue
        used[i] = True
        if abs(r.value.imag) <= max(r.error, 4 * _EPS * abs(r.value)):
            out.append(Root(complex(r.value.real), r.multiplicity, r.error))
            continue
        cands = [j for j in range(len(found)) if not used[j] and found[j].multiplicity == r.multiplicity]
        if not cands:
            out.append(r)
            continue
        j = min(cands, key=lambda k: abs(found[k].value - r.value.conjugate()))
        used[j] = True
        mid = (r.value + found[j].value.conjugate()) / 2
        err = max(r.error, found[j].error)
        out += [Root(mid, r.multiplicity, err), Root(mid.conjugate(), r.multiplicity, err)]
    return out


def expand(roots) -> np.ndarray:
    """The roots repeated by multiplicity, as a complex array."""
    return np.array([r.value for r in roots for _ in range(r.multiplicity)], dtype=complex)


def count_at(p_desc, point: float, others=(), *, rounding: bool = False) -> int:
    """How many roots of ``p_desc`` sit exactly at ``point`` (0, 1 or −1), with multiplicity.

    A root counts when p(point) vanishes exactly, or — ``rounding=True``, for coefficients that
    went through floating-point arithmetic in z (sums of many terms) — to within a few rounding
    errors of its evaluation; or when the nearest root is at least 1/``AT_POINT_RATIO`` times
    closer to the point than every root in ``others`` and every other root of ``p_desc`` (relative
    to the controller's own scales: ``(s+1e-13)/(s+1e-14)`` has a DC gain of 10, no integrator).
    With no other root to compare with, only the exact rule applies.
    """
    p = _trim_front(np.asarray(p_desc, dtype=float))
    count = 0
    ulps = _ROUNDING_ULPS * _EPS if rounding else 0.0
    while p.size > 1 and abs(_value_at(p, point)) <= ulps * float(np.sum(np.abs(p))):
        p = deflate(p, point)
        count += 1
    other_d = np.abs(np.asarray(list(others), dtype=complex) - point)
    other_d = other_d[other_d > 0]
    nearest_other = float(other_d.min()) if other_d.size else math.inf
    while p.size > 1:
        dp = _value_at(np.polyder(p), point)
        val = _value_at(p, point)
        if dp == 0:
            break
        delta = abs(val / dp)  # Newton's distance from the point to the nearest (simple) root
        # the smallest scale below is at most the nearest other root's distance: a root that is not
        # 1e12 times closer than that is not at the point, without solving for the rest
        if delta > AT_POINT_RATIO * nearest_other:
            break
        rest = np.abs(np.roots(p).astype(complex) - point)
        rest = np.sort(rest)[1:]  # every root but the nearest
        scale = np.concatenate([rest[rest > 0], other_d])
        if scale.size == 0 or delta > AT_POINT_RATIO * float(scale.min()):
            break
        p = deflate(p, point)
        count += 1
    return count


def _trim_front(p: np.ndarray) -> np.ndarray:
    """``p`` without its leading zeros (``numpy.trim_zeros(p, "f")`` for a 1-D array)."""
    nonzero = np.flatnonzero(p)
    return p[nonzero[0] :] if nonzero.size else p[:0]


def _trim_back(p: np.ndarray) -> np.ndarray:
    """``p`` without its trailing zeros (``numpy.trim_zeros(p, "b")`` for a 1-D array)."""
    nonzero = np.flatnonzero(p)
    return p[: nonzero[-1] + 1] if nonzero.size else p[:0]


def _value_at(p: np.ndarray, x: float) -> float:
    """p(x) for a real point x by Horner's rule: ``numpy.polyval``'s arithmetic, in the same order,
    on Python floats."""
    y = 0.0
    for c in p.tolist():
        y = y * x + c
    return y


def deflate(p_desc: np.ndarray, point: float) -> np.ndarray:
    """The quotient of ``p_desc`` (descending powers, real, at least two coefficients) divided by
    (x − ``point``), the remainder dropped: synthetic division, q_0 = p_0, q_k = p_k + point·q_(k−1)
    — the same arithmetic, rounding included, as the quotient of
    ``numpy.polydiv(p_desc, [1, -point])`` (tests/test_numerics_roots.py), without its checks."""
    p = np.asarray(p_desc, dtype=float)
    q = np.empty(p.size - 1)
    acc = float(p[0])
    q[0] = acc
    for k in range(1, p.size - 1):
        acc = float(p[k]) + acc * point
        q[k] = acc
    return q


def format_root(r: complex) -> str:
    """A root for a message: ``-0.5`` when real (imaginary part within 1e-12 of its size),
    else ``-0.5+0.866j`` (six significant digits)."""
    r = complex(r)
    if abs(r.imag) <= 1e-12 * max(abs(r), 1e-300):
        return format(r.real, ".6g")
    return f"{r.real:.6g}{'+' if r.imag >= 0 else '-'}{abs(r.imag):.6g}j"


def partial_fractions(num, den) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Partial fractions of num(s)/den(s) (descending powers, real or complex) over the roots of
    ``den`` taken as distinct: num/den = Σ r_i/(s − p_i) + k(s).

    p: ``numpy.roots(den)`` ordered by |p| (as ``scipy.signal.residue`` orders them); k: the
    quotient of num ÷ den (descending powers; empty when num has the lower degree);
    r_i = ρ(p_i) / (den[0]·Π_(j≠i) (p_i − p_j)), ρ the remainder of the division: for distinct
    roots the same expansion as ``scipy.signal.residue`` (tests/test_polyroots.py), the
    product of root differences in place of its expanded polynomial. r and p are complex arrays.
    Roots that are repeated, or close on the scale of their own accuracy, give large and
    inaccurate residues: the caller judges distinctness (see :func:`closest_roots`).
    Raises ValueError for a zero denominator."""
    num = np.trim_zeros(np.atleast_1d(np.asarray(num)), "f")
    den = np.trim_zeros(np.atleast_1d(np.asarray(den)), "f")
    if den.size == 0:
        raise ValueError("the denominator is zero")
    p = np.roots(den).astype(complex)
    p = p[np.argsort(np.abs(p), kind="stable")]
    if num.size == 0:
        return np.zeros(p.size, complex), p, np.empty(0)
    if num.size >= den.size:
        k, rem = np.polydiv(num, den)
    else:
        k, rem = np.empty(0), num
    diff = p[:, None] - p[None, :]
    np.fill_diagonal(diff, 1.0)
    r = np.polyval(rem, p) / (den[0] * np.prod(diff, axis=1))
    return r, p, k


def closest_roots(p) -> float:
    """The smallest distance between two of the roots ``p`` (inf for fewer than two)."""
    p = np.asarray(p, complex)
    if p.size < 2:
        return float("inf")
    d = np.abs(p[:, None] - p[None, :])
    np.fill_diagonal(d, np.inf)
    return float(d.min())
