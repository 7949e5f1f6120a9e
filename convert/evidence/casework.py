"""The evidence of a case: its bench sweep and plant log checked against every form, the fits,
and the judgements they add to the verdict. Called by
:func:`convert.compare.evaluate.evaluate_case` when the case has ``[evidence]``.

* The sweep is a measurement of one form (``of``: the source by default, or a given target):
  the verdict judges it against that form's model with the case's gain and phase criteria
  (|error| + 2σ at trusted points; a band the trusted points do not span fails); every form's
  model response is kept at the sweep's points for the overlay.
* The log is replayed through the source and every realization (digital ones at their rate,
  with their delay and word format as realized); ``max_residual_rms`` / ``max_residual_peak``
  judge each replay.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from convert.errors import InputError, LoopshiftError
from convert.given import GivenForm, given_controller, given_from_source
from convert.compare.frequency import response_seen_from_loop
from convert.evidence.sweep import MIN_COHERENCE, read_sweep, sweep_evidence
from convert.compare.budget import ROW_LABELS, BudgetRow
from convert.compare.verdict import Judgement, Verdict
from convert.compare.givenwork import quantized
from convert.evidence.log import (
    analog_setpoint_path,
    given_setpoint_path,
    log_evidence,
    setpoint_words,
    weighted_replayer,
)

SWEEP_LABEL = "measured {of} (sweep)"


@dataclass
class CaseEvidence:
    sweep: object = None  # convert.evidence.sweep.SweepEvidence
    sweep_of: str = ""
    overlays: dict = field(default_factory=dict)  # form name -> model response at the sweep's points
    log: object = None  # convert.evidence.log.LogEvidence
    figures: dict = field(default_factory=dict)  # verdict figures: name -> {criterion: value}
    judgements: list = field(default_factory=list)  # extra Judgements (log residuals)
    notes: list = field(default_factory=list)

    def as_dict(self) -> dict:
        out = {"sweep": None, "log": None, "notes": list(self.notes)}
        if self.sweep is not None:
            out["sweep"] = dict(self.sweep.as_dict(), of=self.sweep_of)
        if self.log is not None:
            d = self.log.as_dict()
            d.pop("sketch", None)
            out["log"] = d
        return out


def run_evidence(case, info, realizations) -> CaseEvidence:
    spec = case.evidence
    ev = CaseEvidence()
    if spec.sweep is not None:
        _sweep(case, info, realizations, spec.sweep, ev)
    if spec.log is not None:
        _log(case, info, realizations, spec.log, ev)
    return ev


class _named_in_case:
    """Errors raised inside name the case file's line of the evidence table (errors that already
    name a CSV file and line keep them)."""

    def __init__(self, case, table: str):
        self.case, self.table = case, table

    def __enter__(self):
        return self

    def __exit__(self, kind, exc, _tb):
        if isinstance(exc, LoopshiftError):
            exc.name_settings({"decimal mark setting": f"{self.table}.decimal"})
        if isinstance(exc, LoopshiftError) and not (exc.where and ".csv" in exc.where):
            key = self.table + (".fit" if exc.key == "fit" else "")
            raise type(exc)(exc.message, where=self.case.where(key), key=key) from None
        return False


def _form_named(case, of: str):
    if of == "source":
        return given_from_source(case.source)
    for g in case.given:
        if g.name == of:
            return g
    names = ", ".join(["source"] + [g.name for g in case.given])
    raise InputError(
        f"no form called {of!r}; the sweep can be of: {names}",
        where=case.where("evidence.sweep.of"),
        key="evidence.sweep.of",
    )


def _sweep(case, info, realizations, spec, ev: CaseEvidence) -> None:
    given = _form_named(case, spec["of"])
    with _named_in_case(case, "evidence.sweep"):
        sweep = read_sweep(
            spec["file"],
            columns=spec["columns"],
            units=spec["units"],
            decimal=spec["decimal"],
            averages=spec["averages"],
            option="evidence.sweep.columns",
        )
    crit = case.criteria
    limits = {"max_gain_error_db": crit.max_gain_error_db, "max_phase_error_deg": crit.max_phase_error_deg}
    fit = spec["fit"]
    with _named_in_case(case, "evidence.sweep"):
        result = sweep_evidence(
            given,
            sweep,
            band_hz=crit.band_hz,
            limits=limits,
            inverted=spec["inverted"],
            min_coherence=spec["min_coherence"] or MIN_COHERENCE,
            fit=bool(fit),
            fit_names=fit if isinstance(fit, tuple) else None,
            case=case,
        )
    ev.sweep = result
    ev.sweep_of = given.name if spec["of"] != "source" else "source"
    if spec["of"] != "source":
        _measured_row(realizations, f"given {given.name}", result)
    f = sweep.f_hz
    ev.overlays["source"] = response_seen_from_loop(info.controller, f, via="zpk")
    for r in realizations:
        resp = r.seen(f)
        if r.controller.is_digital:
            resp = np.where(f < 0.5 * r.controller.fs_hz, resp, np.nan)
        ev.overlays[r.name] = resp
    figures = dict(result.check.figures)
    for key in (
        "max_phase_margin_change_deg",
        "max_gain_margin_change_db",
        "max_sensitivity_peak_change_db",
        "max_step_deviation",
        "max_disturbance_deviation",
    ):
        figures[f"{key}_note"] = "a loop figure is not computed from a measured sweep"
        figures[f"{key}_applies"] = False
    ev.figures[SWEEP_LABEL.format(of=ev.sweep_of)] = figures
    ev.notes += [f"sweep: {n}" for n in result.check.notes]


def _measured_row(realizations, name: str, result) -> None:
    """Budget row 8 of a measured given form: the measured deviation from its own model over the
    trusted points of the band, with the measurement's noise in the note."""
    chk = result.check
    use = chk.trusted & chk.in_band
    for r in realizations:
        if r.name != name:
            continue
        if use.any():
            ig = int(np.argmax(np.abs(chk.gain_error_db[use])))
            ip = int(np.argmax(np.abs(chk.phase_error_deg[use])))
            f = chk.f_hz[use]
            row = BudgetRow(
                "measured",
                ROW_LABELS["measured"],
                True,
                f"bench sweep against this form's model, trusted points of the band; noise ±2σ up to "
                f"{2 * float(np.max(chk.noise_db[use])):.3g} dB, {2 * float(np.max(chk.noise_deg[use])):.3g}°",
                max_gain_error_db=float(abs(chk.gain_error_db[use][ig])),
                max_gain_error_at_hz=float(f[ig]),
                max_phase_error_deg=float(abs(chk.phase_error_deg[use][ip])),
                max_phase_error_at_hz=float(f[ip]),
            )
        else:
            row = BudgetRow("measured", ROW_LABELS["measured"], False, "not applicable: no trusted point in the band")
        r.budget = [row if b.key == "measured" else b for b in r.budget]


