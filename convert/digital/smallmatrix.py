"""Linear algebra for the few-rows-wide matrices of the conversions, in numpy alone.

The realizations, samplings and loop checks work on matrices of 2 to about 20 rows, hundreds of
times per report. scipy.linalg would do the same arithmetic, but importing it costs a report about
0.2 s (most of it scipy's array-api layer), and its BLAS wakes a thread pool that costs more than
the arithmetic on matrices this small. numpy's own linalg shows no such overhead (a 6×6 solve or
eigenvalue problem takes the same time with one BLAS thread as with two), so these functions use
numpy only and need no thread limit.

- :func:`expm` — the matrix exponential by scaling and squaring with diagonal Padé approximants
  of degree 3, 5, 7, 9 or 13: N. J. Higham, "The scaling and squaring method for the matrix
  exponential revisited", SIAM J. Matrix Anal. Appl. 26(4):1179-1193 (2005), with the choice of
  degree and scaling from the norms of matrix powers and the backward-error correction ℓ(A, m)
  of A. H. Al-Mohy and N. J. Higham, "A new scaling and squaring algorithm for the matrix
  exponential", SIAM J. Matrix Anal. Appl. 31(3):970-989 (2009) (the algorithm
  ``scipy.linalg.expm`` follows). The matrices are small, so the norms of A⁴, A⁶, A⁸, A¹⁰ and
  of |A|^(2m+1) are computed exactly rather than estimated. Triangular matrices get their
  diagonal and first off-diagonal recomputed at each squaring (Al-Mohy & Higham 2009, Code
  Fragment 2.1). Accuracy: backward error about the unit roundoff; agrees with scipy.linalg.expm
  to about 1e-14 relative (in the norm) on random, ill-scaled, stiff, defective and nilpotent
  matrices (tests/test_smallmatrix.py).
- :func:`balance` — a diagonal similarity by powers of 2 that evens the 2-norms of each row and
  its column, without permutation: the scaling loop of LAPACK's xGEBAL (job 'S'), which
  ``scipy.linalg.matrix_balance(a, permute=False)`` calls. Exact (powers of 2 change no digit).
"""

from __future__ import annotations

import math

import numpy as np

# Padé coefficients b_j of the diagonal [m/m] approximant to e^x (Higham 2005, Table 2.3 text)
_PADE = {
    3: (120.0, 60.0, 12.0, 1.0),
    5: (30240.0, 15120.0, 3360.0, 420.0, 30.0, 1.0),
    7: (17297280.0, 8648640.0, 1995840.0, 277200.0, 25200.0, 1512.0, 56.0, 1.0),
    9: (17643225600.0, 8821612800.0, 2075673600.0, 302702400.0, 30270240.0, 2162160.0, 110880.0, 3960.0, 90.0, 1.0),
    13: (
        64764752532480000.0,
        32382376266240000.0,
        7771770303897600.0,
        1187353796428800.0,
        129060195264000.0,
        10559470521600.0,
        670442572800.0,
        33522128640.0,
        1323241920.0,
        40840800.0,
        960960.0,
        16380.0,
        182.0,
        1.0,
    ),
}
# θ_m: the largest ‖A‖ for which r_m(A) has backward error below the unit roundoff (Higham 2005,
# Table 2.3); θ_13 = 4.25 as Al-Mohy & Higham 2009 use with their sharper power-norm bounds
_THETA = {3: 1.495585217958292e-2, 5: 2.539398330063230e-1, 7: 9.504178996162932e-1, 9: 2.097847961257068, 13: 4.25}
# 1/|c_{2m+1}|, c_{2m+1} = (m!)² / ((2m)!·(2m+1)!), the leading term of the backward-error series
_ELL_RECIP = {m: math.factorial(2 * m) * math.factorial(2 * m + 1) / math.factorial(m) ** 2 for m in _THETA}
_UNIT_ROUNDOFF = 2.0**-53


def _norm1(a: np.ndarray) -> float:
    return float(np.abs(a).sum(axis=0).max())


def _abs_power_norm1(a_abs: np.ndarray, p: int) -> float:
    """‖ |A|^p ‖₁ exactly: 1ᵀ|A|^p is non-negative, so its largest entry is the norm."""
    v = np.ones(a_abs.shape[0])
    for _ in range(p):
        v = v @ a_abs
    return float(v.max())


