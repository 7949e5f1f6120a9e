"""A linear recursive filter with carried state, in numpy without a per-sample Python loop.

``run_filter(b, a, x, zi)`` computes y = B(z)/A(z)·x for b, a in ascending powers of z⁻¹ (a[0] ≠ 0;
both are divided by a[0] as given), started from the state ``zi`` and returning the state after
the last sample: the transposed direct form II and its state convention, as
``scipy.signal.lfilter(b, a, x, zi=zi)`` defines them (n = max(len(a), len(b)) − 1 states):

    y[k]       = b0·x[k] + s0[k]
    s_i[k + 1] = b_(i+1)·x[k] + s_(i+1)[k] − a_(i+1)·y[k]      (i < n, s_n = 0)

so a state from one call continues in the next (a long signal in chunks gives the same samples
as at once), and a state made for scipy's filter (its ``lfiltic``, or a free response written
as that state) means the same here. As state space: s[k+1] = A·s[k] + B·x[k], y[k] = C·s[k] + D·x[k]
with A the companion matrix (first column −a_(1..n), ones above the diagonal), B = b_(1..n) −
a_(1..n)·b0, C = (1, 0, …, 0), D = b0.

**Order one** (the modes of a replay, a firmware integrator): y[k] = p·y[k−1] + v[k] with
v = b0·x + b1·x delayed (zi added at the first sample) is a running sum of the input scaled by
p^(−i), scaled back by p^j (:func:`first_order_recursion`): a few passes of numpy over the samples,
about the cost of scipy's compiled loop. The rounding stays the recursion's own (see there).

**Order two and more: blocks.** The samples are taken L at a time (L = :data:`BLOCK`): for a block with state s at
its start,

    y_block = O·s + T·x_block,     s' = Q·s + K·x_block,

O the L×n matrix of rows C·A^j, T the lower-triangular Toeplitz matrix of the impulse response
h[0] = D, h[j] = C·A^(j−1)·B, Q = A^L and K the n×L matrix of columns A^(L−1−j)·B. The outputs
of all blocks are two matrix products; the block-to-block recursion of the state is the only
Python loop (N/L steps of an n×n product). The powers A^j are formed by the recursion
A^j = A·A^(j−1) (the state recursion run from each unit state, one rounding per product as the
filter has), kept per coefficient set and dtype.

**Refinement** (order two and more). Q = A^L of a companion matrix with crowded poles is far larger than the state it
maps to (‖Q‖·|s| ≫ |Q·s|), so the blocks alone lose digits a sample-by-sample recursion keeps
(an integrator with a pole pair at |z| = 0.9999: 2e-8 of the peak). For n ≥ 2 one step of
iterative refinement follows: the residual r = A(z)·y − B(z)·x − zi (zi entering at the first n
samples) is formed in working precision and its response through 1/A(z) subtracted; the final
state is then taken from the last n inputs and outputs, s_i = Σ_(j>i) b_j·x[N+i−j] − a_j·y[N+i−j]
(the state scipy.signal.lfiltic builds).

**Accuracy** (tests/test_digital_linearfilter.py, against ``scipy.signal.lfilter`` and a
long-double recursion): first-order filters from p = 0 to |p| = 1.0001, real and complex, within
1e-13 of scipy's peak output; random stable filters of order 1–8 with poles up to |z| = 0.999, real and
complex, with and without ``zi``, whole and in chunks: outputs within 1e-12 of the output's peak
of scipy's (measured: 3e-14), final states within 1e-12 of the size of the terms they sum.
Marginal (integrators, a double integrator, an oscillator on |z| = 1) and lightly damped filters
(pairs at |z| up to 0.99999), where the recursion itself loses digits to the poles' crowding
(scipy's error against long double up to 2e-11 of the peak): our error within 10× scipy's
(measured worst 7.6×, the double integrator: 4e-11 of the peak).

Conventions: b, a ascending in z⁻¹; x one-dimensional and finite (a NaN or infinity spreads
over its whole block, where a recursion carries it only forward); real or complex (the result's
dtype is numpy's common type of b, a, x and zi, at least float64).
"""

from __future__ import annotations

import functools

import numpy as np

#: samples per block (a power of two; T is BLOCK × BLOCK)
BLOCK = 256


