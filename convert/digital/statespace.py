"""Small state-space helpers for the conversions: realization, zeros, evaluation.

Matrices are plain numpy arrays; a SISO system is ``(A, B, C, D)`` with ``B`` of shape
(n, 1), ``C`` of shape (1, n) and ``D`` a float. scipy is imported inside the functions.
"""

from __future__ import annotations

import numpy as np


def realize(num, den) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """A balanced controllable-form realization of a proper num/den (descending powers).

    ``D`` is the direct term num[0]/den[0] when the degrees are equal, else exactly 0.
    Balancing (a diagonal similarity) keeps the matrix exponential and logarithm accurate when
    the coefficients span many decades; it does not change the transfer function.
    """
    from scipy.linalg import matrix_balance

    den = np.asarray(den, dtype=float)
    den = den / den[0]
    n = den.size - 1
    num = np.asarray(num, dtype=float) / np.asarray(den[0])
    num = np.concatenate([np.zeros(n + 1 - num.size), num])
    d = float(num[0])
    rest = num[1:] - d * den[1:]
    if n == 0:
        return np.zeros((0, 0)), np.zeros((0, 1)), np.zeros((1, 0)), d
    a = np.zeros((n, n))
    a[0, :] = -den[1:]
    a[1:, :-1] = np.eye(n - 1)
    b = np.zeros((n, 1))
    b[0, 0] = 1.0
    c = rest.reshape(1, n).copy()
    ab, t = matrix_balance(a, permute=False)
    b = np.linalg.solve(t, b)
    c = c @ t
    return ab, b, c, d


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


def transmission_zeros(a, b, c, d, count: int) -> np.ndarray:
    """The ``count`` finite zeros of a SISO system from the generalized eigenvalues of its
    system pencil [[A, B], [C, D]] − x·[[I, 0], [0, 0]]. The caller states how many finite zeros
    the system has (states minus relative degree); the most finite eigenvalues are kept."""
    from scipy.linalg import eig

    n = a.shape[0]
    if count <= 0 or n == 0:
        return np.zeros(0, complex)
    m = np.block([[a, b], [c, np.array([[d]])]])
    nmat = np.zeros((n + 1, n + 1))
    nmat[:n, :n] = np.eye(n)
    ab = eig(m, nmat, right=False, homogeneous_eigvals=True)
    alpha, beta = ab[0], ab[1]
    # finiteness measure: |beta| / |alpha| large means finite and moderate
    score = np.abs(beta) / np.maximum(np.abs(alpha), 1e-300)
    order = np.argsort(-score)[:count]
    zeros = alpha[order] / beta[order]
    return _conjugate_clean(zeros)


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
