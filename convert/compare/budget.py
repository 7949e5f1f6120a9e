"""The error budget: each error source's own contribution, then the total.

A row compares a *candidate* response (the row's source switched on) with the row's *reference*
response (everything else the same), over the case's band:

* max |gain error| (dB) and max |phase error| (deg) over the band (via
  :func:`convert.compare.frequency.compare_responses`);
* where a plant is given, the change the source causes in the loop: phase margin (deg), gain
  margin (dB) and sensitivity peak (dB), candidate minus reference.

Rows with many candidate responses (Monte Carlo draws, shape (N, F)) report a percentile of the
per-draw figures, as the tolerance engine defines them (:mod:`convert.circuit.tolerance`:
absolute values for errors; for loop figures the percentile of |change| signed as the draw
nearest it). The circuit target builds those rows with :func:`drawn_row` from the engine's
chunked run. What "alone" means for each row is documented in docs/report.md
and repeated in each row's ``note``.

Pure functions over plain arrays: the caller evaluates the responses.
"""

from __future__ import annotations

from dataclasses import dataclass
from collections.abc import Sequence

import numpy as np

from convert.compare.frequency import axis_roots, compare_responses
from convert.circuit.tolerance import FIGURE_PERCENTILE, figures_of_responses

#: Row keys in table order, with their labels.
ROWS: tuple[tuple[str, str], ...] = (
    ("discretization", "Discretization method"),
    ("hold_and_delay", "Sample-and-hold and computation delay"),
    ("word_format", "Coefficient word format"),
    ("source_hold", "Digital source's own sample-and-hold, made analog"),
    ("series_rounding", "Rounding to series values"),
    ("tolerances", "Part tolerances"),
    ("derivative_filter", "Derivative filter"),
    ("opamp_gbw", "Op-amp gain-bandwidth"),
    ("card_parasitics", "Op-amp / parasitic poles left out of the card"),
    ("measured", "Measured deviation (bench sweep)"),
    ("total", "Total (everything on)"),
)
ROW_LABELS = dict(ROWS)
DIGITAL_ROWS = ("discretization", "hold_and_delay", "word_format", "derivative_filter")
CIRCUIT_ROWS = ("series_rounding", "tolerances", "derivative_filter", "opamp_gbw")


@dataclass(frozen=True)
class BudgetRow:
    """One line of the budget. ``applicable`` False rows carry only ``note`` (why not)."""

    key: str
    label: str
    applicable: bool
    note: str
    max_gain_error_db: float | None = None
    max_gain_error_at_hz: float | None = None
    max_phase_error_deg: float | None = None
    max_phase_error_at_hz: float | None = None
    delta_phase_margin_deg: float | None = None
    delta_gain_margin_db: float | None = None
    delta_sensitivity_peak_db: float | None = None
    percentile: float | None = None
    unstable_fraction: float | None = None  # draws whose closed loop is unstable (None: not counted)
    unbounded_note: str = ""

    def as_dict(self) -> dict:
        return dict(self.__dict__)


@dataclass(frozen=True)
class LoopSpec:
    """What a row needs for its loop figures: a dense grid (Hz) and the margins function
    ``margins(responses (N, F)) -> dict of arrays`` (see
    :func:`convert.compare.loop.margins_of_responses`)."""

    f_hz: np.ndarray
    margins: object


def not_applicable(key: str, why: str) -> BudgetRow:
    return BudgetRow(key=key, label=ROW_LABELS[key], applicable=False, note=f"not applicable: {why}")


