"""Searches in log frequency that evaluate many frequencies per call, a few rounds in all.

The comparisons find a maximum (of an error, of the sensitivity) or a root (of log|L|, of the
phase's distance to −180°) first on a grid, then refine it on the continuous response inside the
grid interval that holds it. A scalar search (Brent's method) would call the response once per
frequency, about twenty times per bracket; here every round samples every bracket at ``points``
frequencies in one call of the (vectorized) response and narrows each bracket around what it
found, so a whole comparison costs a handful of numpy calls.

Functions take and return frequencies in Hz; the searching is done in u = ln f, so the
tolerances are relative in frequency. ``value_at(f_hz)`` / ``fun(f_hz)`` take a 1-D float array
of frequencies (Hz) and return a real array of the same length.
"""

from __future__ import annotations

import numpy as np

#: Rounds after which a search stops whatever its width (a bracket shrinks by 8.5x or more per
#: round, so 60 rounds take any double-precision bracket below one unit in the last place).
_MAX_ROUNDS = 60


def maximize_in_brackets(value_at, lo_hz, hi_hz, *, rel_tol: float, points: int = 16) -> tuple[np.ndarray, np.ndarray]:
    """The largest value of ``value_at`` inside each bracket [lo_hz[k], hi_hz[k]] (Hz).

    Each round samples every bracket at frequencies equally spaced in ln f (the ends included) in
    one call, ``4·points + 2`` of them in the first round (to see structure inside the bracket)
    and ``points + 2`` after, and keeps the two sample intervals beside the largest sample: a
    bracket shrinks by (points + 1)/2 per round until it is at most ``rel_tol`` wide in ln f, then
    a parabola through the best sample and its two neighbours gives one more candidate.

    Guarantee: a maximum of a function that is unimodal on the bracket (at the scale of the first
    round's samples) is located to ``rel_tol`` relative in frequency, as a bounded Brent search
    with ``xatol = rel_tol`` locates it, or as closely as the rounding of the values allows (near
    the top of a smooth peak they differ by less than their rounding within about √ε·(its width)
    of it; the value found is then the peak's to rounding); the value returned is the largest value evaluated, so it
    is never below the value at either end of the bracket. A value that is not finite (NaN, ±∞)
    counts as +∞: an error that cannot be evaluated is never read as small.

    Returns ``(values, at_hz)``, one per bracket. :func:`maximize_rows` with every bracket in one
    group and ``value_at`` taking a 1-D array of frequencies.
    """

    def values_at(f_hz, _rows):
        return np.asarray(value_at(f_hz.reshape(-1)), dtype=float).reshape(f_hz.shape)

    return maximize_rows(values_at, lo_hz, hi_hz, rel_tol=rel_tol, points=points)


def maximize_rows(
    values_at, lo_hz, hi_hz, *, rel_tol: float, points: int = 16, groups=None
) -> tuple[np.ndarray, np.ndarray]:
    """:func:`maximize_in_brackets` for brackets that belong to different functions, all searched
    in the same rounds: ``values_at(f_hz, rows)`` takes a 2-D array of frequencies (Hz), one row
    per bracket still searched, and ``rows``, the indices of those brackets (into ``lo_hz``), and
    returns the real values, same shape. ``groups`` (one integer per bracket; default: one group)
    says which brackets stop together: a group stops when every one of its brackets is at most
    ``rel_tol`` wide in ln f or every one has found +∞, so each group's result is exactly what a
    separate :func:`maximize_in_brackets` call on its brackets alone returns.
    Returns ``(values, at_hz)``, one per bracket."""
    lo = np.log(np.asarray(lo_hz, dtype=float)).reshape(-1)
    hi = np.log(np.asarray(hi_hz, dtype=float)).reshape(-1)
    m = lo.size
    best = np.full(m, -np.inf)
    best_u = 0.5 * (lo + hi)
    if m == 0:
        return best, np.exp(best_u)
    if groups is None:
        group, n_groups = None, 1
    else:
        group = np.unique(np.asarray(groups), return_inverse=True)[1].reshape(-1)
        n_groups = int(group.max()) + 1
        if n_groups == 1:
            group = None
    # the last round's best sample of each bracket, its neighbours and spacing: the parabola's
    last_y = np.full((m, 3), np.nan)
    last_u = np.zeros(m)
    last_h = np.zeros(m)
    inner = np.zeros(m, dtype=bool)
    active = np.arange(m)
    # the brackets still searched, their ends and best so far (written back as they finish)
    a_lo, a_hi, a_best, a_bu = lo, hi, best.copy(), best_u.copy()
    t = np.linspace(0.0, 1.0, 4 * points + 2)  # the first round looks closer: structure inside the bracket
    t_later = np.linspace(0.0, 1.0, points + 2)
    for _ in range(_MAX_ROUNDS):
        u = a_lo[:, None] + (a_hi - a_lo)[:, None] * t[None, :]
        y = _row_values(values_at, u, active)
        rows = np.arange(active.size)
        j = np.argmax(y, axis=1)
        yj = y[rows, j]
        better = yj > a_best
        a_best = np.where(better, yj, a_best)
        a_bu = np.where(better, u[rows, j], a_bu)
        # a group is done when all its brackets are narrow enough, or all have found +inf
        narrow = (a_hi - a_lo) <= rel_tol
        infinite = np.isinf(a_best)
        if group is None:
            done = np.full(active.size, bool(narrow.all() or infinite.all()))
        else:
            g = group[active]
            wide = np.bincount(g, weights=~narrow, minlength=n_groups) > 0
            finite = np.bincount(g, weights=~infinite, minlength=n_groups) > 0
            done = ~(wide & finite)[g]
        if done.any():
            d = rows[done]
            jd = j[d]
            k = active[d]
            best[k], best_u[k] = a_best[d], a_bu[d]
            inner[k] = (jd > 0) & (jd < t.size - 1) & np.isfinite(yj[d])
            jj = np.clip(jd, 1, t.size - 2)
            last_y[k] = np.stack([y[d, jj - 1], y[d, jj], y[d, jj + 1]], axis=1)
            last_u[k] = u[d, jj]
            last_h[k] = u[d, jj + 1] - u[d, jj]
            keep = rows[~done]
            if keep.size == 0:
                break
            active, j, u = active[keep], j[keep], u[keep]
            a_best, a_bu = a_best[keep], a_bu[keep]
        rows = np.arange(active.size)
        a_lo, a_hi = u[rows, np.maximum(j - 1, 0)], u[rows, np.minimum(j + 1, t.size - 1)]
        t = t_later
    else:  # rounds ran out (a bracket that never narrows): keep what was found
        best[active], best_u[active] = a_best, a_bu
    # the parabola through the best sample of the last round and its neighbours
    if inner.any():
        r = np.flatnonzero(inner)
        y0, y1, y2 = last_y[r, 0], last_y[r, 1], last_y[r, 2]
        h = last_h[r]
        curv = y0 - 2 * y1 + y2
        with np.errstate(divide="ignore", invalid="ignore"):
            shift = 0.5 * h * (y0 - y2) / curv
        ok = (curv < 0) & np.isfinite(shift) & (np.abs(shift) < h) & (shift != 0)
        if ok.any():
            kk = r[ok]
            uv = last_u[kk] + shift[ok]
            yv = _row_values(values_at, uv[:, None], kk)[:, 0]
            gain = yv > best[kk]
            best[kk[gain]] = yv[gain]
            best_u[kk[gain]] = uv[gain]
    return best, np.exp(best_u)


