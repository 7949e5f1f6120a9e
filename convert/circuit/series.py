"""IEC 60063 preferred-number series (E3 … E192) and rounding to them in log space.

The tables
----------
E3, E6, E12 and E24 are two-digit series; their values are the published table (they do not all
follow the formula 10^(i/n), e.g. 2.7, 3.3, 4.7). E48, E96 and E192 are three-digit series and
follow round(10^(i/n), 2 decimals) except for 9.20 in E192 (the formula gives 9.19), as the
standard lists it. E48 and E96 are every fourth and every second value of E192.

Rounding rule
-------------
A value is rounded to the series value nearest **in log space**: of the two neighbours
``lo <= x <= hi`` the one with the smaller ``|log(x / v)|`` wins, so the decision point is the
geometric mean ``sqrt(lo·hi)``, not the arithmetic midpoint ``(lo + hi) / 2``. This keeps the
worst relative error symmetric (a ratio, as part tolerances are) and is what makes
"round up" and "round down" equally costly in the controller's log-gain. (A linear midpoint, as
some tables use, differs only for values between the two midpoints.)

All functions are vectorized: they accept floats or numpy arrays of positive values (SI units,
ohms or farads) and return arrays of the same shape.
"""

from __future__ import annotations

import math

import numpy as np

from convert.errors import InputError

_TWO_DIGIT: dict[str, tuple[float, ...]] = {
    "E3": (1.0, 2.2, 4.7),
    "E6": (1.0, 1.5, 2.2, 3.3, 4.7, 6.8),
    "E12": (1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2),
    "E24": (
        1.0,
        1.1,
        1.2,
        1.3,
        1.5,
        1.6,
        1.8,
        2.0,
        2.2,
        2.4,
        2.7,
        3.0,
        3.3,
        3.6,
        3.9,
        4.3,
        4.7,
        5.1,
        5.6,
        6.2,
        6.8,
        7.5,
        8.2,
        9.1,
    ),
}


def _three_digit(n: int) -> tuple[float, ...]:
    values = [round(10 ** (i / n), 2) for i in range(n)]
    if n == 192:
        values[185] = 9.20  # the standard's exception to the formula (9.19)
    return tuple(values)


SERIES: dict[str, tuple[float, ...]] = {
    **_TWO_DIGIT,
    "E48": _three_digit(48),
    "E96": _three_digit(96),
    "E192": _three_digit(192),
}
"""Series name -> mantissas in [1, 10), ascending."""


def get_series(name: str, *, key: str = "series") -> np.ndarray:
    """Mantissas of the series ``name`` (``"E12"``, case-insensitive) as a float array."""
    if not isinstance(name, str) or name.strip().upper() not in SERIES:
        raise InputError(f"unknown E-series {name!r}; expected one of {', '.join(SERIES)}", key=key)
    return np.asarray(SERIES[name.strip().upper()], dtype=float)


def normalize_name(name: str, *, key: str = "series") -> str:
    get_series(name, key=key)
    return name.strip().upper()


def _check_positive(values: np.ndarray, key: str) -> None:
    if not np.all(np.isfinite(values)) or np.any(values <= 0):
        bad = values[~(np.isfinite(values) & (values > 0))].ravel()[0]
        raise InputError(f"a part value must be a positive finite number, found {bad!r}", key=key)


def neighbours(values, series: str, *, key: str = "value") -> tuple[np.ndarray, np.ndarray]:
    """The series values just below-or-equal and just above-or-equal each value.

    A value already in the series (to 1e-12 relative) is its own lower and upper neighbour.
    """
    x = np.asarray(values, dtype=float)
    _check_positive(x, key)
    mant = get_series(series)
    n = mant.size
    # Extend one value either side so the decade boundaries work: [m_last/10, m..., 10].
    ext = np.concatenate([[mant[-1] / 10.0], mant, [10.0]])
    log_ext = np.log10(ext)
    lx = np.log10(x)
    decade = np.floor(lx)
    frac = lx - decade  # in [0, 1)
    idx = np.searchsorted(log_ext, frac, side="right") - 1  # ext[idx] <= frac-value
    idx = np.clip(idx, 0, n + 1)
    lo = ext[idx] * 10.0**decade
    hi = ext[np.minimum(idx + 1, n + 1)] * 10.0**decade
    tol = 1e-12  # float noise from computing a value (e.g. 4.7e3·(1 + 1e-16)) counts as that value
    same_lo = np.abs(x / lo - 1.0) <= tol
    same_hi = np.abs(x / hi - 1.0) <= tol
    lo = np.where(same_hi, hi, lo)
    hi = np.where(same_lo, lo, hi)
    return _clean(lo), _clean(hi)


def _clean(values: np.ndarray) -> np.ndarray:
    """Snap to 3 significant digits so 4.7e3 is exactly the float nearest 4700."""
    v = np.asarray(values, dtype=float)
    shift = np.floor(np.log10(v)) - 2
    # multiply or divide by an exact power of ten so 1e-7 comes out as the float nearest 1e-7
    up = 10.0 ** np.maximum(shift, 0)
    down = 10.0 ** np.maximum(-shift, 0)
    return np.round(v / up * down) * up / down


def round_to_series(values, series: str, direction: str = "nearest", *, key: str = "value") -> np.ndarray:
    """Round each value to the series: ``"nearest"`` (in log space), ``"up"`` or ``"down"``."""
    lo, hi = neighbours(values, series, key=key)
    if direction == "down":
        return lo
    if direction == "up":
        return hi
    if direction != "nearest":
        raise InputError(f"unknown rounding direction {direction!r}; expected nearest, up or down", key="direction")
    x = np.asarray(values, dtype=float)
    take_hi = np.log(hi / x) < np.log(x / lo)
    return np.where(take_hi, hi, lo)


def values_in_range(series: str, low: float, high: float) -> np.ndarray:
    """Every value of the series from ``low`` to ``high`` inclusive (SI units), ascending."""
    if not (low > 0 and high > 0 and math.isfinite(low) and math.isfinite(high)):
        raise InputError(f"a range needs positive finite limits, found {low!r} .. {high!r}", key="range")
    if low > high:
        raise InputError(f"the range minimum {low:g} is above its maximum {high:g}", key="range")
    mant = get_series(series)
    out = []
    for decade in range(int(math.floor(math.log10(low))) - 1, int(math.ceil(math.log10(high))) + 1):
        out.append(mant * 10.0**decade)
    allv = _clean(np.concatenate(out))
    keep = (allv >= low * (1 - 1e-9)) & (allv <= high * (1 + 1e-9))
    return np.unique(allv[keep])


def in_series(value: float, series: str) -> bool:
    """True when ``value`` is a value of the series (to 1e-12 relative)."""
    lo, hi = neighbours(value, series)
    return bool(np.all(lo == hi))
