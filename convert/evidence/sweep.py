"""Bench sweep evidence: a measured frequency response, read from CSV and compared with a model.

:func:`read_sweep` reads ``frequency (Hz),gain (dB),phase (deg)`` (units honoured: Hz, kHz, MHz
or rad/s; dB or V/V; deg or rad), with optional ``coherence`` and repeated gain/phase columns
(several measurements of the same points). :func:`check_sweep` compares it with a form's model
response: the error at each measured point, the measurement's own noise, the band where the
measurement can be trusted, and the figures the verdict judges.

The noise of each point (1 σ, gain in dB and phase in degrees) comes, in this order, from the
spread of repeated columns (standard error of their mean), from the coherence with the number of
averages the analyzer used (random error sqrt(1 − γ²)/(|γ|·sqrt(2·n)) of the gain and phase
estimates — Bendat & Piersol, *Random Data*, from memory), or, with neither, from the scatter of
the error curve itself (robust second differences: a smooth deviation such as a drifted part
does not count as noise). The source is stated with the figures.

A point is trusted when its coherence (if given) is at least ``min_coherence`` and its 2 σ noise
is below the criterion limit (gain and phase); the verdict judges |error| + 2 σ at the
trusted points, and fails when trusted points do not span the criteria band — a measurement
that cannot show agreement never passes.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from convert.errors import InputError
from convert.evidence.csvtable import Role, chunks, layout, require_rising
from convert.compare.frequency import unwrapped_phase_error_deg, response_seen_from_loop
from convert.compare.pair import spans_where
from convert.values import format_value
from convert.given import given_controller
from convert.compare.verdict import judge
from convert.evidence.fit import fit_sweep
from convert.evidence.models import parametric_model

SWEEP_ROLES = (
    Role("frequency", ("frequency", "freq", "f"), ("frequency",), "hz"),
    Role("gain", ("gain", "magnitude", "mag", "amplitude"), ("gain", "ratio"), "db", repeats=True),
    Role("phase", ("phase",), ("angle",), "deg", repeats=True),
    Role("coherence", ("coherence", "coh"), ("plain",), "1", required=False),
)
DB_PER_NEPER = 20 / np.log(10)
#: default lowest coherence of a trusted point (common practice for analyzer sweeps)
MIN_COHERENCE = 0.9


@dataclass(frozen=True)
class Sweep:
    """A measured frequency response. ``f_hz`` rising; ``response`` the complex mean of the
    repeats; ``lines`` the file line of each point; ``noise_db`` / ``noise_deg`` the 1 σ noise
    of each point where the file tells it (else None) and ``noise_source`` how it was found."""

    path: Path
    f_hz: np.ndarray
    response: np.ndarray
    lines: np.ndarray
    coherence: np.ndarray | None
    repeats: int
    noise_db: np.ndarray | None
    noise_deg: np.ndarray | None
    noise_source: str
    columns: dict = field(default_factory=dict)


def read_sweep(
    path: str | Path,
    *,
    columns: dict | None = None,
    units: dict | None = None,
    decimal: str = ".",
    averages: int | None = None,
    option: str = "columns",
) -> Sweep:
    """Read a sweep CSV (see the module docstring). ``averages``: the analyzer's number of
    averages, which turns a coherence column into a noise figure."""
    path = Path(path)
    lay = layout(path, SWEEP_ROLES, columns=columns, units=units, decimal=decimal, option=option)
    if len(lay.columns["gain"]) != len(lay.columns["phase"]):
        raise InputError(
            f"{len(lay.columns['gain'])} gain columns but {len(lay.columns['phase'])} phase columns; "
            "each repeat needs both",
            where=f"{path.name}:1",
        )
    parts = list(chunks(lay))
    if not parts:
        raise InputError("no data rows after the header", where=f"{path.name}:2")
    lines = np.concatenate([p[0] for p in parts])
    data = {role: np.concatenate([p[1][role] for p in parts]) for role in parts[0][1]}
    f = data["frequency"]
    fcol = lay.first("frequency")
    bad = np.flatnonzero(~(f > 0))
    if bad.size:
        raise InputError(
            f"column {fcol.header!r}: frequencies must be positive, found {f[bad[0]] / fcol.factor:g}",
            where=f"{path.name}:{lines[bad[0]]}",
        )
    require_rising(f, fcol, "frequencies", path, lines)
    if f.size < 3:
        raise InputError(f"a sweep needs at least 3 points, found {f.size}", where=f"{path.name}:{lines[-1]}")
    gain = data["gain"].reshape(f.size, -1)
    phase = data["phase"].reshape(f.size, -1)
    ln_gain = np.empty_like(gain)
    for j, col in enumerate(lay.columns["gain"]):
        if col.quantity == "ratio":
            nonpos = np.flatnonzero(~(gain[:, j] > 0))
            if nonpos.size:
                raise InputError(
                    f"column {col.header!r}: a gain ratio must be positive, found {gain[nonpos[0], j]:g}",
                    where=f"{path.name}:{lines[nonpos[0]]}",
                )
            ln_gain[:, j] = np.log(gain[:, j])
        else:
            ln_gain[:, j] = gain[:, j] / DB_PER_NEPER
    coh = data.get("coherence")
    if coh is not None:
        ccol = lay.first("coherence")
        bad = np.flatnonzero((coh < 0) | (coh > 1))
        if bad.size:
            raise InputError(
                f"column {ccol.header!r}: coherence lies between 0 and 1, found {coh[bad[0]]:g}",
                where=f"{path.name}:{lines[bad[0]]}",
            )
    # the repeats' mean as a complex response; phases unwrapped against the first repeat
    ph = phase.copy()
    for j in range(1, ph.shape[1]):
        ph[:, j] = ph[:, 0] + np.angle(np.exp(1j * (ph[:, j] - ph[:, 0])))
    mean_ln, mean_ph = ln_gain.mean(axis=1), ph.mean(axis=1)
    response = np.exp(mean_ln + 1j * mean_ph)
    n = ln_gain.shape[1]
    noise_db = noise_deg = None
    source = "estimated from the scatter of the error curve (no repeats, no coherence with averages)"
    if n >= 2:
        noise_db = ln_gain.std(axis=1, ddof=1) / np.sqrt(n) * DB_PER_NEPER
        noise_deg = np.degrees(ph.std(axis=1, ddof=1) / np.sqrt(n))
        source = f"spread of {n} repeated measurements (standard error of their mean)"
    elif coh is not None and averages is not None:
        if averages < 1:
            raise InputError(f"expected a whole number of averages of at least 1, found {averages!r}", key="averages")
        with np.errstate(divide="ignore"):
            eps = np.sqrt(1 - coh) / (np.sqrt(coh) * np.sqrt(2 * averages))
        noise_db = eps * DB_PER_NEPER
        noise_deg = np.degrees(eps)
        source = f"coherence with {averages} averages (random error of the gain and phase estimates)"
    return Sweep(
        path,
        f,
        response,
        lines,
        coh,
        n,
        noise_db,
        noise_deg,
        source,
        {k: [c.header for c in v] for k, v in lay.columns.items()},
    )


def scatter_sigma(values: np.ndarray) -> float:
    """1 σ of the noise on a smooth curve from its second differences (robust: 1.4826·MAD/√6)."""
    v = np.asarray(values, dtype=float)
    if v.size < 5:
        return float("nan")
    d2 = v[2:] - 2 * v[1:-1] + v[:-2]
    return float(1.4826 * np.median(np.abs(d2 - np.median(d2))) / np.sqrt(6))


@dataclass(frozen=True)
class SweepCheck:
    """The measurement against one model. Arrays over the sweep's points; errors are measured
    relative to the model (gain dB, phase deg, unwrapped); ``trusted`` marks the points the
    verdict uses; ``figures`` are what the verdict judges (|error| + 2 σ, worst trusted point in
    the band) with notes."""

    f_hz: np.ndarray
    gain_error_db: np.ndarray
    phase_error_deg: np.ndarray
    noise_db: np.ndarray
    noise_deg: np.ndarray
    noise_source: str
    trusted: np.ndarray
    trusted_bands: list
    in_band: np.ndarray
    covers_band: bool
    figures: dict
    notes: list

    def summary(self) -> dict:
        return {
            "noise_source": self.noise_source,
            "trusted_bands_hz": [list(b) for b in self.trusted_bands],
            "covers_band": self.covers_band,
            "figures": self.figures,
            "notes": list(self.notes),
            "points": [
                {
                    "f_hz": float(f),
                    "gain_error_db": float(g),
                    "phase_error_deg": float(p),
                    "noise_db": float(nd),
                    "noise_deg": float(np_),
                    "trusted": bool(t),
                }
                for f, g, p, nd, np_, t in zip(
                    self.f_hz, self.gain_error_db, self.phase_error_deg, self.noise_db, self.noise_deg, self.trusted
                )
            ],
        }


def check_sweep(
    sweep: Sweep,
    model: np.ndarray,
    band_hz: tuple[float, float],
    *,
    gain_limit_db: float,
    phase_limit_deg: float,
    min_coherence: float = MIN_COHERENCE,
    inverted: bool = False,
) -> SweepCheck:
    """Compare ``sweep`` with ``model`` (the form's complex response at ``sweep.f_hz``; the
    controller, error → output). ``inverted``: the bench measured −model (an inverting stage
    read at its output)."""
    ref = -model if inverted else model
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = sweep.response / ref
    gerr = 20 * np.log10(np.abs(ratio))
    perr = unwrapped_phase_error_deg(ratio)
    if np.isfinite(perr).any() and abs(np.nanmedian(perr)) > 180:  # unwrapping started a turn away
        perr = perr - 360 * np.round(np.nanmedian(perr) / 360)
    notes = []
    if sweep.noise_db is not None:
        nd, np_ = sweep.noise_db, sweep.noise_deg
        source = sweep.noise_source
    else:
        sg, sp = scatter_sigma(gerr), scatter_sigma(perr)
        # equal complex noise moves ln-gain and phase (rad) alike: take the larger of the two
        s = max(sg / DB_PER_NEPER, np.radians(sp)) if np.isfinite(sg) and np.isfinite(sp) else np.inf
        nd = np.full(sweep.f_hz.size, s * DB_PER_NEPER)
        np_ = np.full(sweep.f_hz.size, np.degrees(s))
        source = sweep.noise_source + (
            f": {s * DB_PER_NEPER:.3g} dB, {np.degrees(s):.3g} deg"
            if np.isfinite(s)
            else ": too few points (fewer than 5) to estimate; nothing is trusted"
        )
    lo, hi = band_hz
    in_band = (sweep.f_hz >= lo) & (sweep.f_hz <= hi)
    trusted = (2 * nd < gain_limit_db) & (2 * np_ < phase_limit_deg) & np.isfinite(gerr) & np.isfinite(perr)
    if sweep.coherence is not None:
        trusted &= sweep.coherence >= min_coherence
    bands = _runs(sweep.f_hz, trusted)
    covered = bool(sweep.f_hz[0] <= lo and sweep.f_hz[-1] >= hi and in_band.any() and trusted[in_band].all())
    use = trusted & in_band
    figures: dict = {}
    if use.any():
        figures["max_gain_error_db"] = float(np.max(np.abs(gerr[use]) + 2 * nd[use]))
        figures["max_phase_error_deg"] = float(np.max(np.abs(perr[use]) + 2 * np_[use]))
        for key in ("max_gain_error_db", "max_phase_error_deg"):
            figures[f"{key}_note"] = "measured |error| + 2σ noise, worst trusted point in the band"
    if not covered:
        why = _coverage(sweep.f_hz, trusted, in_band, band_hz)
        notes.append(f"the measurement cannot show agreement over the whole band: {why}")
        for key in ("max_gain_error_db", "max_phase_error_deg"):
            figures[key] = float("inf")
            figures[f"{key}_note"] = f"band not covered by trusted points ({why})"
    if np.isfinite(perr).any() and abs(np.nanmedian(perr)) > 150:
        notes.append(
            "the measured phase is about 180° from the model: if the bench read an inverting stage at "
            "its output, say the measurement is inverted (--inverted / inverted = true)"
        )
    return SweepCheck(sweep.f_hz, gerr, perr, nd, np_, source, trusted, bands, in_band, covered, figures, notes)


def _runs(f: np.ndarray, ok: np.ndarray) -> list[tuple[float, float]]:
    return spans_where(f, ok)


def _coverage(f, trusted, in_band, band_hz) -> str:
    lo, hi = band_hz
    if f[0] > lo:
        return f"the sweep starts at {format_value(f[0], 'hz')}, above the band's low end {format_value(lo, 'hz')}"
    if f[-1] < hi:
        return f"the sweep ends at {format_value(f[-1], 'hz')}, below the band's top {format_value(hi, 'hz')}"
    bad = f[in_band & ~trusted]
    if bad.size:
        return (
            f"{bad.size} point(s) in the band are not trusted (noise or coherence), from "
            f"{format_value(bad[0], 'hz')} to {format_value(bad[-1], 'hz')}"
        )
    return "no measured point in the band"


@dataclass
class SweepEvidence:
    """A sweep checked against one form's model, the verdict on it, and (optionally) the fit."""

    sweep: Sweep
    model: np.ndarray  # the form's response at the sweep's points
    check: SweepCheck
    verdict: object  # convert.compare.verdict.Verdict
    band_hz: tuple[float, float]
    band_default: bool
    fit: object = None  # convert.evidence.fit.FitResult

    def as_dict(self) -> dict:
        out = {
            "file": str(self.sweep.path),
            "points": int(self.sweep.f_hz.size),
            "repeats": self.sweep.repeats,
            "columns": self.sweep.columns,
            "band_hz": list(self.band_hz),
            "band_default": self.band_default,
            "check": self.check.summary(),
            "verdict": self.verdict.overall,
            "judgements": [j.as_dict() for j in self.verdict.judgements if j.status != "not set"],
        }
        out["fit"] = self.fit.as_dict() if self.fit is not None else None
        return out


