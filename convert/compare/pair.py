"""Two forms compared without a case file: the reference A against the form B.

:func:`compare_pair` writes the comparison as an in-memory case (A is the source, B one given
target, the plant and criteria from the caller) and runs the one pipeline
(:func:`convert.pipeline.run_pipeline`), so `loopshift compare` reports exactly the
figures `loopshift report` would. On top it gives what a quick check shows: the gain and phase
error at spot frequencies, the band where the two agree, and, for a digital B, the error of its
coefficients alone (no hold, no delay).

Frequencies in Hz; gain errors in dB (B relative to A), phase errors in degrees (B minus A).
"""

from __future__ import annotations

import math

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from convert.case import Case, Criteria, Signals, build_form
from convert.compare.frequency import ResponseError, compare_responses, log_grid, response_seen_from_loop
from convert.compare.loop import loop_margins
from convert.given import as_source, given_controller
from convert.pipeline import plant_from_words, run_pipeline

#: Used when the caller sets no gain or phase limit (the agreement limits `digital` uses too).
DEFAULT_GAIN_LIMIT_DB = 1.0
DEFAULT_PHASE_LIMIT_DEG = 5.0


@dataclass(frozen=True)
class _PairCase(Case):
    """A case written by :func:`compare_pair`: errors name the option or spec, not a file line."""

    places: dict = field(default_factory=dict, compare=False, repr=False)

    def where(self, key: str) -> str:
        for prefix, label in self.places.items():
            if key == prefix or key.startswith(prefix + "."):
                return label
        return "command line"


@dataclass
class PairResult:
    """Everything `loopshift compare` shows (plain data; rendering lives in the CLI)."""

    results: object  # CaseResults
    a: object  # GivenForm
    b: object  # GivenForm
    band_hz: tuple[float, float]
    band_default: bool
    error: ResponseError  # B as it runs (hold, delay) against A as the loop sees it, on the band grid
    coefficients_error: ResponseError | None  # digital B: C_B(e^jωT) alone against A
    spots: list[dict]
    agreement: list[tuple[float, float]]
    agreement_grid_hz: tuple[float, float]
    gain_limit_db: float
    phase_limit_deg: float
    notes: list[str] = field(default_factory=list)

    @property
    def realization(self):
        return self.results.realizations[0]

    @property
    def exit_code(self) -> int:
        return self.results.exit_code


def default_band_hz(*controllers) -> tuple[float, float]:
    """A decade below the lowest corner to a decade above the highest of all ``controllers``
    (1 mHz .. 1 kHz when none has a corner), kept below 0.999 of the lowest Nyquist frequency."""
    corners = []
    for c in controllers:
        k = c.corner_frequencies_hz()
        corners += [f for f in k.get("zeros", []) + k.get("poles", []) if f > 0]
    low, high = (min(corners) / 10, max(corners) * 10) if corners else (1e-3, 1e3)
    nyq = [c.fs_hz / 2 for c in controllers if c.is_digital]
    if nyq:
        high = min(high, 0.999 * min(nyq))
        if not low < high / 10:
            low = high / 100
    return float(low), float(high)


def _widen_to_loop(band_hz, a_ctrl, b_ctrl, plant) -> tuple[tuple[float, float], str]:
    """The default band widened to half a decade (×√10) around the gain crossover of A's loop with
    the plant, where a difference between A and B moves the phase margin (the gain margin and the
    sensitivity peak have their own criteria, judged on both loops); kept below 0.999 of the lowest
    Nyquist frequency. Returns (band, note)."""
    m = loop_margins(a_ctrl, plant.model, plant.dead_time_s)
    where = [f for f in (m.crossover_hz,) if f and math.isfinite(f)]
    if not where:
        return band_hz, ""
    half = math.sqrt(10.0)
    low, high = min(band_hz[0], min(where) / half), max(band_hz[1], max(where) * half)
    nyq = [c.fs_hz / 2 for c in (a_ctrl, b_ctrl) if c.is_digital]
    if nyq:
        high = min(high, 0.999 * min(nyq))
    if (low, high) == tuple(band_hz):
        return band_hz, ""
    return (float(low), float(high)), (
        f"band widened to half a decade around the crossover of A's loop with the plant ({where[0]:.4g} Hz)"
    )


