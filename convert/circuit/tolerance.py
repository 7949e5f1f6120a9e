"""Part tolerances: Monte Carlo (seeded, vectorized) and worst-case corners from sensitivities.

Tolerances are fractions per part kind (``"R"``, ``"C"``) or per part name (``"R3"``), e.g.
``{"R": 0.01, "C": 0.05}``. A draw sets each part to ``nominal · (1 + t·u)``:

* ``distribution="uniform"`` (default): u uniform on [−1, 1] — every value inside the tolerance
  equally likely, the usual assumption when nothing is known of the maker's spread;
* ``distribution="normal"``: u normal with σ = 1/3, the tolerance read as a 3σ limit.

The Monte Carlo returns percentiles (default 0.5 / 50 / 99.5 %) of the gain (dB) and phase (deg)
of the positive form F(j2πf), over the frequencies, and of each design quantity of the topology.
Percentiles are linear-interpolated order statistics (numpy's default ``method="linear"``).

How it is fast: the responses are evaluated for all draws at once from the topology's polynomial
coefficients, split into real and imaginary parts (s = jω); the gain and phase percentiles are
taken on quantities monotone in them — |H/H_nom|² and tan(∠H − ∠H_nom) — so log10 and arctan run
on the few selected order statistics only, not on every draw. The tan shortcut needs the phase
deviation inside ±90°, which is checked (the exact arctan2 path is used otherwise).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping, Sequence

import numpy as np

from convert.errors import InputError

DEFAULT_TOLERANCES = {"R": 0.01, "C": 0.05}


def parse_tolerances(words: Sequence[str] | None, *, part_names: Sequence[str] = (), where: str = "--tolerance"
                     ) -> dict[str, float]:
    """Read ``["R=1%", "C=5%", "R3=0.1%"]`` into fractions; defaults R 1 %, C 5 %."""
    from convert.values import parse_fraction

    out = dict(DEFAULT_TOLERANCES)
    for word in words or ():
        if "=" not in word:
            raise InputError(f"expected KIND=PERCENT such as R=1% or C=5%, found {word!r}", where=where)
        key, _, value = word.partition("=")
        key = key.strip()
        if key.upper() in ("R", "C"):
            key = key.upper()
        elif part_names and key not in part_names:
            raise InputError(f"unknown part {key!r}; give R, C or one of {', '.join(part_names)}", where=where, key=key)
        text = value.strip()
        try:
            frac = parse_fraction(text, field=key, allow_one=False)
        except InputError as exc:
            raise InputError(exc.message, where=where, key=key) from None
        if not (0 <= frac < 1):
            raise InputError(f"a tolerance must be from 0 % to below 100 %, found {text!r}", where=where, key=key)
        out[key] = frac
    return out


def tolerance_of(part, tolerances: Mapping[str, float]) -> float:
    return float(tolerances.get(part.name, tolerances.get(part.kind, 0.0)))


def draw_parts(topology, parts: Mapping[str, float], tolerances: Mapping[str, float], draws: int, seed: int,
               distribution: str = "uniform") -> dict[str, np.ndarray]:
    """``draws`` part sets around ``parts`` -> name -> array (draws,). Open parts stay open."""
    if not (isinstance(draws, (int, np.integer)) and draws >= 1):
        raise InputError(f"the number of draws must be a positive integer, found {draws!r}", key="draws")
    if distribution not in ("uniform", "normal"):
        raise InputError(f"unknown distribution {distribution!r}; expected uniform or normal", key="distribution")
    checked = topology.check_parts(parts)
    rng = np.random.default_rng(seed)
    out = {}
    for p in topology.parts:
        nominal = float(checked[p.name])
        t = tolerance_of(p, tolerances)
        if not math.isfinite(nominal) or nominal == 0 or t == 0:
            out[p.name] = np.full(draws, nominal)
            continue
        u = rng.uniform(-1.0, 1.0, draws) if distribution == "uniform" else rng.standard_normal(draws) / 3.0
        out[p.name] = nominal * (1.0 + t * u)
    return out


# ----------------------------------------------------------------------------------- percentiles


def _select(x: np.ndarray, ks: list[int]) -> None:
    """Partition x along its last axis so every k in ks holds its order statistic.

    One kth per call, splitting left and right views recursively: numpy's partition with a list
    of kth is several times slower than this for a few kth over long rows.
    """
    if not ks:
        return
    mid = len(ks) // 2
    k = ks[mid]
    x.partition(k, axis=-1)
    _select(x[..., :k], ks[:mid])
    _select(x[..., k + 1:], [j - k - 1 for j in ks[mid + 1:]])


def _order_stats(x: np.ndarray, ks: np.ndarray) -> dict[int, np.ndarray]:
    """Order statistics ``ks`` and each k−1 along the last axis; x is reordered in place."""
    n = x.shape[-1]
    his = [int(k) for k in np.unique(np.clip(ks, 0, n - 1))]
    _select(x, his)
    out: dict[int, np.ndarray] = {}
    prev = -1
    for k in his:
        out[k] = x[..., k].copy()
        if k - 1 > prev:
            out[k - 1] = np.max(x[..., prev + 1:k], axis=-1)
        prev = k
    return out


def percentiles(x: np.ndarray, q: Sequence[float], transform=None) -> np.ndarray:
    """Percentiles ``q`` (0–100) of x along its last axis, as ``np.percentile(transform(x), q)``
    for a monotone increasing ``transform`` (applied to the selected order statistics only).
    Reorders x in place. Returns shape (len(q),) + x.shape[:-1]."""
    n = x.shape[-1]
    h = np.asarray(q, dtype=float) / 100.0 * (n - 1)
    lo = np.floor(h).astype(int)
    hi = np.minimum(lo + 1, n - 1)
    frac = h - lo
    stats = _order_stats(x, hi)
    tf = transform or (lambda v: v)
    rows = []
    for lo_i, hi_i, fr in zip(lo, hi, frac):
        a = tf(stats[int(lo_i)])
        b = tf(stats[int(hi_i)])
        rows.append(a + fr * (b - a))
    return np.array(rows)


# ----------------------------------------------------------------------------------- Monte Carlo


@dataclass(frozen=True)
class MonteCarloResult:
    """Percentile bands of F(j2πf) and of the design quantities. Gains in dB, phases in degrees."""

    f_hz: np.ndarray
    percentiles: tuple
    gain_db: np.ndarray       # (len(percentiles), freqs)
    phase_deg: np.ndarray     # (len(percentiles), freqs)
    nominal_gain_db: np.ndarray
    nominal_phase_deg: np.ndarray
    parameters: dict          # name -> {"nominal": x, "percentiles": [..]}
    draws: int
    seed: int
    distribution: str
    tolerances: dict

    def spread(self) -> dict:
        """Largest deviation of the outer percentiles from nominal over the band (dB, deg)."""
        return {"gain_db": float(np.max(np.abs(self.gain_db[[0, -1]] - self.nominal_gain_db))),
                "phase_deg": float(np.max(np.abs(self.phase_deg[[0, -1]] - self.nominal_phase_deg)))}

    def summary(self) -> dict:
        return {"draws": self.draws, "seed": self.seed, "distribution": self.distribution,
                "tolerances": self.tolerances, "percentiles": list(self.percentiles),
                "band_hz": [float(self.f_hz[0]), float(self.f_hz[-1])], "spread": self.spread(),
                "parameters": self.parameters}


def _split_poly(coeffs: list, w: np.ndarray, dtype) -> tuple[list, list]:
    """Terms (column (B,1), coefficient row (1,D)) for the real and imaginary parts at s = jw;
    identically zero coefficients are skipped."""
    deg = len(coeffs) - 1
    re_terms, im_terms = [], []
    for i, c in enumerate(coeffs):
        row = np.asarray(c)
        if not np.any(row):
            continue
        k = deg - i
        col = (w ** k * (1 if (k // 2) % 2 == 0 else -1)).astype(dtype)[:, None]
        (re_terms if k % 2 == 0 else im_terms).append((col, row.reshape(1, -1)))
    return re_terms, im_terms


def _eval(terms, shape, dtype):
    if not terms:
        return np.zeros(shape, dtype=dtype)
    acc = terms[0][0] * terms[0][1]
    for col, row in terms[1:]:
        acc += col * row
    return np.broadcast_to(acc, shape)


def response_ratio_parts(num: list, den: list, w: np.ndarray, h_nominal: np.ndarray, *,
                         block_f: int = 8, block_d: int = 8192, dtype=np.float32) -> tuple[np.ndarray, np.ndarray, bool]:
    """For all draws: |H/H_nom|² and the phase deviation proxy tan(∠H − ∠H_nom), arrays (freqs, draws).

    Returns (gain_ratio_sq, tan_dev, ok) where ``ok`` is False if any phase deviation reaches ±90°
    (then the caller uses the exact path). The arithmetic runs in ``dtype``: float32 by default,
    which bench/circuit.py measures against float64 (percentile bands agree to about 1e-5 dB and
    1e-5°, far inside the 0.01 dB allowed); pass ``np.float64`` for the exact path.
    """
    d = np.broadcast_shapes(*[np.shape(c) for c in list(num) + list(den)])[0]
    nf = w.size
    gain = np.empty((nf, d), dtype=dtype)
    tan = np.empty((nf, d), dtype=dtype)
    # scale each polynomial by its largest coefficient magnitude (keeps float32 far from overflow)
    def _rows(coeffs):
        arr = [np.broadcast_to(np.asarray(c, dtype=float), (d,)) for c in coeffs]
        return [a.astype(dtype) for a in arr]
    num_r = _rows(num)
    den_r = _rows(den)
    inv_nom = 1.0 / h_nominal
    ok = True
    for f0 in range(0, nf, block_f):
        fs = slice(f0, min(nf, f0 + block_f))
        wb = w[fs]
        cr = inv_nom[fs].real.astype(dtype)[:, None]
        ci = inv_nom[fs].imag.astype(dtype)[:, None]
        for d0 in range(0, d, block_d):
            ds = slice(d0, min(d, d0 + block_d))
            shape = (wb.size, ds.stop - ds.start)
            nre, nim = _split_poly([c[ds] for c in num_r], wb, dtype)
            dre, dim = _split_poly([c[ds] for c in den_r], wb, dtype)
            nr, ni = _eval(nre, shape, dtype), _eval(nim, shape, dtype)
            dr, di = _eval(dre, shape, dtype), _eval(dim, shape, dtype)
            pr = nr * dr
            pr += ni * di
            pi = ni * dr
            pi -= nr * di
            qr = pr * cr
            qr -= pi * ci
            qi = pr * ci
            qi += pi * cr
            d2 = dr * dr
            d2 += di * di
            d2 *= d2
            g = qr * qr
            g += qi * qi
            np.divide(g, d2, out=gain[fs, ds])
            np.divide(qi, qr, out=tan[fs, ds])
            if ok and not np.all(qr > 0):
                ok = False
    return gain, tan, ok


def monte_carlo(topology, parts: Mapping[str, float], tolerances: Mapping[str, float], f_hz, *, draws: int = 10000,
                seed: int = 1, distribution: str = "uniform", q: Sequence[float] = (0.5, 50.0, 99.5),
                path: str = "controller", dtype=np.float32) -> MonteCarloResult:
    """Monte Carlo of the topology's F(j2πf) with part tolerances (see the module docstring).

    ``dtype``: arithmetic of the per-draw response ratios (float32 default; np.float64 exact)."""
    f = np.asarray(f_hz, dtype=float)
    drawn = draw_parts(topology, parts, tolerances, draws, seed, distribution)
    checked = {k: np.asarray([float(v)]) for k, v in topology.check_parts(parts).items()}
    h_nom = topology.response(checked, f, path=path)[0]
    nom_db = 20 * np.log10(np.abs(h_nom))
    nom_deg = np.degrees(np.unwrap(np.angle(h_nom)))
    with np.errstate(invalid="ignore"):
        num, den = (topology.setpoint_coefficients(drawn) if path == "setpoint" else topology.coefficients(drawn))
    w = 2 * np.pi * f
    gain, tan, ok = response_ratio_parts(num, den, w, h_nom, dtype=dtype)
    g_pct = percentiles(gain, q, transform=lambda v: 10 * np.log10(v.astype(float))) + nom_db
    if ok:
        p_pct = percentiles(tan, q, transform=lambda v: np.degrees(np.arctan(v.astype(float)))) + nom_deg
    else:  # exact path: the phase deviation reaches ±90° somewhere
        h = topology.response(drawn, f, path=path)
        dev = np.degrees(np.angle(h / h_nom)).T.copy()
        p_pct = percentiles(dev, q) + nom_deg
    params = {}
    with np.errstate(divide="ignore", invalid="ignore"):
        pvals = topology.parameters(drawn)
        pnom = topology.parameters(checked)
    for name, values in pvals.items():
        arr = np.broadcast_to(np.asarray(values, dtype=float), (draws,))
        if not np.all(np.isfinite(arr)):
            continue
        params[name] = {"nominal": float(np.asarray(pnom[name]).ravel()[0]),
                        "percentiles": [float(x) for x in np.percentile(arr, q)]}
    return MonteCarloResult(f, tuple(q), g_pct, p_pct, nom_db, nom_deg, params, int(draws), int(seed), distribution,
                            dict(tolerances))


# ----------------------------------------------------------------------------------- worst case


@dataclass(frozen=True)
class WorstCase:
    """Worst-case corners: at each frequency every part at the tolerance edge that pushes the gain
    (or phase) furthest, chosen from the sign of its sensitivity, then evaluated exactly.

    ``sensitivity_db[part]`` / ``sensitivity_deg[part]``: change of gain (dB) / phase (deg) per
    +1 % change of that part, over ``f_hz``. ``parameters[name] = (low, high)``.
    """

    f_hz: np.ndarray
    gain_db_low: np.ndarray
    gain_db_high: np.ndarray
    phase_deg_low: np.ndarray
    phase_deg_high: np.ndarray
    nominal_gain_db: np.ndarray
    nominal_phase_deg: np.ndarray
    sensitivity_db: dict
    sensitivity_deg: dict
    parameters: dict

    def spread(self) -> dict:
        return {"gain_db": float(max(np.max(self.gain_db_high - self.nominal_gain_db),
                                     np.max(self.nominal_gain_db - self.gain_db_low))),
                "phase_deg": float(max(np.max(self.phase_deg_high - self.nominal_phase_deg),
                                       np.max(self.nominal_phase_deg - self.phase_deg_low)))}

    def summary(self) -> dict:
        return {"spread": self.spread(), "parameters": {k: list(v) for k, v in self.parameters.items()},
                "largest_gain_sensitivity_db_per_percent": {k: float(np.max(np.abs(v)))
                                                            for k, v in self.sensitivity_db.items()}}


def worst_case(topology, parts: Mapping[str, float], tolerances: Mapping[str, float], f_hz) -> WorstCase:
    """Worst-case corners of gain, phase and design quantities (see :class:`WorstCase`)."""
    f = np.asarray(f_hz, dtype=float)
    checked = {k: float(v) for k, v in topology.check_parts(parts).items()}
    names = [p.name for p in topology.parts if math.isfinite(checked[p.name]) and checked[p.name] > 0
             and tolerance_of(p, tolerances) > 0]
    tol = {p.name: tolerance_of(p, tolerances) for p in topology.parts}
    base = {k: np.array([v]) for k, v in checked.items()}
    h0 = topology.response(base, f)[0]
    delta = 1e-4
    sens_log = {}
    for name in names:
        up = dict(base)
        dn = dict(base)
        up[name] = base[name] * math.exp(delta)
        dn[name] = base[name] * math.exp(-delta)
        sens_log[name] = (np.log(topology.response(up, f)[0] / topology.response(dn, f)[0])) / (2 * delta)
    nf = f.size

    def corner(sign_of: dict) -> np.ndarray:
        p = {k: np.full(nf, v[0]) for k, v in base.items()}
        for name in names:
            p[name] = checked[name] * (1 + tol[name] * sign_of[name])
        num, den = topology.coefficients(p)
        s = 2j * np.pi * f
        n = sum(np.asarray(c) * s ** (len(num) - 1 - i) for i, c in enumerate(num))
        d = sum(np.asarray(c) * s ** (len(den) - 1 - i) for i, c in enumerate(den))
        return n / d

    nom_db = 20 * np.log10(np.abs(h0))
    nom_deg = np.degrees(np.unwrap(np.angle(h0)))
    results = {}
    for label, part_of in (("gain", lambda z: z.real), ("phase", lambda z: z.imag)):
        for direction in (1, -1):
            h = corner({n: direction * np.sign(part_of(sens_log[n])) for n in names})
            results[(label, direction)] = h
    g_hi = 20 * np.log10(np.abs(results[("gain", 1)]))
    g_lo = 20 * np.log10(np.abs(results[("gain", -1)]))
    ph_hi = nom_deg + np.degrees(np.angle(results[("phase", 1)] / h0))
    ph_lo = nom_deg + np.degrees(np.angle(results[("phase", -1)] / h0))
    params = {}
    pnom = {k: float(np.asarray(v).ravel()[0]) for k, v in topology.parameters(base).items()}
    for pname, pv in pnom.items():
        if not math.isfinite(pv) or pv == 0:
            continue
        sens = {}
        for name in names:
            up = dict(base)
            up[name] = base[name] * math.exp(delta)
            with np.errstate(divide="ignore", invalid="ignore"):
                v = float(np.asarray(topology.parameters(up)[pname]).ravel()[0])
            sens[name] = np.sign(v - pv) if math.isfinite(v) else 0.0
        vals = []
        for direction in (1, -1):
            p = dict(base)
            for name in names:
                p[name] = base[name] * (1 + tol[name] * direction * sens[name])
            with np.errstate(divide="ignore", invalid="ignore"):
                vals.append(float(np.asarray(topology.parameters(p)[pname]).ravel()[0]))
        params[pname] = (min(vals), max(vals))
    ln10 = math.log(10)
    return WorstCase(f, np.minimum(g_lo, g_hi), np.maximum(g_lo, g_hi), np.minimum(ph_lo, ph_hi),
                     np.maximum(ph_lo, ph_hi), nom_db, nom_deg,
                     {k: v.real * 20 / ln10 * 0.01 for k, v in sens_log.items()},
                     {k: np.degrees(v.imag) * 0.01 for k, v in sens_log.items()}, params)
