"""The verdict: pass/fail per acceptance criterion and realization, and overall.

Each criterion is a maximum. The figure compared with it is:

* ``max_gain_error_db`` / ``max_phase_error_deg``: the budget's total row (everything on; for
  circuits the Monte Carlo percentile) over the band;
* ``max_phase_margin_change_deg`` / ``max_gain_margin_change_db`` /
  ``max_sensitivity_peak_change_db``: |change| of that loop figure, realization minus source;
* ``max_step_deviation``: max |y − y_source| after a setpoint step, as a fraction of the step;
* ``max_disturbance_deviation``: max |y − y_source| after a load-disturbance step, as a fraction
  of the source loop's peak deviation.

A criterion that is not set is not checked; a loop criterion without a plant, or one whose figure
does not exist or is not a finite number, is "skipped" and listed with the reason — except an
error figure that is +∞ because a zero or pole of either form sits on the jω axis / unit circle
inside the band (its note starts "unbounded"): that fails, with the note as the reason. The overall
verdict is:

* ``"fail"`` when a checked criterion fails for any realization;
* ``"unchecked"`` when nothing failed but a criterion the case sets was skipped for some
  realization (no plant for a loop criterion, a simulation too long to run, a figure that does
  not exist): what the engineer asked for was not shown, so it is not a pass; likewise when some
  realization (or the case, with no realization at all) has not one criterion that was actually
  checked (exit code 1, like a failure; see docs/report.md);
* ``"pass"`` otherwise: every realization passed at least one checked criterion and none failed.

With a plant, every loop (the source's and each realization's) is also judged on closed-loop
stability (``closed_loop_stable``, always checked, no limit): an unstable or marginal loop, or
one with positive feedback at low frequency on a plant that is stable on its own (the action or
the plant's gain sign inverted), fails the verdict whatever the other figures say
(:mod:`convert.compare.stability`). It does not count as a checked criterion for the "unchecked"
rule: it says the loop works, not that the new form does what the old one did.
"""

from __future__ import annotations

import math
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
#: checks that, left undecided, keep the verdict from passing
MUST_DECIDE = frozenset({"closed_loop_stable", "firmware_stall"})
#: a plant log's criteria (convert.evidence.casework): added to the verdict; one not judged keeps it from passing
EVIDENCE_CRITERIA = frozenset({"max_residual_rms", "max_residual_peak"})
CRITERION_KEYS = frozenset(k for k, _, _ in CRITERIA)  # a realization's own checks are not among them
LOOP_CRITERIA = {
    "max_phase_margin_change_deg",
    "max_gain_margin_change_db",
    "max_sensitivity_peak_change_db",
    "max_step_deviation",
    "max_disturbance_deviation",
}


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

    @property
    def unchecked_reason(self) -> str:
        """Why the verdict is ``"unchecked"`` (empty otherwise): which realizations had no criterion
        checked, and what was skipped for each."""
        if self.overall != "unchecked":
            return ""
        undecided = [
            j.realization for j in self.judgements if j.criterion == "closed_loop_stable" and j.status == "skipped"
        ]
        if undecided:
            return (
                "the closed-loop stability of "
                + ", ".join(f"the {n} loop" if n == "source" else repr(n) for n in undecided)
                + " could not be decided, so no verdict can pass"
            )
        stalls = [j for j in self.judgements if j.criterion == "firmware_stall" and j.status == "skipped"]
        if stalls:
            return "; ".join(f"{j.realization}: {j.label}: {j.note}" for j in stalls) + ", so no verdict can pass"
        logs = {
            j.realization: j.note for j in self.judgements if j.criterion in EVIDENCE_CRITERIA and j.status == "skipped"
        }
        if logs:
            return "; ".join(f"{name}: {note}" for name, note in logs.items()) + ", so no verdict can pass"
        names = list(
            dict.fromkeys(
                j.realization
                for j in self.judgements
                if j.criterion != "closed_loop_stable" and j.criterion not in EVIDENCE_CRITERIA
            )
        )
        if not names:
            return "no new form was built, so no criterion was checked"
        bits = []
        for name in names:
            mine = [j for j in self.judgements if j.realization == name and j.criterion != "closed_loop_stable"]
            if any(j.status == "pass" and j.criterion in CRITERION_KEYS for j in mine):
                continue
            skipped = [f"{j.label} ({j.note})" for j in mine if j.status == "skipped"]
            bits.append(f"{name}: " + ("; ".join(skipped) if skipped else "no criterion set"))
        if bits:
            return "no criterion was checked for " + " | ".join(bits)
        unmade = [j for j in self.judgements if j.criterion in CRITERION_KEYS and j.status == "skipped"]
        return (
            "criteria the case sets were not checked: "
            + "; ".join(f"{j.realization}: {j.label} ({j.note})" for j in unmade)
            + ", so no verdict can pass"
        )

    def as_dict(self) -> dict:
        return {
            "verdict": self.overall,
            "judgements": [j.as_dict() for j in self.judgements],
            "failures": [j.as_dict() for j in self.failures],
            "unchecked_reason": self.unchecked_reason,
        }