def _ell(a: np.ndarray, m: int) -> int:
    """Extra squarings so that the rounding in r_m(A) stays below the unit roundoff
    (Al-Mohy & Higham 2009, eq. (5.1))."""
    norm_a = _norm1(a)
    power = _abs_power_norm1(np.abs(a), 2 * m + 1)
    if power == 0.0 or norm_a == 0.0:
        return 0
    alpha = power / (norm_a * _ELL_RECIP[m])
    if not 0.0 < alpha < math.inf:
        return 0
    return max(int(math.ceil(math.log2(alpha / _UNIT_ROUNDOFF) / (2 * m))), 0)


def _pade(a: np.ndarray, powers: dict, m: int) -> np.ndarray:
    """r_m(A) = (V − U)⁻¹ (V + U) with U the odd and V the even part of the numerator, computed
    as I + 2 (V − U)⁻¹ U: a zero row of A (the held input of a sampling block) then gives an
    exact row of I (the solve's rounding of b₀/b₀ would otherwise grow through the squarings).
    ``powers`` holds A², A⁴, A⁶ (already computed)."""
    b = _PADE[m]
    eye = np.eye(a.shape[0])
    a2, a4, a6 = powers[2], powers[4], powers[6]
    if m == 13:
        u_in = a6 @ (b[13] * a6 + b[11] * a4 + b[9] * a2) + b[7] * a6 + b[5] * a4 + b[3] * a2 + b[1] * eye
        v = a6 @ (b[12] * a6 + b[10] * a4 + b[8] * a2) + b[6] * a6 + b[4] * a4 + b[2] * a2 + b[0] * eye
    else:
        u_in = b[3] * a2 + b[1] * eye
        v = b[2] * a2 + b[0] * eye
        for k, ak in ((2, a4), (3, a6), (4, powers.get(8))):
            if 2 * k > m:
                break
            u_in += b[2 * k + 1] * ak
            v += b[2 * k] * ak
    u = a @ u_in
    r = np.linalg.solve(v - u, 2.0 * u)
    r[np.diag_indices_from(r)] += 1.0
    return r


def _exp_divided_difference(x0: np.ndarray, x1: np.ndarray) -> np.ndarray:
    """(e^{x1} − e^{x0})/(x1 − x0): the off-diagonal entry of the exponential of a 2×2 triangular
    block per unit of that block's off-diagonal (Al-Mohy & Higham 2009, eq. (10.1)). Written
    e^{(x0+x1)/2}·sinh(δ)/δ with δ = (x1 − x0)/2 where |δ| < 1, so that nothing cancels (1 when
    x0 = x1); as the quotient itself elsewhere, where nothing cancels either and the product
    form could meet 0·∞."""
    half = 0.5 * (x1 - x0)
    near = np.abs(half) < 1.0
    with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
        h = np.where(near, half, 1.0)
        close = np.exp(0.5 * (x0 + x1)) * np.where(h == 0.0, 1.0, np.sinh(h) / np.where(h == 0.0, 1.0, h))
        far = (np.exp(x1) - np.exp(x0)) / np.where(near, 1.0, x1 - x0)
    return np.where(near, close, far)