def _hold_lag_note(r, band_hz, phase_limit_deg: float) -> str:
    """Without a plant the default band knows nothing of the loop: say how much phase a digital
    B's hold and delay take at the band's top and where they alone would reach the phase limit
    (their lag grows in proportion to frequency)."""
    if not r.controller.is_digital:
        return ""
    top = np.array([float(band_hz[1])])
    with np.errstate(all="ignore"):
        ratio = complex(r.seen(top)[0] / r.controller.frequency_response(top, via="zpk")[0])
    lag = -math.degrees(math.atan2(ratio.imag, ratio.real))
    if not (math.isfinite(lag) and lag > 0):
        return ""
    reach = float(band_hz[1]) * phase_limit_deg / lag
    return (
        f"no plant: the default band cannot know where the loop crosses over. B's sample-and-hold and delay "
        f"lag {lag:.3g} deg at the band's top ({band_hz[1]:.4g} Hz) and would alone reach the phase limit "
        f"({phase_limit_deg:g} deg) near {reach:.4g} Hz; give --plant or --band to compare where the loop works"
    )


def _spot_frequencies(band_hz) -> np.ndarray:
    lo, hi = band_hz
    out = [lo]
    for decade in range(int(np.floor(np.log10(lo))), int(np.ceil(np.log10(hi))) + 1):
        for m in (1.0, 2.0, 5.0):
            f = m * 10.0**decade
            if lo * 1.05 < f < hi / 1.05:
                out.append(f)
    out.append(hi)
    return np.array(out)


def spans_where(f: np.ndarray, ok: np.ndarray) -> list[tuple[float, float]]:
    """The (first, last) frequencies of each run of consecutive points where ``ok`` holds."""
    out = []
    start = None
    for i, good in enumerate(ok):
        if good and start is None:
            start = i
        if (not good or i == len(ok) - 1) and start is not None:
            end = i if good else i - 1
            out.append((float(f[start]), float(f[end])))
            start = None
    return out


