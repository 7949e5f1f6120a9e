"""Run everything a case asks for: build the source, realize each target, and compare.

:func:`evaluate_case` returns :class:`CaseResults` — plain data (numbers, arrays, controllers)
that the report writers render. No drawing and no printing here.

Reference: every realization is compared with the **source as the loop sees it** (an analog
source as is; a digital source through its own zero-order hold).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any
from collections.abc import Callable

import numpy as np

from convert.compare import budget as bud
from convert.compare.frequency import log_grid, response_seen_from_loop
from convert.compare.ownchecks import own_checks
from convert.compare.loop import (
    LoopResponse,
    Margins,
    default_duration,
    loop_margins,
    response_deviation,
    simulate_loop,
)
from convert.compare.rate import RateAdvice, advise
from convert.compare.stability import LoopStability, loop_stability
from convert.compare.stages import digital_budget, loop_spec, realized_controller
from convert.compare.stages import fmt_hz as _fmt_hz
from convert.compare.stages import fmt_s as _fmt_s
from convert.compare.verdict import LOOP_CRITERIA, Verdict, judge, CRITERIA
from convert.controller import Controller
from convert.case import SETTING_KEYS, source_controller
from convert.errors import InputError, LoopshiftError, UnrealizableError
from convert.circuit.tolerance import check_draws, draws_problem
from convert import sidework
from convert.sidework import Deferred
from convert.compare.circuitwork import circuit_realization
from convert.compare.givenwork import given_realizations
from convert.evidence.casework import extend_verdict, run_evidence
from convert.digital import read_analog, add_derivative_filter, discretize, scaling as sg
from convert.circuit.card import _ratio
from convert.digital.pidblock import PidBlock, emit_pid_c, emit_pid_st
from convert.digital.pidcheck import analyze_block, linear_controller
from convert.pid import pid_from_controller, why_not_pid
from convert.digital.quantized import analyze
from convert.digital.codegen import emit
from convert.digital.scaling import scale_pid

CAUTIONS = (
    "Verify the new form on a bench or in simulation before a live swap.",
    "Plan a bumpless transfer: match the new controller's output and state to the running one at switch-over.",
    "Keep safety interlocks and safety functions independent of this controller.",
    "Follow the site's change procedure, local codes and licensed practice.",
    "This tool computes; it does not certify.",
)


@dataclass
class Realization:
    """One target form built from the source, with everything measured about it."""

    name: str
    form: str  # "digital" or "circuit"
    controller: Controller
    details: dict
    budget: list
    seen: Callable[[np.ndarray], np.ndarray]
    warnings: list[str] = field(default_factory=list)
    margins: Margins | None = None
    step: LoopResponse | None = None
    disturbance: LoopResponse | None = None
    figures: dict = field(default_factory=dict)
    band: dict | None = None  # Monte Carlo band for circuits
    files: dict = field(default_factory=dict)  # name -> bytes, text or a Schematic (the report draws it)
    stability: LoopStability | None = None  # closed loop with the plant (None without a plant)
    #: the setpoint -> output path where it is not ``controller`` (a PID block with weights b, c ≠ 1),
    #: as the form stores it; a plant log replays it on the setpoint (convert.evidence.casework)
    setpoint_path: Controller | None = None


@dataclass
class CaseResults:
    case: Any
    source: Any  # convert.case.SourceInfo
    reference: Controller  # the source as a controller (digital or analog)
    band_f_hz: np.ndarray
    realizations: list[Realization]
    rate_advice: list[RateAdvice]
    verdict: Verdict
    source_margins: Margins | None = None
    source_step: LoopResponse | None = None
    source_disturbance: LoopResponse | None = None
    duration_s: float | None = None
    skipped: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    draws: int | None = None
    seed: int | None = None
    evidence: Any = None  # convert.evidence.casework.CaseEvidence
    source_stability: LoopStability | None = None

    @property
    def alarms(self) -> list[str]:
        """Plain sentences for the top of every report: an unstable source loop first, then each
        unstable target loop (empty when every loop with the plant is stable)."""
        out = []
        if self.source_stability is not None and not self.source_stability.acceptable:
            out.append(_sentence(self.source_stability.message))
        for r in self.realizations:
            if r.stability is not None and not r.stability.acceptable:
                out.append(_sentence(r.stability.message))
        return out

    def loop_is_stable(self, name: str) -> bool | None:
        """Stability of the loop of ``name`` ("source" or a realization's name); None if unknown."""
        s = (
            self.source_stability
            if name == "source"
            else next((r.stability for r in self.realizations if r.name == name), None)
        )
        return None if s is None else s.stable

    @property
    def exit_code(self) -> int:
        return 0 if self.verdict.overall == "pass" else 1


class _Progress:
    def __init__(self, callback):
        self.callback = callback

    def __call__(self, text: str) -> None:
        if self.callback is not None:
            self.callback(text)


def planned_steps(case) -> int:
    """How many progress steps :func:`evaluate_case` will report (for a progress bar)."""
    n = 2
    if case.digital:
        n += len(case.digital.fs_hz) * len(case.digital.methods) + 1
    if case.circuit:
        n += 3
    n += len(getattr(case, "given", ()))
    return n + 1


def evaluate_case(case, *, draws: int | None = None, progress: Callable[[str], None] | None = None) -> CaseResults:
    """Evaluate ``case`` (a :class:`convert.case.Case`). ``draws`` overrides the Monte Carlo
    draw count of a circuit target. ``progress(text)`` is called once per finished step."""
    if draws is not None:  # the command line and case files check this; a library caller too
        check_draws(draws)
        if draws_problem(draws):
            raise InputError(draws_problem(draws), key="draws")
    tick = _Progress(progress)
    info = source_controller(case)
    src: Controller = info.controller
    crit = case.criteria
    band = log_grid(crit.band_hz[0], crit.band_hz[1], 100)
    if src.is_digital and src.fs_hz / 2 <= crit.band_hz[1]:
        raise InputError(
            f"the band's top ({crit.band_hz[1]:g} Hz) must lie below the source's Nyquist frequency "
            f"({src.fs_hz / 2:g} Hz)",
            where=case.where("criteria.band"),
            key="criteria.band",
        )
    skipped: list[str] = []
    notes: list[str] = list(info.notes)
    analog_src = _analog_reference(case, src, notes)
    card_limits = info.extra.get("output_limits")  # a card's clamps, read from its netlist
    reduction = info.extra.get("reduction")  # a card read with its op-amps' parasitics
    if reduction is not None and reduction.changed:
        analog_src = reduction.reduced  # the targets are built from the card without its parasitics

    plant = case.plant
    src_margins = duration = src_step = src_dist = src_stability = None
    src_filter = None if src.is_digital else setpoint_filter_of(info.pid, info.extra)
    if src_filter is not None and plant is not None:
        notes.append(
            "the source's setpoint path differs from its error path (setpoint weights or a setpoint "
            f"filter): every setpoint step is simulated as u = C_sp·r − C·y, with F = C_sp/C = "
            f"{src_filter.expression()} applied to the step; the load disturbance does not depend on it"
        )
    sim_src = None
    if plant is not None:
        src_margins = loop_margins(src, plant.model, plant.dead_time_s)
        sim_src = _simulable(case, src, analog_src, notes)
        # an improper source (an unfiltered PID) still makes a proper loop with a strictly proper plant:
        # decide on the source itself where the loop allows it, else on its simulated (filtered) form
        src_stability = _stability(
            src if src.is_proper or _loop_is_proper(src, plant.model) else sim_src, plant, 0.0, "the source loop", notes
        )
        duration = case.signals.duration_s or default_duration(
            analog_src if analog_src.is_proper else sim_src, plant.model, plant.dead_time_s
        )
        if sim_src is not None:
            src_step, src_dist = _simulate_pair(
                case,
                sim_src,
                duration,
                0.0,
                _within(case.signals.output_range, card_limits),
                setpoint_filter=src_filter,
            )
    else:
        skipped += [
            "loop margins (gain margin, phase margin, crossover, sensitivity peak)",
            "closed-loop step and load-disturbance simulations",
            "phase-margin, gain-margin, sensitivity, step and disturbance criteria",
            "sample-rate rule of thumb (needs the crossover frequency)",
        ]
    tick("source and reference loop")
    unmodelled = _clamp_beyond_the_model(info.extra.get("feedback_clamp"), card_limits, src_step, src_dist)

    realizations: list[Realization] = []
    advice: list[RateAdvice] = []
    pending_advice = None
    if case.digital:
        # the sample-rate advice needs only the source loop: on a second core while the targets are built
        pending_advice = sidework.start(
            _rate_advice, case, analog_src, src_margins, src_step, src_dist, duration, src_stability
        )
        try:
            realizations += _digital_realizations(
                case,
                src,
                analog_src,
                band,
                src_margins,
                duration,
                src_step,
                src_dist,
                tick,
                card_limits=card_limits,
                reduction=reduction,
                setpoint_filter=src_filter,
                source_pid=info.pid,
            )
        except BaseException:
            pending_advice.discard()
            raise
        # taken when first read (the report draws its figures meanwhile; nothing here needs it)
        advice = Deferred(pending_advice.result)
        tick("sample-rate advice")
    if case.circuit:
        realizations.append(
            circuit_realization(
                case,
                src,
                analog_src,
                band,
                src_margins,
                duration,
                src_step,
                src_dist,
                draws=draws,
                tick=tick,
                case_reduction=reduction,
                source_pid=info.pid,
                setpoint_filter=src_filter,
            )
        )
    if getattr(case, "given", ()):
        realizations += given_realizations(
            case,
            src,
            band,
            src_margins,
            duration,
            src_step,
            src_dist,
            draws=draws,
            tick=tick,
            source_weighted=src_filter is not None,
        )

    figures = {}
    loops: dict[str, LoopStability | None] = {}
    if plant is not None:
        loops["source"] = src_stability
    for r in realizations:
        total = next(row for row in r.budget if row.key == "total")
        f = {"max_gain_error_db": total.max_gain_error_db, "max_phase_error_deg": total.max_phase_error_deg}
        if total.unbounded_note:
            f["max_gain_error_db_note"] = f["max_phase_error_deg_note"] = total.unbounded_note
        if plant is not None:
            delay = r.details.get("delay_s", 0.0) if r.form == "digital" else 0.0
            r.stability = _stability(r.controller, plant, delay, f"the loop with {r.name}", notes)
            loops[r.name] = r.stability
            f.update(_loop_figures(src_margins, r, src_step, src_dist, case))
            for key, why in unmodelled.items():
                f[key], f[f"{key}_note"] = None, why
            if src_stability is not None and not src_stability.acceptable:
                for key in LOOP_CRITERIA:
                    f[key] = None
                    f[f"{key}_note"] = (
                        "the source loop does not work with this plant (unstable or sign-inverted): there is no working loop to compare with"
                    )
        # always on, plant or not: the realization's own poles and its sign against the source
        f["checks"] = own_checks(src, r.controller, (float(band[0]), float(band[-1])))
        fw = r.details.get("firmware") if r.form == "digital" else None
        if fw is not None:
            f["checks"] = f["checks"] + list(fw["checks"])
            reach = _input_reach_check(case, r, fw)
            if reach is not None:
                f["checks"].append(reach)
        if r.form == "circuit" and r.details.get("swing_check") is not None:  # target.circuit.rail/input_amplitude
            f["checks"] = f["checks"] + [r.details["swing_check"]]
        if r.form == "circuit" and r.details.get("opamp_stability_check") is not None:  # target.circuit.opamp_gbw
            f["checks"] = f["checks"] + [r.details["opamp_stability_check"]]
        if total.unstable_fraction is not None:
            f["checks"] = list(f.get("checks", ())) + [_draws_stability_check(total)]
        figures[r.name] = f
    evidence = None
    if getattr(case, "evidence", None) is not None:
        evidence = run_evidence(case, info, realizations)
        figures.update(evidence.figures)
        notes += evidence.notes
    verdict = judge(crit.as_dict(), figures, has_plant=plant is not None, loops=loops)
    if evidence is not None:
        verdict = extend_verdict(verdict, evidence.judgements)
    _withhold_failing_code(realizations, verdict)
    tick("verdict")
    circuit_draws = None
    if case.circuit:
        circuit_draws = draws if draws is not None else case.circuit.draws
    return CaseResults(
        case=case,
        source=info,
        reference=src,
        band_f_hz=band,
        realizations=realizations,
        rate_advice=advice,
        verdict=verdict,
        source_margins=src_margins,
        source_step=src_step,
        source_disturbance=src_dist,
        duration_s=duration,
        skipped=skipped,
        notes=notes,
        draws=circuit_draws,
        seed=case.circuit.seed if case.circuit else None,
        evidence=evidence,
        source_stability=src_stability,
    )


# ----------------------------------------------------------------------------- helpers
def _analog_reference(case, src: Controller, notes: list[str]) -> Controller:
    """The analog controller the targets are built from (a digital source mapped back)."""
    if not src.is_digital:
        return src

    method = case.source.data.get("method", "tustin")
    try:
        reading = read_analog(src, method)
    except LoopshiftError as exc:
        exc.name_settings(SETTING_KEYS)
        raise type(exc)(exc.message, where=case.where("source.digital"), key=exc.key) from None
    analog = reading.controller
    notes.extend(f"source.digital: {n}" for n in reading.notes)  # e.g. a backward-difference derivative
    notes.append(
        f"the firmware source was mapped back to an analog equivalent by the {method} inverse; "
        "the targets are built from that equivalent and compared with the firmware as it runs"
    )
    return analog


def _filtered(case, analog: Controller) -> tuple[Controller, str | None]:
    """The analog controller with the derivative filter a digital target adds (if any)."""
    if analog.is_proper:
        return analog, None
    n = case.digital.derivative_filter if case.digital else None
    if n is None:
        raise UnrealizableError(
            "the source controller is improper (a pure derivative) and cannot be sampled or "
            "simulated; add derivative_filter = 10 (N) to [target.digital]",
            where=case.where("target.digital"),
            key="target.digital.derivative_filter",
        )

    return add_derivative_filter(analog, n), f"derivative filter N = {n:g} added (filter time constant Td/N)"


def _simulable(case, src: Controller, analog_src: Controller, notes: list[str]) -> Controller | None:
    if src.is_proper:
        return src
    if case.digital:  # refused naming target.digital.derivative_filter when it has none
        filt, _ = _filtered(case, analog_src)
        notes.append("the source is improper; its loop was simulated with the target's derivative filter added")
        return filt
    raise UnrealizableError(
        "the source controller is improper (a pure derivative): its loop with the plant cannot be "
        "simulated; give the PID a derivative filter (n or tf)",
        where=case.where("source"),
        key="source",
    )


def _draws_stability_check(total) -> dict:
    """The always-on check of a circuit's Monte Carlo draws with the plant: FAIL when more draws
    give an unstable closed loop than the percentile the error figures use leaves out (1 % for
    the 99th percentile)."""
    limit = 100.0 - float(total.percentile)
    value = 100.0 * float(total.unstable_fraction)
    ok = value <= limit
    note = (
        f"{value:.3g} % of the Monte Carlo draws give an unstable closed loop with the plant "
        f"(limit {limit:g} %, the share of draws the p{float(total.percentile):g} error figures leave out)"
    )
    return {
        "key": "draws_closed_loop_stable",
        "label": "closed-loop stability over the draws",
        "unit": "%",
        "limit": limit,
        "value": value,
        "status": "pass" if ok else "fail",
        "note": note,
    }


def _stability(
    controller: Controller | None, plant, delay_s: float, what: str, notes: list[str]
) -> LoopStability | None:
    """Closed-loop stability of ``controller`` with the case's plant (dead time exact), or None
    with a note when it cannot be decided (an improper loop)."""
    if controller is None:
        notes.append(f"the closed-loop stability of {what} could not be checked (improper controller)")
        return None
    try:
        return loop_stability(controller, plant.model, plant.dead_time_s, delay_s=delay_s, what=what)
    except ValueError as exc:
        notes.append(f"the closed-loop stability of {what} could not be checked: {exc}")
        return None


def _loop_is_proper(controller: Controller, plant: Controller) -> bool:
    """Controller times plant has no more zeros than poles (the loop's own properness)."""
    return controller.relative_degree + plant.relative_degree >= 0


def _sentence(text: str) -> str:
    return text[:1].upper() + text[1:] if text else text


def setpoint_filter_of(pid=None, extra=None) -> Controller | None:
    """The setpoint filter F = C_sp/C of a form whose setpoint path differs from its error path
    (None when u = C·(r − y)): a two-input card's F = H_sp/C (``extra["setpoint_filter"]``, from
    the card's analysis), else a PID's with weights b, c ≠ 1: F = N_sp/N, the numerators of
    kp·b + ki/s + kd·c·s/(tf·s + 1) and of the PID itself (same denominator)."""
    if extra and extra.get("setpoint_filter") is not None:
        return extra["setpoint_filter"]
    if pid is None or (pid.b == 1 and pid.c == 1):
        return None
    sp, fb = pid.setpoint_controller(), pid.to_controller()
    d_sp, d_fb = np.asarray(sp.den, float), np.asarray(fb.den, float)
    if d_sp.size == d_fb.size and np.allclose(d_sp / d_sp[0], d_fb / d_fb[0], rtol=1e-12, atol=0.0):
        # the same denominator (up to its scaling): F is the ratio of the numerators
        return Controller.analog(
            np.asarray(sp.num) / d_sp[0], np.asarray(fb.num) / d_fb[0], name="setpoint filter F = C_sp / C"
        )

    return _ratio(sp, fb, "setpoint filter F = C_sp / C")


WEIGHTS_NOT_CARRIED = (
    "this form has no setpoint path of its own (u = C·(r − y)); its setpoint step is judged "
    "against the source's weighted response, u = C_sp·r − C·y"
)
CODE_NOT_WEIGHTED = (
    "the generated code takes the error (u = C·(r − y)) and does not carry the source's setpoint "
    "path; its setpoint step is simulated so and judged against the source's weighted response "
    "(firmware with setpoint weights b, c: loopshift code --pid-block)"
)


def _wide_limits_warning(case, scaled) -> list[str]:
    """A warning when output limits, mapped to firmware units, span more than the output signal's
    whole firmware range (:func:`convert.digital.scaling.wide_limits_problem`)."""
    out_map = case.digital.output_signal if case.digital else None
    if not scaled or not scaled.get("output_limits") or out_map is None:
        return []
    problem = sg.wide_limits_problem(scaled["output_limits"], out_map)
    return [problem + " (V or mA)"] if problem else []


def _clamp_beyond_the_model(diodes, limits, step, disturbance) -> dict[str, str]:
    """criterion key -> why it cannot be judged, for each simulated response of the source loop in
    which a card's clamp across an integrating stage's feedback (``diodes``) acts: that clamp stops
    the integrator (the card does not wind up), while the loop simulation holds the output at the
    limits and lets the controller's state run on, so the card's own response there is not the
    one simulated. Empty when no such clamp, or when the responses stay inside its limits."""
    if not diodes or limits is None:
        return {}
    out = {}
    for key, resp in (("max_step_deviation", step), ("max_disturbance_deviation", disturbance)):
        if resp is None:
            continue
        u = np.asarray(resp.u)
        if np.any(u >= limits[1] * (1 - 1e-9)) or np.any(u <= limits[0] * (1 - 1e-9)):
            out[key] = (
                f"not judged: the card's clamp ({diodes}) sits across an integrator's feedback and acts in this "
                "response; it stops the card's integrator (no windup), which the simulation's output limit does not "
                "model, so the card's response here is not known (check with a step that stays inside the clamp, "
                "and the clamped behaviour on a bench)"
            )
    return out


def _simulate_pair(
    case,
    controller: Controller,
    duration: float,
    delay_s: float,
    limits,
    realized=None,
    setpoint_filter: Controller | None = None,
):
    """Setpoint-step and load-disturbance responses of ``controller`` in the case's loop; the
    setpoint step passes through ``setpoint_filter`` F (the 2-DOF law u = C·(F·r − y)), the
    disturbance does not depend on it."""
    plant = case.plant
    common = dict(duration_s=duration, delay_s=delay_s, output_limits=limits)
    if realized is not None:
        common["realized"] = realized
    step = simulate_loop(
        controller,
        plant.model,
        plant.dead_time_s,
        kind="setpoint",
        step=case.signals.setpoint_step,
        setpoint_filter=setpoint_filter,
        **common,
    )
    dist = simulate_loop(
        controller, plant.model, plant.dead_time_s, kind="disturbance", step=case.signals.disturbance_step, **common
    )
    return step, dist


def _loop_spec(case, f_hz: np.ndarray) -> bud.LoopSpec | None:
    return loop_spec(case.plant, f_hz)


def _within(limits, clamp):
    """The tighter of two (low, high) ranges, either of which may be None."""
    if clamp is None:
        return limits
    if limits is None:
        return tuple(clamp)
    return max(limits[0], clamp[0]), min(limits[1], clamp[1])


def firmware_output_limits(case, card_limits=None):
    """The firmware's output limits: the target's own, else a card's clamp limits (within the
    actuator range), else the actuator range; ``None`` when none is given."""
    if case.digital and case.digital.output_limits:
        return case.digital.output_limits
    return _within(case.signals.output_range, card_limits)


def _digital_realizations(
    case,
    src,
    analog_src,
    band,
    src_margins,
    duration,
    src_step,
    src_dist,
    tick,
    *,
    card_limits=None,
    reduction=None,
    setpoint_filter=None,
    source_pid=None,
):
    tgt = case.digital
    out = []
    filtered, filter_note = _filtered(case, analog_src)
    for fs in tgt.fs_hz:
        if fs / 2 <= case.criteria.band_hz[1]:
            raise InputError(
                f"the sample rate {fs:g} Hz puts the Nyquist frequency at or below the band's top "
                f"({case.criteria.band_hz[1]:g} Hz); raise fs or lower the band",
                where=case.where("target.digital.fs"),
                key="target.digital.fs",
            )
        delay = tgt.delay_for(fs)
        for method in ("pid_block",) if tgt.is_pid_block else tgt.methods:
            if tgt.is_pid_block:
                fw = _pid_block_firmware(case, filtered, fs, band, source_pid, card_limits)
            else:
                fw = _linear_firmware(case, filtered, fs, method, band, card_limits)
            cq, firmware, scaled = fw.stored, fw.analysis, fw.scaled
            warnings = list(fw.warnings) + _wide_limits_warning(case, scaled)
            name = f"{fw.label} @ {_fmt_hz(fs)}"
            budget = list(
                digital_budget(
                    src,
                    analog_src,
                    filtered,
                    fw.real,
                    firmware,
                    band,
                    delay_s=delay,
                    structure=fw.structure,
                    word_format=tgt.word_format,
                    filter_note=filter_note,
                    plant=case.plant,
                    reduction=reduction,
                    stored=fw.budget_stored,
                    method_text=fw.method_text,
                    word_note=fw.word_note,
                )
            )
            details = {
                "method": fw.label,
                "fs_hz": fs,
                "delay_s": delay,
                "prewarp_hz": tgt.prewarp_hz,
                "b": list(cq.b),
                "a": list(cq.a),
                "word_format": tgt.word_format,
                "structure": fw.structure,
                "firmware": {
                    **firmware.summary(),
                    "checks": firmware.checks() + ([scaled["check"]] if scaled else []),
                },
                "signal_scaling": {k: v for k, v in scaled.items() if k not in ("analysis", "check")}
                if scaled
                else None,
                "difference_equation": fw.difference_equation,
                "notes": list(fw.notes),
                "output_limits": firmware_output_limits(case, card_limits),
            }
            r = Realization(
                name=name,
                form="digital",
                controller=cq,
                details=details,
                budget=budget,
                seen=lambda f, c=cq, d=delay: response_seen_from_loop(c, f, delay_s=d, via="zpk"),
                warnings=warnings,
                files=fw.code_files(name),
            )
            block = getattr(firmware, "block", None)
            if tgt.is_pid_block and block is not None and (block.b != 1 or block.c != 1):
                r.setpoint_path = linear_controller(block, stored=firmware.refused is None, path="setpoint")
            if case.plant is not None:
                r.margins = loop_margins(cq, case.plant.model, case.plant.dead_time_s, delay_s=delay)
                limits = firmware_output_limits(case, card_limits)
                try:
                    # the code handed out takes the error: it is simulated as it runs
                    r.step, r.disturbance = _simulate_pair(
                        case, cq, duration, delay, limits, realized=firmware.realized
                    )
                    if setpoint_filter is not None and not tgt.is_pid_block:  # the block weighs r itself
                        r.warnings.append(CODE_NOT_WEIGHTED)
                except InputError as exc:
                    r.warnings.append(f"time simulation skipped: {exc.message}")
            out.append(r)
            tick(f"digital {name}")
    return out


@dataclass(frozen=True)
class _Built:
    """One firmware realization before it is compared: ``stored`` (as the word format stores it),
    ``analysis`` (its word-format checks), ``real`` (what
    :func:`convert.compare.stages.digital_budget` takes as the discretization result),
    ``budget_stored`` / ``method_text`` / ``word_note`` (its keywords for a firmware that is not
    a linear layout; None for a method's result), ``scaled`` (the signal scaling of
    :func:`_signal_scaling`, None without maps), and what the report says of it."""

    label: str
    structure: str
    stored: Controller
    analysis: Any
    real: Any
    code_files: Callable
    budget_stored: Controller | None = None
    method_text: str | None = None
    word_note: str | None = None
    scaled: dict | None = None
    warnings: tuple = ()
    notes: tuple = ()
    difference_equation: str = ""


def _linear_firmware(case, filtered, fs, method, band, card_limits=None) -> _Built:
    """A discretization method's result in the case's structure and word format."""
    tgt = case.digital
    try:
        real = discretize(filtered, fs, method, prewarp_hz=tgt.prewarp_hz)
    except LoopshiftError as exc:
        exc.name_settings(SETTING_KEYS)
        raise type(exc)(exc.message, where=case.where("target.digital.methods"), key="target.digital.methods") from None
    firmware = _firmware(case, real, band)
    scaled = _signal_scaling(case, filtered, real, band, firmware, firmware_output_limits(case, card_limits))
    cd = real.controller
    return _Built(
        label=method,
        structure=tgt.structure,
        stored=cd if firmware.realized is None else realized_controller(firmware.realized),
        analysis=firmware,
        real=real,
        code_files=lambda name: _code_files(case, firmware, name, method, scaled),
        scaled=scaled,
        warnings=tuple(real.warnings),
        notes=tuple(getattr(real, "notes", ())),
        difference_equation=getattr(real, "difference_equation", ""),
    )


def _pid_block_firmware(case, filtered, fs, band, source_pid, card_limits) -> _Built:
    """The firmware PID block (convert.digital.pidblock) of a PID source: its linear equivalent
    with exact and stored constants, its word-format analysis (convert.digital.pidcheck), and its
    code (C, Structured Text) when the analysis passes."""
    import dataclasses
    import types

    tgt = case.digital
    if tgt.input_signal is not None or tgt.output_signal is not None:
        key = "input_signal" if tgt.input_signal is not None else "output_signal"
        raise InputError(
            f'signal scaling ({key}) is not offered with structure = "pid_block"; give the PID in firmware units',
            where=case.where(f"target.digital.{key}"),
            key=f"target.digital.{key}",
        )
    settings = pid_from_controller(filtered)
    if settings is None:
        raise InputError(
            f'structure = "pid_block" needs a source that is a PID: {why_not_pid(filtered)}',
            where=case.where("target.digital.structure"),
            key="target.digital.structure",
        )
    weights = tgt.setpoint_weights or ((source_pid.b, source_pid.c) if source_pid is not None else (1.0, 1.0))
    settings = dataclasses.replace(settings, b=float(weights[0]), c=float(weights[1]))
    rng = max(abs(tgt.input_range[0]), abs(tgt.input_range[1])) if tgt.input_range else None
    try:
        block = PidBlock.from_settings(
            settings,
            fs,
            form=tgt.pid_form,
            limits=firmware_output_limits(case, card_limits),
            anti_windup=tgt.anti_windup,
            tracking_time_s=tgt.tracking_time_s,
            word_format=tgt.word_format,
            input_range=rng,
        )
        check = analyze_block(
            block,
            band,
            input_resolution=tgt.input_resolution,
            response_limits=(case.criteria.max_gain_error_db, case.criteria.max_phase_error_deg),
        )
    except LoopshiftError as exc:
        raise _target_error(case, exc) from None
    cd = linear_controller(block, stored=False)
    cq = cd if check.refused else linear_controller(block)
    aw = block.anti_windup + (f" (Tt = {_fmt_s(block.tracking_time_s)})" if block.anti_windup == "track" else "")
    k = block.constants()
    return _Built(
        label="PID block",
        method_text="PID block (integral by forward Euler, derivative by backward difference)",
        structure=f"pid_block ({block.form}, anti-windup {aw}, b = {block.b:g}, c = {block.c:g})",
        stored=cq,
        analysis=check,
        real=types.SimpleNamespace(
            method="pid_block", fs_hz=fs, controller=cd, frequency_response=cd.frequency_response
        ),
        budget_stored=cq,
        word_note=f"PID block in {tgt.word_format} alone: the stored constants' linear equivalent (from the error, "
        "within the limits) against the exact constants (both in z, no hold)",
        code_files=lambda name: _pid_code_files(case, block, check, name),
        difference_equation=(
            f"P = {k['kp']:.6g}·({block.b:g}·r − y); D = {k['ad']:.6g}·D + {k['bd']:.6g}·Δ({block.c:g}·r − y); "
            f"I += {k['bi']:.6g}·e" + (f" + {k['ao']:.6g}·(u − v)" if block.anti_windup == "track" else "")
        ),
    )


def _pid_code_files(case, block, check, name: str) -> dict:
    """The PID block's code under ``code/<realization>/`` when its checks pass and its stall was
    decided (C; Structured Text for float formats)."""
    if not check.ok or check.stall_unchecked:
        return {}

    tgt = case.digital
    folder = _code_folder(name)
    files = {}
    for lang in tgt.code_languages:
        emit = emit_pid_c if lang == "c" else emit_pid_st
        for fname, text in emit(block, tgt.code_name, source=case.title or "case source").items():
            files[f"{folder}/{fname}"] = text
    return files


def _firmware(case, real, band):
    """The structure × word-format analysis of a digital target (convert.digital.quantized):
    the input range and output level from the case (output limits, else the output range)."""
    tgt = case.digital
    limits = tgt.output_limits or case.signals.output_range
    level = max(abs(limits[0]), abs(limits[1])) if limits else None
    rng = max(abs(tgt.input_range[0]), abs(tgt.input_range[1])) if tgt.input_range else None
    try:
        return analyze(
            real.roots,
            tgt.structure,
            tgt.word_format,
            band,
            b=real.b,
            a=real.a,
            input_range=rng,
            output_level=level,
            input_resolution=tgt.input_resolution,
            response_limits=(case.criteria.max_gain_error_db, case.criteria.max_phase_error_deg),
        )
    except LoopshiftError as exc:
        raise _target_error(case, exc) from None


def _target_error(case, exc: LoopshiftError) -> LoopshiftError:
    """``exc`` with the case file's line of ``[target.digital]`` and its key under it."""
    return type(exc)(
        exc.message,
        where=case.where("target.digital"),
        key=f"target.digital.{exc.key}" if exc.key else "target.digital",
    )


def _code_folder(name: str) -> str:
    """``code/<realization>`` (the realization's name in lower case, runs of other characters as -)."""
    import re

    return "code/" + re.sub(r"[^A-Za-z0-9]+", "-", name).strip("-").lower()


def _input_reach_check(case, r, fw: dict) -> dict | None:
    """Fixed point scales its input words to the stated input range R; a larger input saturates
    them, and the controller then acts on R instead. The loop's own test signals must stay inside:
    the error r − y (setpoint step) and −y (load step) of a linear controller; the setpoint and
    the measurement of a PID block (which takes both). None when there is no simulated loop or
    the word format is not fixed point."""
    if fw.get("word_format") not in ("q15", "q31") or not fw.get("input_range"):
        return None
    sp = float(case.signals.setpoint_step)
    peaks = []
    if r.step is not None:
        y = np.asarray(r.step.y, dtype=float)
        peaks.append(
            max(abs(sp), float(np.max(np.abs(y))))
            if fw.get("structure") == "pid_block"
            else float(np.max(np.abs(sp - y)))
        )
    if r.disturbance is not None:
        peaks.append(float(np.max(np.abs(np.asarray(r.disturbance.y, dtype=float)))))
    peaks = [p for p in peaks if math.isfinite(p)]
    if not peaks:
        return None
    rng = float(fw["input_range"])
    peak = max(peaks)
    what = "setpoint and measurement" if fw.get("structure") == "pid_block" else "error"
    ok = peak <= rng * (1 + 1e-9)
    return dict(
        key="firmware_input_reach",
        label=f"the loop's {what} {'stay' if fw.get('structure') == 'pid_block' else 'stays'} within the input range ±{rng:.4g}",
        unit="input units",
        limit=rng,
        value=peak,
        status="pass" if ok else "fail",
        note=(
            f"largest |{what}| in the simulated setpoint and load steps"
            if ok
            else f"the simulated steps reach |{what}| = {peak:.4g}, beyond the input range ±{rng:.4g}: the input "
            "words saturate there and the controller acts on the range's end instead; widen input_range"
        ),
    )


def _withhold_failing_code(realizations, verdict) -> None:
    """Code that must not run is not handed out: a realization that fails any check of the
    verdict (its own or a criterion) keeps no ``code/`` files, and says so."""
    failing = {j.realization for j in verdict.failures}
    for r in realizations:
        code = [k for k in r.files if k.startswith("code/")]
        if r.name in failing and code:
            for k in code:
                del r.files[k]
            r.warnings.append("code not written: this realization fails the verdict (see the failures)")


def _code_files(case, firmware, name: str, method: str, scaled=None) -> dict:
    """The generated code of a realization that passes its firmware checks, under
    ``code/<realization>/`` (none for a failing one, nor for one whose stall is undecided: code
    that must not run, or that was not shown to run, is not handed out). With signal maps, the
    code is that of the controller rescaled to firmware units."""
    if not firmware.ok or firmware.stall_unchecked:
        return {}
    if scaled is not None and (
        not scaled["analysis"].ok or scaled["analysis"].stall_unchecked or scaled["check"]["status"] != "pass"
    ):
        return {}

    tgt = case.digital
    folder = _code_folder(name)
    limits = tgt.output_limits or case.signals.output_range
    realized = firmware.realized
    source = case.title or "case source"
    scaled_from = None
    if scaled is not None:
        scaled_from = {"limits": scaled["given_output_limits"]}
        realized, limits = scaled["analysis"].realized, scaled["output_limits"]
        source = f"{source}; in firmware units: {scaled['text']}; {scaled['gains']}"
    files = {}
    for lang in tgt.code_languages:
        texts = emit(
            realized, tgt.code_name, lang, source=source, method=method, limits=limits, scaled_from=scaled_from
        )
        for fname, text in texts.items():
            files[f"{folder}/{fname}"] = text
    return files


def _signal_scaling(case, analog, real, band, firmware, limits):
    """The controller rescaled from the card's signals to firmware units (the target's
    ``input_signal``/``output_signal``, convert.digital.scaling): its analysis in the same
    structure and word format, the scaled gains, the output limits in firmware units, and the
    end-to-end direction check (a constant error through the card-unit model and, mapped, through
    the firmware model, mapped back). None without maps."""
    from dataclasses import replace

    tgt = case.digital
    if firmware.realized is None or (tgt.input_signal is None and tgt.output_signal is None):
        return None
    sc = sg.scaling(tgt.input_signal, tgt.output_signal)
    k_in, k_out = abs(sg.slope(tgt.input_signal)), abs(sg.slope(tgt.output_signal))
    lim_fw = sg.deviations_in_firmware(limits, tgt.output_signal) if limits else None
    try:
        fw = analyze(
            replace(real.roots, gain=real.roots.gain * sc.gain),
            tgt.structure,
            tgt.word_format,
            band,
            b=[sc.gain * v for v in real.b],
            a=real.a,
            input_range=firmware.input_range * k_in,
            output_level=max(abs(lim_fw[0]), abs(lim_fw[1])) if lim_fw else firmware.output_level * k_out,
            input_resolution=firmware.stall_limit * k_in,
            response_limits=(case.criteria.max_gain_error_db, case.criteria.max_phase_error_deg),
        )
    except LoopshiftError as exc:
        raise type(exc)(exc.message, where=case.where("target.digital"), key="target.digital") from None
    sign = float(np.sign(np.real(real.roots.frequency_response(np.array([band[0]]))[0]))) or 1.0
    gains = _scaled_gains(analog, sc, band)
    card_action, fw_action = sg.action(sign), sg.action(sign * sc.gain)
    check = {
        "key": "firmware_direction",
        "label": "signal scaling keeps the controller's action end to end",
        "unit": "card output units",
        "limit": None,
        "value": None,
        "status": "fail",
        "note": f"{tgt.structure} in {tgt.word_format} cannot be built in firmware units: {fw.refused}",
    }
    if fw.realized is not None:
        card_m, fw_m = firmware.realized.model(), fw.realized.model()
        e = 0.25 * firmware.input_range
        u_card, u_back, diff = sg.end_to_end(card_m.step, fw_m.step, tgt.input_signal, tgt.output_signal, e)
        lsb = (
            firmware.realized.node_scales[-1] / 2 ** (firmware.realized.word.bits - 1)
            if firmware.realized.word.is_fixed
            else abs(u_card) * 2.0 ** -(firmware.realized.word.mantissa_bits - 8)
        )
        # the two realizations are quantized and rounded separately: agreement within 0.1 % (plus
        # 4 output LSB) shows sign and gain; a missed flip or factor is far outside it
        tol = 4 * lsb + 1e-3 * abs(u_card)
        ok = np.sign(u_card) == np.sign(u_back) and diff <= tol
        check.update(
            value=diff,
            limit=tol,
            status="pass" if ok else "fail",
            note=f"a constant error of {e:.4g} for 32 samples: the card-unit model gives {u_card:.6g}, the "
            f"firmware code mapped back {u_back:.6g} (agree within 0.1 %); card {card_action} acting, firmware {fw_action} acting in "
            "firmware units",
        )
    return {
        "text": sc.text + "; " + "; ".join(tgt.signal_text),
        "gain": sc.gain,
        "b": [sc.gain * v for v in real.b],  # the controller in firmware units (a unchanged), as the code holds it
        "inverted": sc.inverted,
        "card_action": card_action,
        "firmware_action": fw_action,
        "gains": gains,
        "input_range": firmware.input_range * k_in,
        "output_limits": lim_fw,
        "given_output_limits": tuple(limits) if limits else None,  # as given, in the card's units
        "ok": fw.ok,
        "failures": list(fw.failures) + ([fw.refused] if fw.refused else []),
        "analysis": fw,
        "check": check,
    }


def _scaled_gains(analog, sc, band) -> str:
    """The gains in firmware units: PID settings when the controller is a PID, else its gain
    at the band's ends."""
    try:
        pid = pid_from_controller(analog) if not analog.is_digital else None
    except LoopshiftError:
        pid = None
    if pid is not None:
        p = scale_pid(pid, sc)
        return f"scaled gains kp = {p.kp:.6g}, ki = {p.ki:.6g} 1/s, kd = {p.kd:.6g} s, {p.action} acting"
    resp = sc.gain * analog.frequency_response(np.array([band[0], band[-1]]))
    return (
        f"scaled gain × {sc.gain:.6g}: {abs(resp[0]):.6g} at {band[0]:.4g} Hz, {abs(resp[1]):.6g} at "
        f"{band[-1]:.4g} Hz (firmware units out per firmware unit in)"
    )


def _rate_advice(
    case, analog_src, src_margins, src_step=None, src_dist=None, duration=None, src_stability=None
) -> list[RateAdvice]:
    tgt = case.digital
    crit = case.criteria
    filtered, _ = _filtered(case, analog_src)
    lag = crit.max_phase_margin_change_deg if crit.max_phase_margin_change_deg is not None else crit.max_phase_error_deg
    fc = src_margins.crossover_hz if src_margins else None

    def conv(c, fs, m):
        if m == "pid_block":  # the block's own rule (its linear equivalent), float64 constants
            return _block_design(case, c, fs)
        cd = discretize(c, fs, m, prewarp_hz=tgt.prewarp_hz).controller
        if tgt.word_format == "float32":  # as the targets are built
            b32 = np.asarray(cd.b, dtype=np.float32).astype(float)
            a32 = np.asarray(cd.a, dtype=np.float32).astype(float)
            cd = Controller.from_b_a(b32, a32 / a32[0], 1.0 / fs)
        return cd

    check = None
    if case.plant is not None and src_margins is not None and (src_stability is None or src_stability.acceptable):
        check = _rate_loop_check(case, src_margins, src_step, src_dist, duration)
    return [
        advise(
            filtered,
            m,
            conv,
            band_hz=crit.band_hz,
            max_gain_error_db=crit.max_gain_error_db,
            max_phase_error_deg=crit.max_phase_error_deg,
            max_lag_deg=lag if fc else None,
            crossover_hz=fc,
            delay_s=tgt.delay_s,
            delay_samples=tgt.delay_samples,
            loop_check=check,
        )
        for m in (("pid_block",) if tgt.is_pid_block else tgt.methods)
    ]


def _block_design(case, filtered, fs):
    """The PID block's linear equivalent with exact constants at ``fs`` (for the rate advice)."""
    return linear_controller(PidBlock.from_settings(pid_from_controller(filtered), fs), stored=False)


def _rate_loop_check(case, src_margins, src_step, src_dist, duration):
    """The verdict's loop criteria for one candidate digital controller (for the rate advice):
    closed-loop stability, margin changes and, when set, step and disturbance deviations."""
    import types

    plant = case.plant
    crit = case.criteria.as_dict()
    wanted = [(key, label) for key, label, _ in CRITERIA if key in LOOP_CRITERIA and crit.get(key) is not None]
    needs_sim = any(key in ("max_step_deviation", "max_disturbance_deviation") for key, _ in wanted)
    limits = case.digital.output_limits or case.signals.output_range
    no_percentile = types.SimpleNamespace(key="total", percentile=None)

    def check(digital: Controller, delay: float) -> list[str]:
        if not loop_stability(digital, plant.model, plant.dead_time_s, delay_s=delay).acceptable:
            return ["closed-loop stability"]
        if not wanted:
            return []
        r = Realization(
            name="candidate",
            form="digital",
            controller=digital,
            details={},
            budget=[no_percentile],
            seen=lambda f: f,
            margins=loop_margins(digital, plant.model, plant.dead_time_s, delay_s=delay),
        )
        if needs_sim and duration is not None:
            try:
                r.step, r.disturbance = _simulate_pair(case, digital, duration, delay, limits)
            except InputError:
                pass  # a simulation too long for this rate: judged on the other criteria
        figures = _loop_figures(src_margins, r, src_step, src_dist, case)
        return [label for key, label in wanted if figures.get(key) is not None and abs(figures[key]) > crit[key]]

    return check


def _loop_figures(src_m: Margins, r: Realization, src_step, src_dist, case) -> dict:
    f: dict = {}
    m = r.margins
    if m is None:
        return f
    total = next(row for row in r.budget if row.key == "total")
    if total.percentile is not None:  # Monte Carlo: the percentile of the change over the draws
        for key, attr in (
            ("max_phase_margin_change_deg", "delta_phase_margin_deg"),
            ("max_gain_margin_change_db", "delta_gain_margin_db"),
            ("max_sensitivity_peak_change_db", "delta_sensitivity_peak_db"),
        ):
            f[key] = getattr(total, attr)
            f[f"{key}_note"] = f"p{total.percentile:g} over the Monte Carlo draws"
        m = None
    for key, attr in (
        ("max_phase_margin_change_deg", "phase_margin_deg"),
        ("max_gain_margin_change_db", "gain_margin_db"),
        ("max_sensitivity_peak_change_db", "sensitivity_peak_db"),
    ):
        if m is None:
            break
        a, b = getattr(src_m, attr), getattr(m, attr)
        if a is None and b is None:
            f[key], f[f"{key}_note"] = 0.0, "neither loop has this figure"
        elif (a is None or b is None) and attr == "phase_margin_deg":
            # one loop crosses 0 dB and the other never does: the largest change there is
            f[key] = math.inf
            f[f"{key}_note"] = (
                f"unbounded: the {'source' if a is None else 'new'} loop has no gain crossover (no phase margin) "
                f"where the {'new' if a is None else 'source'} loop has one ({(b if a is None else a):.3g} deg)"
            )
        elif (a is None or b is None) and attr == "gain_margin_db":
            # no phase crossover is an infinite gain margin: a finite one on the other side is no small change
            f[key] = math.inf
            f[f"{key}_note"] = (
                f"unbounded: the {'source' if a is None else 'new'} loop has no phase crossover (an infinite gain "
                f"margin) where the {'new' if a is None else 'source'} loop has one ({(b if a is None else a):.3g} dB)"
            )
        elif a is None or b is None:
            f[key] = None
            f[f"{key}_note"] = f"{'source' if a is None else 'new'} loop has no {attr.replace('_', ' ')}"
        else:
            f[key] = b - a
    if r.step is not None and src_step is not None:
        f["max_step_deviation"] = response_deviation(src_step, r.step) / abs(case.signals.setpoint_step)
    if r.disturbance is not None and src_dist is not None:
        peak = float(np.max(np.abs(src_dist.y))) or 1.0
        f["max_disturbance_deviation"] = response_deviation(src_dist, r.disturbance) / peak
    st = getattr(r, "stability", None)
    if st is not None and not st.stable:
        # an unstable loop's margins describe no working loop (its stability row fails the verdict)
        for key in ("max_phase_margin_change_deg", "max_gain_margin_change_db", "max_sensitivity_peak_change_db"):
            if key in f:
                f[key] = None
                f[f"{key}_note"] = (
                    "the closed loop with this realization is unstable: its margins describe no working loop"
                )
        # a simulated deviation of an unstable loop only measures how long the simulation ran
        for key in ("max_step_deviation", "max_disturbance_deviation"):
            if key in f:
                f[key] = math.inf
                f[f"{key}_note"] = (
                    "unbounded: the closed loop with this realization is unstable, so its response grows "
                    "without bound (the value at the simulation's end would only measure how long it ran)"
                )
    return f