def run_filter(b, a, x, zi=None) -> tuple[np.ndarray, np.ndarray]:
    """Filter ``x`` by B(z)/A(z) (ascending powers of z⁻¹) from the transposed-direct-form-II
    state ``zi`` (zeros when None; shape (max(len(a), len(b)) − 1,)); returns (y, final state)."""
    b = np.atleast_1d(np.asarray(b))
    a = np.atleast_1d(np.asarray(a))
    x = np.asarray(x)
    if b.ndim != 1 or a.ndim != 1 or b.size == 0 or a.size == 0:
        raise ValueError("b and a must be non-empty one-dimensional coefficient sequences")
    if x.ndim != 1:
        raise ValueError(f"x must be one-dimensional, got shape {x.shape}")
    if a[0] == 0:
        raise ValueError("a[0] must be nonzero")
    n = max(a.size, b.size) - 1
    parts = (b, a, x) if zi is None else (b, a, x, np.asarray(zi))
    dtype = np.result_type(*parts, np.float64)
    if zi is None:
        state = np.zeros(n, dtype)
    else:
        state = np.asarray(zi, dtype)
        if state.shape != (n,):
            raise ValueError(f"zi must have shape ({n},) for these coefficients, got {state.shape}")
    bb = np.zeros(n + 1, dtype)
    aa = np.zeros(n + 1, dtype)
    bb[: b.size] = b
    aa[: a.size] = a
    bb, aa = bb / aa[0], aa / aa[0]
    x = x.astype(dtype, copy=False)
    if n == 0:
        return bb[0] * x, state.copy()
    if x.size == 0:
        return np.empty(0, dtype), state.copy()
    if n == 1:
        return _first_order(bb, aa, x, state)
    from convert.digital.statespace import small_dense

    # the block products are a few hundred wide: one BLAS thread (on the shared 2-core machine
    # the default threads made 10^6 samples of order two take 0.34-0.5 s instead of 0.07 s)
    with small_dense:
        y, _ = _block_run(bb, aa, x, state)
        # one step of refinement: the residual of A(z)·y = B(z)·x + zi (zi enters at the first n
        # samples) in working precision, its response through 1/A(z) subtracted
        N = x.size
        r = np.zeros(N, dtype)
        for j in range(n + 1):
            r[j:] += aa[j] * y[: N - j] - bb[j] * x[: N - j]
        r[: min(n, N)] -= state[: min(n, N)]
        impulse = np.zeros(n + 1, dtype)
        impulse[0] = 1.0
        y -= _block_run(impulse, aa, r, np.zeros(n, dtype))[0]
    return y, _final_state(bb, aa, x, y, state)


