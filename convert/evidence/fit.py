"""Fit the form as it is: the values that matter, estimated from a measurement by weighted least
squares, with confidence intervals, what the data can and cannot tell apart, and the single
changes that explain it.

The unknowns are the logarithms of the chosen values (parts, or PID parameters), so a change
reads as a ratio and every value stays positive; a pot's wiper position (0 … 1 of its travel)
is fitted as its logit, so it stays inside the track. Residuals are ln|H_model/H_measured| and the
phase of H_model/H_measured, each divided by its point's noise (1 σ; ln-gain in nepers, phase
in radians). Directions of the log-values are found from the singular value decomposition of
the weighted Jacobian at the drawn values: a direction whose 95 % interval (1.96/s) is wider
than a factor e^0.5 (about ±65 %) is not determined by the data; the fit moves only along the
determined directions, and values outside them stay as drawn and are reported as such, with
the combinations the data does fix (e.g. "R2·C1"). Intervals are 95 % (1.96 σ) from the
Jacobian at the solution, scaled by the fit's χ²/dof when above 1 (noise underestimated or the
model incomplete); common practice for nonlinear least squares.

Single-part changes: each value fitted alone with the others as drawn, ranked by χ²; one
"explains the measurement" when its χ²/dof is within the 3 σ spread of a χ² with that many
degrees of freedom (χ²/dof ≤ 1 + 3·sqrt(2/dof)).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from convert.errors import InputError
from convert.values import format_value

Z95 = 1.959963984540054  # two-sided 95 % point of the normal distribution
UNDETERMINED_LOG_HALF_WIDTH = 0.5


@dataclass(frozen=True)
class FittedValue:
    name: str
    kind: str
    drawn: float
    fitted: float
    ci95_fraction: float | None  # half-width of the 95 % interval as a fraction of the value; None = not determined

    @property
    def determined(self) -> bool:
        return self.ci95_fraction is not None

    @property
    def change(self) -> float:
        return self.fitted / self.drawn - 1.0

    @property
    def significant(self) -> bool:
        """The drawn value lies outside the 95 % interval."""
        if self.ci95_fraction is None:
            return False
        return abs(np.log(self.fitted / self.drawn)) > np.log1p(self.ci95_fraction)


@dataclass(frozen=True)
class SingleChange:
    name: str
    kind: str
    drawn: float
    fitted: float
    chi2_dof: float
    explains: bool


@dataclass(frozen=True)
class FitResult:
    model: str
    values: tuple[FittedValue, ...]
    determined: tuple[str, ...]  # combinations the data fixes
    undetermined: tuple[str, ...]  # combinations it cannot tell apart
    chi2_dof: float
    chi2_dof_drawn: float
    dof: int
    singles: tuple[SingleChange, ...]
    noise_source: str
    notes: tuple[str, ...] = field(default_factory=tuple)

    def as_dict(self) -> dict:
        return {
            "model": self.model,
            "chi2_dof": self.chi2_dof,
            "chi2_dof_drawn": self.chi2_dof_drawn,
            "dof": self.dof,
            "noise_source": self.noise_source,
            "determined": list(self.determined),
            "undetermined": list(self.undetermined),
            "notes": list(self.notes),
            "values": [dict(v.__dict__, change=v.change, significant=v.significant) for v in self.values],
            "single_changes": [dict(s.__dict__) for s in self.singles],
        }


def _to_x(kind: str, value: float) -> float:
    """A value in fitting coordinates: the logarithm, or the logit of a pot position (0 … 1)."""
    return float(np.log(value / (1 - value))) if kind == "position" else float(np.log(value))


def _from_x(kind: str, x: float) -> float:
    return float(1 / (1 + np.exp(-x))) if kind == "position" else float(np.exp(x))


def _residuals(model, names, base: dict, f, measured, s_ln, s_ph, sign):
    kinds = [model.kinds.get(n, "number") for n in names]

    def resid(logs: np.ndarray) -> np.ndarray:
        values = dict(base)
        values.update({n: _from_x(k, x) for n, k, x in zip(names, kinds, logs)})
        with np.errstate(all="ignore"):
            ratio = sign * model.response(values, f) / measured
        r = np.concatenate([np.log(np.abs(ratio)) / s_ln, np.angle(ratio) / s_ph])
        return np.where(np.isfinite(r), r, 1e6)

    return resid


def _jacobian(resid, x: np.ndarray, step: float = 1e-6) -> np.ndarray:
    r0 = resid(x)
    jac = np.empty((r0.size, x.size))
    for i in range(x.size):
        dx = np.zeros_like(x)
        dx[i] = step
        jac[:, i] = (resid(x + dx) - resid(x - dx)) / (2 * step)
    return jac


def _combination(vec: np.ndarray, names) -> str:
    v = vec / vec[np.argmax(np.abs(vec))]
    terms = []
    for c, n in zip(v, names):
        if abs(c) < 0.05:
            continue
        c = round(float(c), 2)
        if c == 1:
            terms.append((n, ""))
        elif c == -1:
            terms.append((n, "^-1"))
        else:
            terms.append((n, f"^{c:g}"))
    num = [n + p for n, p in terms if not p.startswith("^-")]
    den = [n + (p if p != "^-1" else "").replace("^-", "^") for n, p in terms if p.startswith("^-")]
    text = "·".join(num) or "1"
    if den:
        text += "/" + ("·".join(den) if len(den) == 1 else "(" + "·".join(den) + ")")
    return text


def _rref(rows: np.ndarray, tol: float = 1e-9) -> np.ndarray:
    a = rows.astype(float).copy()
    r = 0
    for c in range(a.shape[1]):
        if r >= a.shape[0]:
            break
        p = r + int(np.argmax(np.abs(a[r:, c])))
        if abs(a[p, c]) < tol:
            continue
        a[[r, p]] = a[[p, r]]
        a[r] /= a[r, c]
        for i in range(a.shape[0]):
            if i != r:
                a[i] -= a[i, c] * a[r]
        r += 1
    return a[:r]


def fit_sweep(
    model, f_hz, measured, noise_db, noise_deg, *, names=None, inverted: bool = False, noise_source: str = "", use=None
) -> FitResult:
    """Fit ``model`` (:class:`convert.evidence.models.ParametricModel`) to the measured complex
    response at ``f_hz`` with per-point noise (1 σ; dB and degrees). ``names``: the values to
    fit (default: all of the model's); ``use``: a mask of the points to use (default: all with
    finite noise)."""
    from scipy.optimize import least_squares

    names = tuple(model.names if names is None else names)
    unknown = [n for n in names if n not in model.nominal]
    if unknown:
        raise InputError(
            f"no value called {unknown[0]!r} in the {model.label}; it has {', '.join(model.names)}", key="fit"
        )
    if not names:
        raise InputError(f"the {model.label} has no values to fit", key="fit")
    f = np.asarray(f_hz, dtype=float)
    s_ln = np.asarray(noise_db, dtype=float) * np.log(10) / 20
    s_ph = np.radians(np.asarray(noise_deg, dtype=float))
    ok = np.isfinite(s_ln) & np.isfinite(s_ph) & (s_ln > 0) & (s_ph > 0) & np.isfinite(measured)
    if use is not None:
        ok &= use
    if ok.sum() < 2:
        raise InputError("too few points with a finite noise figure to fit (need at least 2)", key="fit")
    f, meas, s_ln, s_ph = f[ok], np.asarray(measured)[ok], s_ln[ok], s_ph[ok]
    sign = -1.0 if inverted else 1.0
    base = dict(model.nominal)
    resid = _residuals(model, names, base, f, meas, s_ln, s_ph, sign)
    kinds = [model.kinds.get(n, "number") for n in names]
    x0 = np.array([_to_x(k, model.nominal[n]) for n, k in zip(names, kinds)])
    dof = max(2 * f.size - len(names), 1)
    chi2_drawn = float(np.sum(resid(x0) ** 2)) / dof
    _, s, vt = np.linalg.svd(_jacobian(resid, x0), full_matrices=False)
    keep = (s > 0) & (Z95 / np.where(s > 0, s, 1) <= UNDETERMINED_LOG_HALF_WIDTH) & (s >= 1e-9 * s.max())
    vk = vt[keep].T  # (n_names, k)
    if vk.shape[1] == 0:
        raise InputError(
            "the measurement determines none of the chosen values (its noise is too large for them, or "
            "they do not act in the measured band)",
            key="fit",
        )
    sol = least_squares(lambda a: resid(x0 + vk @ a), np.zeros(vk.shape[1]), method="lm", xtol=1e-12, ftol=1e-12)
    x = x0 + vk @ sol.x
    chi2 = float(np.sum(resid(x) ** 2)) / dof
    _, s2, vt2 = np.linalg.svd(_jacobian(resid, x), full_matrices=False)
    keep2 = (s2 > 0) & (Z95 / np.where(s2 > 0, s2, 1) <= UNDETERMINED_LOG_HALF_WIDTH) & (s2 >= 1e-9 * s2.max())
    v_det = vt2[keep2].T
    scale = max(1.0, chi2)
    cov = v_det @ np.diag(1 / s2[keep2] ** 2) @ v_det.T * scale
    values = []
    for i, n in enumerate(names):
        e = np.zeros(len(names))
        e[i] = 1.0
        inside = np.linalg.norm(v_det.T @ e) >= 0.99
        value = _from_x(kinds[i], x[i])
        half = None
        if inside:
            sd = np.sqrt(max(cov[i, i], 0.0))
            if kinds[i] == "position":  # the interval in logit coordinates, as a fraction of the position
                half = (_from_x(kinds[i], x[i] + Z95 * sd) - _from_x(kinds[i], x[i] - Z95 * sd)) / 2 / value
            else:
                half = float(np.expm1(Z95 * sd))
        values.append(FittedValue(n, kinds[i], model.nominal[n], value, half))
    determined = tuple(_combination(row, names) for row in _rref(v_det.T)) if v_det.shape[1] < len(names) else ()
    null = vt2[~keep2]
    undetermined = tuple(_combination(row, names) for row in _rref(null)) if null.size else ()
    notes = []
    if chi2 > 1 + 3 * np.sqrt(2 / dof):
        notes.append(
            f"χ²/dof = {chi2:.3g} after the fit: the model with these values does not explain the "
            "measurement to its noise (another part changed, a parasitic left out, or the noise is "
            "underestimated); intervals are widened by that factor"
        )
    singles = []
    for i, n in enumerate(names):
        r1 = _residuals(model, (n,), base, f, meas, s_ln, s_ph, sign)
        one = least_squares(r1, [x0[i]], method="lm", xtol=1e-12, ftol=1e-12)
        c1 = float(np.sum(one.fun**2)) / max(2 * f.size - 1, 1)
        singles.append(
            SingleChange(
                n,
                kinds[i],
                model.nominal[n],
                _from_x(kinds[i], one.x[0]),
                c1,
                c1 <= 1 + 3 * np.sqrt(2 / max(2 * f.size - 1, 1)),
            )
        )
    singles.sort(key=lambda c: c.chi2_dof)
    return FitResult(
        model.label,
        tuple(values),
        determined,
        undetermined,
        chi2,
        chi2_drawn,
        dof,
        tuple(singles),
        noise_source,
        tuple(notes),
    )


def value_text(value: float, kind: str, digits: int = 4) -> str:
    """A fitted or drawn value as text: a part with its unit, a pot position as % of travel."""
    if kind == "position":
        return f"{100 * value:.{max(digits - 1, 2)}g} % of travel"

    return format_value(value, kind, digits)