def form_response(given, f_hz, case=None) -> np.ndarray:
    """The response of a given form as it runs, at ``f_hz`` (a digital form with its zero-order
    hold and computation delay) — what a bench sweep of it measures."""
    ctrl = given_controller(given, case).controller
    delay = given.delay_for() if given.form in ("digital", "pid") else 0.0
    return response_seen_from_loop(ctrl, f_hz, delay_s=delay, via="zpk")


def sweep_evidence(
    given,
    sweep: Sweep,
    *,
    band_hz=None,
    limits: dict | None = None,
    inverted: bool = False,
    min_coherence: float = MIN_COHERENCE,
    fit: bool = False,
    fit_names=None,
    case=None,
) -> SweepEvidence:
    """Check ``sweep`` against the model of ``given`` (a :class:`convert.given.GivenForm`) over
    ``band_hz`` (default: the sweep's own range) with the gain/phase ``limits``
    (``max_gain_error_db``, ``max_phase_error_deg``; 1 dB and 5° when not set); fit the model's
    values when ``fit``. ``case`` (optional) gives a netlist card's analysis its band and rate."""
    limits = dict(limits or {})
    gl = limits.get("max_gain_error_db") or 1.0
    pl = limits.get("max_phase_error_deg") or 5.0
    default = band_hz is None
    band = (float(sweep.f_hz[0]), float(sweep.f_hz[-1])) if default else tuple(band_hz)
    if given.form in ("digital", "pid") and sweep.f_hz[-1] >= given.data["fs_hz"] / 2:
        raise InputError(
            f"the sweep reaches {sweep.f_hz[-1]:g} Hz, at or above the firmware's Nyquist frequency "
            f"({given.data['fs_hz'] / 2:g} Hz); keep the sweep below it",
            where=str(sweep.path.name),
        )
    model = form_response(given, sweep.f_hz, case)
    check = check_sweep(
        sweep, model, band, gain_limit_db=gl, phase_limit_deg=pl, min_coherence=min_coherence, inverted=inverted
    )
    criteria = {"max_gain_error_db": gl, "max_phase_error_deg": pl}
    verdict = judge(criteria, {"measurement": check.figures}, has_plant=False)
    result = SweepEvidence(sweep, model, check, verdict, band, default)
    if fit:
        pm = parametric_model(given)
        result.fit = fit_sweep(
            pm,
            sweep.f_hz,
            sweep.response,
            check.noise_db,
            check.noise_deg,
            names=fit_names,
            inverted=inverted,
            noise_source=check.noise_source,
        )
    return result