def error_row(
    key: str,
    band_f_hz: Sequence[float],
    reference: np.ndarray,
    candidate: np.ndarray,
    *,
    note: str,
    loop: LoopSpec | None = None,
    loop_reference: np.ndarray | None = None,
    loop_candidate: np.ndarray | None = None,
    percentile: float | None = None,
    evaluate=None,
    forms=None,
) -> BudgetRow:
    """A budget row from responses on the band grid (``reference`` (F,), ``candidate`` (F,) or
    (N, F)) and, optionally, on the loop grid (``loop_reference`` (F2,), ``loop_candidate``
    (F2,) or (N, F2)) for the margin changes.

    ``evaluate(f) -> (reference, candidate)`` (single candidate) and ``forms`` = (reference
    controller, candidate controller or None) make the maxima grid-free and find roots on the axis
    (:func:`convert.compare.frequency.compare_responses`, the one routine). With draws, a root of
    the reference on the axis inside the band makes the row unbounded (no draw cancels it)."""
    f = np.asarray(band_f_hz, dtype=float)
    cand = np.atleast_2d(candidate)
    ref = np.asarray(reference, dtype=complex)
    with_loop = loop is not None and loop_reference is not None and loop_candidate is not None
    if cand.shape[0] > 1:  # draws: the tolerance engine's definitions, one place for them
        figs = figures_of_responses(
            key,
            f,
            ref,
            cand,
            percentile=FIGURE_PERCENTILE if percentile is None else percentile,
            loop_margins=loop.margins if with_loop else None,
            loop_reference=loop_reference,
            loop_candidates=loop_candidate,
        )
        return drawn_row(key, figs, note=note, reference_form=None if forms is None else forms[0], band_f_hz=f)
    err = compare_responses(ref, cand[0], f, evaluate=evaluate, forms=forms)
    row = dict(
        key=key,
        label=ROW_LABELS[key],
        applicable=True,
        note=note,
        max_gain_error_db=err.max_gain_error_db,
        max_gain_error_at_hz=err.max_gain_error_at_hz,
        max_phase_error_deg=err.max_phase_error_deg,
        max_phase_error_at_hz=err.max_phase_error_at_hz,
        percentile=None,
        unbounded_note=err.unbounded_note,
    )
    if with_loop:
        m_ref = loop.margins(np.atleast_2d(loop_reference))
        m_cand = loop.margins(np.atleast_2d(loop_candidate))
        for name, field in (
            ("phase_margin_deg", "delta_phase_margin_deg"),
            ("gain_margin_db", "delta_gain_margin_db"),
            ("sensitivity_peak_db", "delta_sensitivity_peak_db"),
        ):
            v = float(np.asarray(m_cand[name]).ravel()[0] - np.asarray(m_ref[name]).ravel()[0])
            row[field] = v if np.isfinite(v) else None
    return BudgetRow(**row)


def drawn_row(key: str, figures, *, note: str, reference_form=None, band_f_hz=None) -> BudgetRow:
    """A budget row from the tolerance engine's figures over Monte Carlo draws
    (:class:`convert.circuit.tolerance.DrawnFigures`): percentiles of the per-draw figures.

    ``reference_form`` (the controller the draws are compared with) and ``band_f_hz``: a zero or
    pole of it on the jω axis inside the band makes both error figures +∞ there, "unbounded" (no
    draw has that root at the same place: :func:`convert.compare.frequency.axis_roots`)."""
    f = figures
    missing = [
        f"{n} draws have no {name.replace('_', ' ').replace(' db', '').replace(' deg', '')}"
        for name, n in sorted(f.draws_without.items())
    ]
    if missing:  # say so: a percentile over the draws that have the figure is not over all of them
        note = f"{note}; {', '.join(missing)} (left out of that figure's percentile)"
    if f.unstable_fraction:  # always said when above zero (the verdict checks it too)
        note = (
            f"{note}; {100 * f.unstable_fraction:.3g} % of the draws ({f.unstable_draws} of {f.draws}) give an "
            f"unstable closed loop with the plant"
        )
    row = dict(
        key=key,
        label=ROW_LABELS[key],
        applicable=True,
        note=note,
        max_gain_error_db=f.max_gain_error_db,
        max_gain_error_at_hz=f.max_gain_error_at_hz,
        max_phase_error_deg=f.max_phase_error_deg,
        max_phase_error_at_hz=f.max_phase_error_at_hz,
        delta_phase_margin_deg=f.delta_phase_margin_deg,
        delta_gain_margin_db=f.delta_gain_margin_db,
        delta_sensitivity_peak_db=f.delta_sensitivity_peak_db,
        percentile=f.percentile,
        unstable_fraction=f.unstable_fraction,
    )
    row.update(_unbounded_fields(reference_form, band_f_hz))
    return BudgetRow(**row)


def _unbounded_fields(reference_form, band_f_hz) -> dict:
    """Error fields for a reference with a root on the jω axis inside the band (else none)."""
    if reference_form is None or band_f_hz is None:
        return {}
    roots = axis_roots(reference_form, None, float(band_f_hz[0]), float(band_f_hz[-1]))[0]
    if not roots:
        return {}
    at = roots[0].f_hz
    return {
        "max_gain_error_db": np.inf,
        "max_phase_error_deg": np.inf,
        "max_gain_error_at_hz": at,
        "max_phase_error_at_hz": at,
        "unbounded_note": "unbounded: " + "; ".join(r.text() for r in roots) + " (no draw has it at the same place)",
    }


def assemble(rows: dict[str, BudgetRow], applicable_keys: Sequence[str], form: str) -> list[BudgetRow]:
    """All rows in table order: the given ones, and "not applicable" for the rest."""
    out = []
    for key, _ in ROWS:
        if key in rows:
            out.append(rows[key])
        elif key in applicable_keys:
            out.append(not_applicable(key, "not switched on in this case"))
        else:
            out.append(not_applicable(key, f"does not arise in a {form} target"))
    return out