def _row_values(values_at, u: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """``values_at`` at e^u (2-D, one row per bracket in ``rows``), real, with every non-finite
    value read as +∞."""
    y = np.asarray(values_at(np.exp(u), rows), dtype=float).reshape(u.shape)
    return np.where(np.isfinite(y), y, np.inf)


def root_in_bracket(
    fun, a_hz: float, b_hz: float, *, xtol: float = 1e-13, rtol: float = 1e-14, points: int = 32
) -> float:
    """A root (Hz) of the real function ``fun`` between ``a_hz`` and ``b_hz``, searched in u = ln f.

    Each round samples the bracket at ``points + 2`` frequencies equally spaced in ln f (ends
    included) in one call and keeps the first sample interval where ``fun`` changes sign (or a
    sample where it is exactly zero); a bracket shrinks by points + 1 per round until it is at
    most ``xtol + rtol·|u|`` wide, and the root is then the secant through its two ends.

    Guarantee: ln of the frequency returned is within ``xtol + rtol·|ln f|`` of a sign change of
    ``fun`` (scipy's ``brentq`` tolerance, with the same defaults the margins used with it).
    When the ends' values are not finite, the geometric mid-point; when they have the same sign
    (a crossing that interpolation on a grid put just outside its bracket), the end where |fun|
    is smaller; a value exactly zero at an end returns that end.
    """
    ua, ub = float(np.log(a_hz)), float(np.log(b_hz))
    ends = np.asarray(fun(np.array([a_hz, b_hz], dtype=float)), dtype=float)
    ga, gb = float(ends[0]), float(ends[1])
    if not (np.isfinite(ga) and np.isfinite(gb)):
        return float(np.sqrt(a_hz * b_hz))
    if ga == 0:
        return float(a_hz)
    if gb == 0 or ga * gb > 0:
        return float(b_hz) if abs(gb) < abs(ga) else float(a_hz)
    t = np.linspace(0.0, 1.0, points + 2)[1:-1]
    for _ in range(_MAX_ROUNDS):
        if ub - ua <= xtol + rtol * max(abs(ua), abs(ub)):
            break
        u = ua + (ub - ua) * t
        g = np.asarray(fun(np.exp(u)), dtype=float)
        us = np.concatenate([[ua], u, [ub]])
        gs = np.concatenate([[ga], g, [gb]])
        zero = np.flatnonzero(gs == 0)
        if zero.size:
            return float(np.exp(us[zero[0]]))
        change = np.flatnonzero(np.isfinite(gs[:-1]) & np.isfinite(gs[1:]) & (np.sign(gs[:-1]) != np.sign(gs[1:])))
        if change.size == 0:  # values that are not finite hide the crossing: keep what is known
            break
        k = int(change[0])
        ua, ub, ga, gb = float(us[k]), float(us[k + 1]), float(gs[k]), float(gs[k + 1])
    return float(np.exp(ua + (ub - ua) * ga / (ga - gb)))