def expm(a) -> np.ndarray:
    """e^A of a real square matrix (numpy only; see the module docstring for the algorithm and
    its accuracy). Returns a new float array of the same shape."""
    a = np.array(a, dtype=float)
    if a.ndim != 2 or a.shape[0] != a.shape[1]:
        raise ValueError(f"expm: a square matrix is needed, got shape {a.shape}")
    n = a.shape[0]
    if n == 0:
        return np.zeros((0, 0))
    if n == 1:
        return np.exp(a)
    if not np.any(a - np.diag(np.diag(a))):  # diagonal
        return np.diag(np.exp(np.diag(a)))
    if not np.all(np.isfinite(a)):
        return np.full((n, n), np.nan)
    with np.errstate(over="ignore", invalid="ignore"):  # powers of a huge A may overflow: see below
        a2 = a @ a
        a4 = a2 @ a2
        a6 = a4 @ a2
        powers = {2: a2, 4: a4, 6: a6}
        d4 = _norm1(a4) ** 0.25
        d6 = _norm1(a6) ** (1 / 6)
        eta1 = max(d4, d6)
        for m in (3, 5):
            if eta1 <= _THETA[m] and _ell(a, m) == 0:
                return _pade(a, powers, m)
        a8 = a4 @ a4
        powers[8] = a8
        d8 = _norm1(a8) ** 0.125
        eta3 = max(d6, d8)
        for m in (7, 9):
            if eta3 <= _THETA[m] and _ell(a, m) == 0:
                return _pade(a, powers, m)
        d10 = _norm1(a4 @ a6) ** 0.1
        eta5 = min(eta3, max(d8, d10))
        if not np.isfinite(eta5):  # the powers overflowed: scale by ‖A‖₁ itself (Higham 2005)
            eta5 = _norm1(a)
        s = max(int(math.ceil(math.log2(eta5 / _THETA[13]))), 0) if eta5 > 0 else 0
        s += _ell(a * 2.0**-s, 13)
    if s:
        scale = 2.0**-s
        a_s = a * scale
        if np.all(np.isfinite(a6)) and scale**6 > 0.0:
            powers = {2: a2 * scale**2, 4: a4 * scale**4, 6: a6 * scale**6}
        else:  # the unscaled powers overflowed, or their scale underflows: from the scaled A
            a2s = a_s @ a_s
            a4s = a2s @ a2s
            powers = {2: a2s, 4: a4s, 6: a4s @ a2s}
    else:
        a_s = a
    e = _pade(a_s, powers, 13)
    if not s:
        return e
    lower = not np.any(np.triu(a, 1))
    upper = not np.any(np.tril(a, -1))
    triangular = lower or upper
    if triangular:
        diag = np.diag(a)
        off = np.diag(a, -1) if lower else np.diag(a, 1)
        rows, cols = (np.arange(1, n), np.arange(n - 1)) if lower else (np.arange(n - 1), np.arange(1, n))

        def exact_band(level: int) -> None:
            f = 2.0**-level
            d = diag * f
            e[np.arange(n), np.arange(n)] = np.exp(d)
            e[rows, cols] = _exp_divided_difference(d[:-1], d[1:]) * (off * f)

        exact_band(s)
    for level in range(s - 1, -1, -1):
        e = e @ e
        if triangular:
            exact_band(level)
    return e


# xGEBAL's limits: SFMIN1 = smallest normal / (eps·base), SFMAX1 = 1/SFMIN1, SFMIN2 = SFMIN1·2
_SFMIN1 = np.finfo(float).tiny / np.finfo(float).eps
_SFMAX1 = 1.0 / _SFMIN1
_SFMIN2 = _SFMIN1 * 2.0
_SFMAX2 = 1.0 / _SFMIN2


def balance(a) -> tuple[np.ndarray, np.ndarray]:
    """``(B, T)`` with T diagonal (powers of 2) and B = T⁻¹ A T, the rows and columns of B
    having about equal 2-norms: LAPACK xGEBAL's scaling loop (job 'S', no permutation), as
    ``scipy.linalg.matrix_balance(a, permute=False)`` returns it. A row or column that is zero
    off nothing (zero norm) is left alone."""
    b = np.array(a, dtype=float)
    n = b.shape[0]
    scale = np.ones(n)
    if n == 0:
        return b, np.diag(scale)
    if not np.all(np.isfinite(b)):
        raise ValueError("balance: the matrix has a NaN or infinite entry")
    converged = False
    while not converged:
        converged = True
        for i in range(n):
            c = float(np.linalg.norm(b[:, i]))
            r = float(np.linalg.norm(b[i, :]))
            ca = float(np.abs(b[:, i]).max())
            ra = float(np.abs(b[i, :]).max())
            if c == 0.0 or r == 0.0:
                continue
            g = r / 2.0
            f = 1.0
            s = c + r
            while c < g and max(f, c, ca) < _SFMAX2 and min(r, g, ra) > _SFMIN2:
                f *= 2.0
                c *= 2.0
                ca *= 2.0
                r /= 2.0
                g /= 2.0
                ra /= 2.0
            g = c / 2.0
            while g >= r and max(r, ra) < _SFMAX2 and min(f, c, g, ca) > _SFMIN2:
                f /= 2.0
                c /= 2.0
                g /= 2.0
                ca /= 2.0
                r *= 2.0
                ra *= 2.0
            if c + r >= 0.95 * s:
                continue
            if f < 1.0 and scale[i] < 1.0 and f * scale[i] <= _SFMIN1:
                continue
            if f > 1.0 and scale[i] > 1.0 and scale[i] >= _SFMAX1 / f:
                continue
            scale[i] *= f
            converged = False
            b[i, :] /= f
            b[:, i] *= f
    return b, np.diag(scale)