def _first_order(b: np.ndarray, a: np.ndarray, x: np.ndarray, zi: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Order one: y[k] = p·y[k−1] + v[k] with p = −a1, v[k] = b0·x[k] + b1·x[k−1] and zi added to
    v[0] (the module doc's first-order section by scaled running sums)."""
    v = b[0] * x
    if b[1] != 0:
        v[1:] += b[1] * x[:-1]
    v[0] += zi[0]
    y = first_order_recursion(-a[1], v)
    return y, np.array([b[1] * x[-1] - a[1] * y[-1]])


#: largest |ln |p||·L in a block of the first-order section: p^(±j) within e^(±300), so an input
#: up to 1e170 neither overflows nor meets a subnormal number when scaled
_SPAN = 300.0


def first_order_recursion(p, v: np.ndarray) -> np.ndarray:
    """y[k] = p·y[k−1] + v[k] from y[−1] = 0 (p real or complex, v one-dimensional).

    In blocks of L samples with |ln |p||·L ≤ 300: y[mL + j] = p^j·(c_m·p + Σ_(i≤j) p^(−i)·v[mL + i]),
    a running sum (numpy.cumsum) of the input scaled by p^(−i), scaled back by p^j; c_m, the last
    output of the block before, follows from the blocks' own last outputs by a prefix sum by
    doubling with the factor p^L. The rounding of the running sum at i, carried to k, is multiplied
    by |p|^(k−i) ≤ 1 relative to y[i] (for |p| ≤ 1; for |p| > 1 the same with the roles of the
    scalings exchanged): the recursion's own error bound, within a few units of the last place.
    p = 1 is a plain running sum; |p| below e^(−150) a short sum of shifted terms (p^j underflows
    within a few)."""
    v = np.asarray(v)
    N = v.size
    dtype = np.result_type(v, p, np.float64)
    if N == 0:
        return np.empty(0, dtype)
    if p == 0:
        return v.astype(dtype, copy=True)
    mag = abs(p)
    if mag < np.exp(-_SPAN / 2):
        y = v.astype(dtype, copy=True)
        term = y.copy()
        for _ in range(N):
            term = p * term[:-1]
            if not term.size or not np.any(term):
                break
            y[N - term.size :] += term
        return y
    if p == 1:
        return np.cumsum(v, dtype=dtype)
    span = abs(np.log(mag))
    L = N if span * N <= _SPAN else max(1, int(_SPAN / span))
    up, down = _scalings(p, L, dtype.str)
    full, rest = divmod(N, L)
    y = np.empty(N, dtype)
    if full:
        Y = y[: full * L].reshape(full, L)
        np.multiply(v[: full * L].reshape(full, L), down, out=Y)
        np.cumsum(Y, axis=1, out=Y)
        Y *= up
    if rest:
        tail = y[full * L :]
        np.multiply(v[full * L :], down[:rest], out=tail)
        np.cumsum(tail, out=tail)
        tail *= up[:rest]
    nb = full + (rest > 0)
    if nb > 1:
        # each block's last output from rest, then with the carries: C_m = Y_m,end + p^L·C_(m−1)
        c = y[L - 1 :: L][:full].copy()
        d = 1
        while d < c.size:
            factor = _power(p, d * L, dtype)[()]  # p^(dL), one power (squaring would compound)
            if factor == 0:
                break
            c[d:] += factor * c[:-d]
            d *= 2
        carry = up * p  # p^(j+1)
        if full > 1:
            y[L : full * L].reshape(full - 1, L)[...] += np.outer(c[: full - 1], carry)
        if rest:
            y[full * L :] += c[full - 1] * carry[:rest]
    return y


@functools.lru_cache(maxsize=16)
def _scalings(p, L: int, dtype_str: str) -> tuple[np.ndarray, np.ndarray]:
    """p^j and p^(−j), j = 0..L−1 (read-only), each one power formed in long double and rounded
    once (a complex p's phase j·arg p would otherwise carry j roundings of arg p)."""
    dtype = np.dtype(dtype_str)
    j = np.arange(L, dtype=np.longdouble)
    up, down = _power(p, j, dtype), _power(p, -j, dtype)
    up.flags.writeable = False
    down.flags.writeable = False
    return up, down


def _power(p, j, dtype) -> np.ndarray:
    """p^j for exponents j (integers, any sign) in long double, as ``dtype``."""
    if np.iscomplexobj(p) or np.dtype(dtype).kind == "c":
        return np.exp(np.asarray(j, np.longdouble) * np.log(np.clongdouble(p))).astype(dtype)
    return np.power(np.longdouble(p), np.asarray(j, np.longdouble)).astype(dtype)


def _final_state(b: np.ndarray, a: np.ndarray, x: np.ndarray, y: np.ndarray, zi: np.ndarray) -> np.ndarray:
    """The state after the last sample from the last n inputs and outputs (and what is left of
    ``zi`` when there are fewer than n samples): s_i = Σ_(j>i) b_j·x[N+i−j] − a_j·y[N+i−j]."""
    n, N = zi.size, x.size
    pad = max(0, n - N)
    xt = np.concatenate([np.zeros(pad, x.dtype), x[N - min(n, N) :]])
    yt = np.concatenate([np.zeros(pad, y.dtype), y[N - min(n, N) :]])
    out = np.zeros(n, y.dtype)
    for j in range(1, n + 1):
        out[:j] += b[j] * xt[n - j :] - a[j] * yt[n - j :]
    if pad:
        out[:pad] += zi[N:]
    return out


def _block_run(bb: np.ndarray, aa: np.ndarray, x: np.ndarray, state: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The block recursion (module doc) for normalized coefficients of order n ≥ 1."""
    n = aa.size - 1
    dtype = x.dtype
    Ob, T, Q, K, powers = _blocks(bb.tobytes(), aa.tobytes(), dtype.str)
    L = BLOCK
    nb, r = divmod(x.size, L)
    y = np.empty(x.size, dtype)
    s = state.copy()
    if nb:
        X = x[: nb * L].reshape(nb, L)
        W = X @ K.T  # each block's input term of the next state
        S = np.empty((nb, n), dtype)
        for m in range(nb):
            S[m] = s
            s = Q @ s + W[m]
        y[: nb * L] = (X @ T.T + S @ Ob.T).ravel()
    if r:
        xr = x[nb * L :]
        y[nb * L :] = T[:r, :r] @ xr + Ob[:r] @ s
        s = powers[r] @ s + K[:, L - r :] @ xr
    return y, s


@functools.lru_cache(maxsize=32)
def _blocks(b_bytes: bytes, a_bytes: bytes, dtype_str: str):
    """O (L×n), T (L×L), Q = A^L (n×n), K (n×L) and the powers A^0..A^L (L+1, n, n) of the
    normalized coefficients (read-only: shared between calls)."""
    dtype = np.dtype(dtype_str)
    b = np.frombuffer(b_bytes, dtype)
    a = np.frombuffer(a_bytes, dtype)
    n = a.size - 1
    L = BLOCK
    A = np.zeros((n, n), dtype)
    A[:, 0] = -a[1:]
    A[np.arange(n - 1), np.arange(1, n)] = 1.0
    B = b[1:] - a[1:] * b[0]
    powers = np.empty((L + 1, n, n), dtype)  # A^0 .. A^L
    powers[0] = np.eye(n, dtype=dtype)
    for j in range(1, L + 1):
        powers[j] = A @ powers[j - 1]  # the state recursion run from each unit state
    Ob = powers[:L, 0, :]  # rows C·A^j, C = e0
    G = powers[:L] @ B  # rows A^j·B, j < L
    h = np.empty(L, dtype)
    h[0] = b[0]
    h[1:] = G[: L - 1, 0]  # C·A^(j−1)·B
    lag = np.arange(L)[:, None] - np.arange(L)[None, :]
    T = np.where(lag >= 0, h[np.clip(lag, 0, None)], 0)
    K = G[::-1].T  # column j: A^(L−1−j)·B
    out = (np.ascontiguousarray(Ob), T, powers[L].copy(), np.ascontiguousarray(K), powers)
    for m in out:
        m.flags.writeable = False
    return out
