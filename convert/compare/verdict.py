"""The verdict: pass/fail per acceptance criterion and realization, and overall.

Each criterion is a maximum. The figure compared with it is:

* ``max_gain_error_db`` / ``max_phase_error_deg``: the budget's total row (everything on; for
  circuits the Monte Carlo percentile) over the band;
* ``max_phase_margin_change_deg`` / ``max_gain_margin_change_db`` /
  ``max_sensitivity_peak_change_db``: |change| of that loop figure, realization minus source;
* ``max_step_deviation``: max |y − y_source| after a setpoint step, as a fraction of the step;
* ``max_disturbance_deviation``: max |y − y_source| after a load-disturbance step, as a fraction
  of the source loop's peak deviation.

A criterion that is not set is not checked; a loop criterion without a plant is "skipped" and
listed. The overall verdict is "pass" when no checked criterion fails for any realization.
"""

from __future__ import annotations

from dataclasses import dataclass

CRITERIA: tuple[tuple[str, str, str], ...] = (
    ("max_gain_error_db", "max gain error", "dB"),
    ("max_phase_error_deg", "max phase error", "deg"),
    ("max_phase_margin_change_deg", "phase margin change", "deg"),
    ("max_gain_margin_change_db", "gain margin change", "dB"),
    ("max_sensitivity_peak_change_db", "sensitivity peak change", "dB"),
    ("max_step_deviation", "step-response deviation", "of step"),
    ("max_disturbance_deviation", "disturbance-response deviation", "of peak"),
)
LOOP_CRITERIA = {"max_phase_margin_change_deg", "max_gain_margin_change_db", "max_sensitivity_peak_change_db",
                 "max_step_deviation", "max_disturbance_deviation"}


@dataclass(frozen=True)
class Judgement:
    """One criterion for one realization. ``status``: "pass", "fail", "skipped" (no plant or
    figure unavailable) or "not set"."""

    realization: str
    criterion: str
    label: str
    unit: str
    limit: float | None
    value: float | None
    status: str
    note: str = ""

    def as_dict(self) -> dict:
        return dict(self.__dict__)


@dataclass(frozen=True)
class Verdict:
    overall: str
    judgements: tuple[Judgement, ...]

    @property
    def failures(self) -> list[Judgement]:
        return [j for j in self.judgements if j.status == "fail"]

    @property
    def skipped(self) -> list[Judgement]:
        return [j for j in self.judgements if j.status == "skipped"]

    def as_dict(self) -> dict:
        return {"verdict": self.overall, "judgements": [j.as_dict() for j in self.judgements],
                "failures": [j.as_dict() for j in self.failures]}


def judge(criteria: dict, figures: dict[str, dict], *, has_plant: bool) -> Verdict:
    """``criteria``: criterion key -> limit or None. ``figures``: realization name -> {criterion
    key -> measured value (absolute, same unit as the limit) or None when unavailable, and
    optionally ``"<key>_note"`` -> text}."""
    out = []
    for name, values in figures.items():
        for key, label, unit in CRITERIA:
            limit = criteria.get(key)
            value = values.get(key)
            note = values.get(f"{key}_note", "")
            if limit is None:
                status = "not set"
            elif key in LOOP_CRITERIA and not has_plant:
                status, note = "skipped", note or "no plant in the case"
            elif value is None:
                status = "skipped"
                note = note or "figure not available"
            else:
                status = "pass" if abs(value) <= limit else "fail"
            out.append(Judgement(name, key, label, unit, limit, None if value is None else abs(value), status, note))
    overall = "fail" if any(j.status == "fail" for j in out) else "pass"
    return Verdict(overall, tuple(out))