def _setpoint_paths(case, info, realizations) -> dict:
    """Each form's setpoint -> output path where it is not its error path, with the words that
    say why: the source's (PID weights, a two-input card), a PID block target's, a given form's."""
    out = {}
    src_sp = None if info.controller.is_digital else analog_setpoint_path(info.pid, info.extra)
    if src_sp is not None:
        out["source"] = (src_sp, setpoint_words(info.pid, info.extra))
    given = {f"given {g.name}": g for g in getattr(case, "given", ())}
    for r in realizations:
        if getattr(r, "setpoint_path", None) is not None:
            b, c = (info.pid.b, info.pid.c) if info.pid is not None else (None, None)
            if case.digital and case.digital.setpoint_weights:
                b, c = case.digital.setpoint_weights
            out[r.name] = (
                r.setpoint_path,
                f"setpoint weights b = {b:g}, c = {c:g}" if b is not None else "setpoint weights",
            )
        elif r.name in given:
            g = given[r.name]
            gi = given_controller(g, case)
            sp = given_setpoint_path(g, gi)
            if sp is not None:
                if g.form in ("digital", "pid"):
                    sp = quantized(g, sp)
                out[r.name] = (sp, setpoint_words(gi.pid, gi.extra))
    return out


def _log(case, info, realizations, spec, ev: CaseEvidence) -> None:
    forms = []
    paths = _setpoint_paths(case, info, realizations)
    for name, ctrl, delay in [("source", info.controller, 0.0)] + [
        (r.name, r.controller, float(r.details.get("delay_s") or 0.0)) for r in realizations
    ]:
        sp, words = paths.get(name, (None, ""))
        try:
            forms.append((name, weighted_replayer(ctrl, sp, delay, words)))
        except LoopshiftError as exc:
            ev.notes.append(f"log: {name} not replayed: {exc.message}")
    fit = None
    if spec["fit"]:
        if info.pid is None:
            raise InputError(
                "fit = true needs a source that is a PID (PID settings, or a card read as a PID)",
                where=case.where("evidence.log.fit"),
                key="evidence.log.fit",
            )
        fit = GivenForm("source", "analog", {"pid": info.pid, "settings": {}}, case.where("source"))
    limits = spec["output_limits"] or case.signals.output_range
    with _named_in_case(case, "evidence.log"):
        result = log_evidence(
            spec["file"],
            forms,
            columns=spec["columns"],
            units=spec["units"],
            decimal=spec["decimal"],
            output_limits=limits,
            fit=fit,
            option="evidence.log.columns",
        )
    ev.log = result
    ev.notes += [f"log: {n}" for n in result.notes]
    for r in result.replays:
        for key, fig, label in (
            ("max_residual_rms", "rms_rel", "log replay residual RMS"),
            ("max_residual_peak", "peak_rel", "log replay residual peak"),
        ):
            limit = spec[key]
            if limit is None:
                continue
            value = r.figures.get(fig)
            unjudged = r.figures.get("unjudged")
            status = "skipped" if unjudged else "fail" if value is None or value > limit else "pass"
            ev.judgements.append(
                Judgement(
                    f"log: {r.name}",
                    key,
                    label,
                    "of range",
                    limit,
                    None if unjudged else value,
                    status,
                    f"not judged: {unjudged}"
                    if unjudged
                    else "about the reported offset, relative to the logged output's range",
                )
            )


def extend_verdict(verdict, judgements):
    """The verdict with extra judgements (log residuals) added; the overall result fails when
    any of them fails, and is "unchecked" (not a pass) when one of them could not be judged."""
    if not judgements:
        return verdict
    every = tuple(verdict.judgements) + tuple(judgements)
    if any(j.status == "fail" for j in every):
        overall = "fail"
    elif any(j.status == "skipped" for j in judgements):
        overall = "unchecked"  # a log criterion the case sets that could not be judged is never a pass
    else:
        overall = verdict.overall
    return Verdict(overall, every)