def stability_judgements(loops: dict) -> list[Judgement]:
    """One "closed-loop stability" judgement per loop: ``loops`` maps a loop's name ("source" or
    a realization) to an object with ``stable`` and ``message``/``method`` (or None: not decided,
    "skipped")."""
    out = []
    for name, s in loops.items():
        if s is None:
            out.append(
                Judgement(
                    name,
                    "closed_loop_stable",
                    "closed-loop stability",
                    "",
                    None,
                    None,
                    "skipped",
                    "could not be decided",
                )
            )
            continue
        ok = getattr(s, "acceptable", s.stable)
        status = "pass" if ok else "fail"
        note = s.message if not ok else f"stable ({s.method})"
        out.append(Judgement(name, "closed_loop_stable", "closed-loop stability", "", None, None, status, note))
    return out


def judge(criteria: dict, figures: dict[str, dict], *, has_plant: bool, loops: dict | None = None) -> Verdict:
    """``criteria``: criterion key -> limit or None. ``figures``: realization name -> {criterion
    key -> measured value (absolute, same unit as the limit) or None when unavailable, and
    optionally ``"<key>_note"`` -> text and ``"<key>_applies"`` -> False for a figure the form
    cannot have by its nature, e.g. a measured sweep's loop figures: "not applicable", neither
    checked nor skipped}. ``loops``: see :func:`stability_judgements`."""
    out = stability_judgements(loops or {})
    for name, values in figures.items():
        for key, label, unit in CRITERIA:
            limit = criteria.get(key)
            value = values.get(key)
            note = values.get(f"{key}_note", "")
            if limit is None:
                status = "not set"
            elif values.get(f"{key}_applies") is False:
                status = "not applicable"  # no such figure exists for this form by its nature (a measured sweep's loop)
            elif key in LOOP_CRITERIA and not has_plant:
                status, note = "skipped", note or "no plant in the case"
            elif value is None:
                status = "skipped"
                note = note or "figure not available"
            elif value == math.inf and note.startswith("unbounded"):
                status = "fail"  # a root on the axis inside the band: the error has no bound
            elif not math.isfinite(value):
                status, value = "skipped", None
                note = "the figure is not a finite number (it could not be computed)" + (f"; {note}" if note else "")
            else:
                status = "pass" if abs(value) <= limit else "fail"
            out.append(Judgement(name, key, label, unit, limit, None if value is None else abs(value), status, note))
        # checks a realization carries itself, always on (e.g. a firmware realization's stability);
        # they can fail a verdict but never make one "checked" on their own
        out.extend(
            Judgement(
                name,
                c["key"],
                c["label"],
                c.get("unit", ""),
                c.get("limit"),
                c.get("value"),
                c["status"],
                c.get("note", ""),
            )
            for c in values.get("checks", ())
        )
    if any(j.status == "fail" for j in out):
        overall = "fail"
    elif any(j.criterion in MUST_DECIDE and j.status == "skipped" for j in out):
        overall = "unchecked"  # a loop's stability or a firmware stall that could not be decided is never a pass
    elif any(j.criterion in CRITERION_KEYS and j.status == "skipped" for j in out):
        overall = "unchecked"  # a criterion the case sets and that was not checked is never a pass
    elif not figures or any(
        not any(j.status == "pass" and j.criterion in CRITERION_KEYS for j in out if j.realization == name)
        for name in figures
    ):
        overall = "unchecked"
    else:
        overall = "pass"
    return Verdict(overall, tuple(out))