def compare_pair(
    a,
    b,
    *,
    band_hz: tuple[float, float] | None = None,
    plant_expression: str | None = None,
    dead_time_s: float = 0.0,
    output_range: tuple[float, float] | None = None,
    limits: dict | None = None,
    draws: int | None = None,
    names: dict[str, str] | None = None,
) -> PairResult:
    """Compare B (a :class:`convert.given.GivenForm`) with the reference A (another one).

    ``band_hz`` (Hz) defaults to :func:`default_band_hz` of both forms; ``plant_expression`` (in s)
    and ``dead_time_s`` (s) add the loop checks; ``output_range`` clamps both loops' outputs;
    ``limits`` maps criterion keys of :class:`convert.case.Criteria` to limits (gain and phase
    errors default to :data:`DEFAULT_GAIN_LIMIT_DB` / :data:`DEFAULT_PHASE_LIMIT_DEG`).
    ``names`` says how the caller's user wrote each input, for error messages: keys ``"A"``,
    ``"B"``, ``"band"``, ``"plant"``, ``"dead time"`` (the command line gives its options, e.g.
    ``{"plant": "--plant"}``); each defaults to its key."""
    names = {k: k for k in ("A", "B", "band", "plant", "dead time")} | dict(names or {})
    source = as_source(a)
    a_ctrl = build_form(source).controller
    b_ctrl = given_controller(b).controller
    notes = []
    band_default = band_hz is None
    if band_default:
        band_hz = default_band_hz(a_ctrl, b_ctrl)
        notes.append(
            "band not given: a decade below the lowest corner of A and B to a decade above the highest"
            + (", below the Nyquist frequency" if a_ctrl.is_digital or b_ctrl.is_digital else "")
        )

    plant = plant_from_words(plant_expression, dead_time_s, where=names["plant"], dead_where=names["dead time"])
    if band_default and plant is not None:
        band_hz, widened = _widen_to_loop(band_hz, a_ctrl, b_ctrl, plant)
        if widened:
            notes.append(widened)
    chosen = {k: v for k, v in (limits or {}).items() if v is not None}
    for key, default in (
        ("max_gain_error_db", DEFAULT_GAIN_LIMIT_DB),
        ("max_phase_error_deg", DEFAULT_PHASE_LIMIT_DEG),
    ):
        if key not in chosen:
            chosen[key] = default
            notes.append(
                f"{key.replace('_', ' ').replace(' db', ' (dB)').replace(' deg', ' (deg)')} not given: {default:g} used"
            )
    criteria = Criteria(band_hz=tuple(band_hz), **chosen)
    places = {
        "source": names["A"],
        f"target.given.{b.name}": names["B"],
        "criteria.band": names["band"],
        "plant": names["plant"],
    }
    case = _PairCase(
        path=Path("compare"),
        name="compare",
        title="A against B",
        description="",
        source=source,
        digital=None,
        circuit=None,
        plant=plant,
        signals=Signals(output_range=output_range),
        criteria=criteria,
        given=(b,),
        places=places,
    )
    results = run_pipeline(case, draws=draws).results
    r = results.realizations[0]
    band = results.band_f_hz
    ref = response_seen_from_loop(results.reference, band, via="zpk")
    gl, pl = criteria.max_gain_error_db, criteria.max_phase_error_deg
    error = compare_responses(
        ref,
        r.seen(band),
        band,
        gain_limit_db=gl,
        phase_limit_deg=pl,
        evaluate=lambda f: (response_seen_from_loop(results.reference, f, via="zpk"), r.seen(f)),
        forms=(results.reference, r.controller),
    )
    coef = None
    if r.controller.is_digital:
        coef = compare_responses(
            ref, r.controller.frequency_response(band, via="zpk"), band, gain_limit_db=gl, phase_limit_deg=pl
        )
    spots_f = _spot_frequencies(band_hz)
    ra, rb = response_seen_from_loop(results.reference, spots_f, via="zpk"), r.seen(spots_f)
    spot_err = compare_responses(ra, rb, spots_f, gain_limit_db=gl, phase_limit_deg=pl)
    spots = [
        {
            "f_hz": float(f),
            "gain_a_db": float(20 * np.log10(abs(x))),
            "gain_b_db": float(20 * np.log10(abs(y))),
            "gain_error_db": float(g),
            "phase_error_deg": float(p),
        }
        for f, x, y, g, p in zip(spots_f, ra, rb, spot_err.gain_error_db, spot_err.phase_error_deg)
    ]
    if band_default and plant is None:
        lag_note = _hold_lag_note(r, band_hz, pl)
        if lag_note:
            notes.append(lag_note)
    # the agreement band, looked for a decade beyond the compared band on each side
    nyq = [c.fs_hz / 2 for c in (results.reference, r.controller) if c.is_digital]
    wide_hi = band_hz[1] * 10 if not nyq else min(band_hz[1] * 10, 0.999 * min(nyq))
    wide = log_grid(band_hz[0] / 10, max(wide_hi, band_hz[1]), 100)
    werr = compare_responses(
        response_seen_from_loop(results.reference, wide, via="zpk"),
        r.seen(wide),
        wide,
        gain_limit_db=gl,
        phase_limit_deg=pl,
    )
    ok = (np.abs(np.nan_to_num(werr.gain_error_db, nan=np.inf)) <= gl) & (
        np.abs(np.nan_to_num(werr.phase_error_deg, nan=np.inf)) <= pl
    )
    return PairResult(
        results=results,
        a=a,
        b=b,
        band_hz=tuple(band_hz),
        band_default=band_default,
        error=error,
        coefficients_error=coef,
        spots=spots,
        agreement=spans_where(wide, ok),
        agreement_grid_hz=(float(wide[0]), float(wide[-1])),
        gain_limit_db=gl,
        phase_limit_deg=pl,
        notes=notes,
    )
