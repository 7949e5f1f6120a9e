"""Given targets of a case: forms that exist (firmware coefficients, a PID block as configured,
a card), checked against the source like the forms the tool makes.

The budget of a given form has only the rows that apply to it: nothing was converted or rounded
by the tool, so a given firmware has no discretization row (a PID block's own term-by-term
sampling is its discretization row) and a given card no rounding-to-series row; the hold and
computation delay, the word format, the part tolerances apply where the form has them. Each
row is computed from the form as it runs (its coefficients as stored, its parts as fitted).
"""

from __future__ import annotations

import numpy as np

from convert.compare import budget as bud
from convert.compare.frequency import response_seen_from_loop
from convert.controller import Controller
from convert.errors import UnrealizableError, InputError
from convert.given import given_controller
from convert.compare.loop import margin_grid, loop_margins
from convert.compare.stages import fmt_hz as _fmt_hz, fmt_s as _fmt_s, loop_spec
from convert.digital.quantized import analyze
from convert.digital.roots import RootForm
from convert.digital.velocity import VelocityForm
from convert.values import format_value
from convert.circuit.tolerance import DEFAULT_DRAWS, Comparison, run_tolerances
from convert.circuit.topologies import get_topology
from convert.compare.circuitwork import drawn_loop_grid, loop_count_of

DEFAULT_SEED = 1


def quantized(given, controller: Controller) -> Controller:
    """The firmware's controller with its coefficients stored in its word format.

    float64 is the reference (returned as is); float32 rounds each coefficient to single
    precision. Fixed-point formats are the word-format models' job (``convert.digital``): until
    one is wired in here the evaluation refuses them rather than check a stand-in."""
    word = given.data.get("word_format", "float64")
    if word == "float64":
        return controller
    if word == "float32":
        b = np.asarray(controller.b, dtype=np.float32).astype(float)
        a = np.asarray(controller.a, dtype=np.float32).astype(float)
        return Controller.from_b_a(b, a / a[0], controller.sample_period_s, name=controller.name)
    raise UnrealizableError(
        f"given form {given.name!r}: word format {word!r} is stored, but this version evaluates "
        "float64 and float32 coefficients only; a fixed-point check needs the word-format models",
        **given.located("word_format"),
    )


def given_realizations(
    case,
    src: Controller,
    band,
    src_margins,
    duration,
    src_step,
    src_dist,
    *,
    draws=None,
    tick=lambda text: None,
    source_weighted: bool = False,
) -> list:
    """One :class:`convert.compare.evaluate.Realization` per given form of ``case``."""
    out = []
    for given in case.given:
        info = given_controller(given, case)
        if given.form == "analog":
            out.append(_analog(case, given, info, src, band, duration))
        elif given.form == "circuit":
            out.append(_circuit(case, given, info, src, band, duration, src_step, src_dist, draws))
        else:
            out.append(_firmware(case, given, info, src, band, duration, src_step, src_dist))
        if source_weighted and case.plant is not None and not getattr(out[-1], "own_setpoint_path", False):
            # imported here, not at the top: import cycle (convert.compare.givenwork -> convert.compare.evaluate -> convert.compare.givenwork)
            from convert.compare.evaluate import WEIGHTS_NOT_CARRIED

            out[-1].warnings.append(WEIGHTS_NOT_CARRIED)
        tick(f"given {given.name}")
    return out


def _loop(case, controller: Controller):
    # imported here, not at the top: import cycle (convert.compare.givenwork -> convert.compare.evaluate -> convert.compare.givenwork)
    from convert.compare.evaluate import _loop_spec

    if case.plant is None:
        return None, None
    loop_f = margin_grid(controller, case.plant.model)
    return loop_f, _loop_spec(case, loop_f)


def _has_filter(ctrl: Controller) -> bool:
    """True when an analog controller has more poles than an ideal PID (a derivative filter or a lag)."""
    return len(ctrl.den) - 1 > 1 or (len(ctrl.den) == 2 and ctrl.den[-1] != 0)


def _firmware(case, given, info, src, band, duration, src_step, src_dist):
    d = given.data
    cd: Controller = info.controller
    cq = quantized(given, cd)
    delay = given.delay_for()
    fs = d["fs_hz"]
    if fs / 2 <= case.criteria.band_hz[1]:
        raise InputError(
            f"given form {given.name!r} runs at {fs:g} Hz: its Nyquist frequency ({fs / 2:g} Hz) is at or below "
            f"the band's top ({case.criteria.band_hz[1]:g} Hz); compare over a band below {fs / 2:g} Hz",
            **given.located("fs"),
        )
    loop_f, spec = _loop(case, cq)

    def lr(ctrl, delay_s=0.0, hold="none"):
        return None if loop_f is None else response_seen_from_loop(ctrl, loop_f, delay_s=delay_s, hold=hold, via="zpk")

    rows = {}
    if given.form == "pid":
        law = info.pid.to_controller()
        rows["discretization"] = bud.error_row(
            "discretization",
            band,
            law.frequency_response(band),
            cd.frequency_response(band, via="zpk"),
            note=f"the block's own sampling ({d['method']} term by term at {_fmt_hz(fs)}) against its PID law; "
            "no hold, no delay",
            loop=spec,
            loop_reference=lr(law),
            loop_candidate=lr(cd),
        )
        if not src.is_digital and (info.pid.tf > 0 or _has_filter(src)):
            # against the source's own law: a filter the source has too is no error
            rows["derivative_filter"] = bud.error_row(
                "derivative_filter",
                band,
                src.frequency_response(band, via="zpk"),
                law.frequency_response(band),
                note=f"the block's PID law (derivative filter time constant {_fmt_s(info.pid.tf)}) against the "
                "source's, both continuous: what its filter (and any other difference of its settings) changes",
                loop=spec,
                loop_reference=lr(src),
                loop_candidate=lr(law),
                forms=(src, law),  # the maxima refined off the grid, as the report's other rows
                evaluate=lambda f: (src.frequency_response(f, via="zpk"), law.frequency_response(f)),
            )
        elif info.pid.tf > 0:
            from dataclasses import replace

            bare = replace(info.pid, tf=0.0).to_controller()
            rows["derivative_filter"] = bud.error_row(
                "derivative_filter",
                band,
                bare.frequency_response(band),
                law.frequency_response(band),
                note=f"the block's derivative filter (time constant {_fmt_s(info.pid.tf)}) alone, in its PID law",
                loop=spec,
                loop_reference=lr(bare),
                loop_candidate=lr(law),
            )
        else:
            rows["derivative_filter"] = bud.not_applicable("derivative_filter", "the block has no derivative filter")
    else:
        rows["discretization"] = bud.not_applicable("discretization", "given coefficients: no conversion was made")
        rows["derivative_filter"] = bud.not_applicable("derivative_filter", "given coefficients: no filter was added")
    rows["hold_and_delay"] = bud.error_row(
        "hold_and_delay",
        band,
        cd.frequency_response(band, via="zpk"),
        response_seen_from_loop(cd, band, delay_s=delay, via="zpk"),
        note=f"zero-order hold at {_fmt_hz(fs)} and {_fmt_s(delay)} computation delay alone, on the given form",
        loop=spec,
        loop_reference=lr(cd),
        loop_candidate=lr(cd, delay, "zoh"),
    )
    if cq is cd:
        rows["word_format"] = bud.not_applicable("word_format", "float64 coefficients (the reference)")
    else:
        rows["word_format"] = bud.error_row(
            "word_format",
            band,
            cd.frequency_response(band, via="poly"),
            cq.frequency_response(band, via="poly"),
            note=f"coefficients stored as {d['word_format']} alone, against float64 (both in z, no hold)",
            loop=spec,
            loop_reference=lr(cd),
            loop_candidate=lr(cq),
        )
    rows["total"] = bud.error_row(
        "total",
        band,
        response_seen_from_loop(src, band, via="zpk"),
        response_seen_from_loop(cq, band, delay_s=delay, via="zpk"),
        note="the given form as it runs (word format, hold, delay) against the source as the loop sees it",
        loop=spec,
        loop_reference=lr(src, hold="zoh"),
        loop_candidate=lr(cq, delay, "zoh"),
        forms=(src, cq),
        evaluate=lambda f: (
            response_seen_from_loop(src, f, via="zpk"),
            response_seen_from_loop(cq, f, delay_s=delay, via="zpk"),
        ),
    )
    budget = bud.assemble(rows, bud.DIGITAL_ROWS, "given firmware")
    details = {
        "given": True,
        "fs_hz": fs,
        "delay_s": delay,
        "b": list(cq.b),
        "a": list(cq.a),
        "word_format": d["word_format"],
        "structure": d["structure"],
        "output_limits": d["output_limits"],
    }
    warnings = []
    if d.get("structure") not in (None, "direct") and not (
        given.form == "digital" and _one_polynomial_structure(d) != "direct1"
    ):
        warnings.append(
            f"structure {d['structure']!r} is recorded; its rounding inside the sections is not modelled "
            "(coefficients are checked as stored)"
        )
    if given.form == "pid":
        details.update(method=d["method"], algorithm=d["algorithm"], settings=d["settings"])
        if d["algorithm"] == "velocity":
            warnings.append(
                "velocity algorithm: the same linear law; it differs from the positional one at the "
                "output limits (no integral windup: the loop simulation runs it in velocity form) and on "
                "switch-over (bumpless by construction)"
            )
    r = _realization(
        case,
        given,
        "digital",
        cq,
        details,
        budget,
        warnings,
        lambda f, c=cq, dl=delay: response_seen_from_loop(c, f, delay_s=dl, via="zpk"),
    )
    fw = _stored_checks(case, given, cd, band)
    if fw is not None:
        r.details["firmware"] = fw
    if case.plant is not None:
        limits = d["output_limits"] or case.signals.output_range
        # a velocity algorithm adds its increments to the output it sent, clamped: run it so
        velocity = VelocityForm(cq, limits) if given.form == "pid" and d["algorithm"] == "velocity" else None
        _loop_checks(case, r, cq, duration, delay, limits, getattr(info, "pid", None), realized=velocity)
    return r


def _one_polynomial_structure(d: dict) -> str:
    """The structure the given coefficients run in when it is one the analysis models on a single
    polynomial b/a (direct form I or II transposed), else direct form I."""
    name = str(d.get("structure") or "").strip().lower().replace(" ", "").replace("-", "").replace("_", "")
    return "direct2t" if name in ("direct2t", "df2t", "directii", "direct2transposed") else "direct1"


def _stored_checks(case, given, cd: Controller, band) -> dict | None:
    """The word-format checks of given coefficients (stored poles, response, integrator stall,
    dead band) as a made target gets them (:func:`convert.digital.quantized.analyze`), in direct
    form I: the coefficients as given, one polynomial. None for float64 (the reference) and for a
    PID block (its own arithmetic is not this polynomial)."""
    d = given.data
    if given.form != "digital" or d.get("word_format", "float64") == "float64" or d.get("sos"):
        return None

    limits = d.get("output_limits") or case.signals.output_range
    x = analyze(
        RootForm.of(cd),
        _one_polynomial_structure(d),
        d["word_format"],
        band,
        b=cd.b,
        a=cd.a,
        output_level=max(abs(limits[0]), abs(limits[1])) if limits else None,
        response_limits=(case.criteria.max_gain_error_db, case.criteria.max_phase_error_deg),
    )
    return {**x.summary(), "checks": x.checks()}


def _analog(case, given, info, src, band, duration):
    ctrl: Controller = info.controller
    loop_f, spec = _loop(case, ctrl)

    def lr(c, hold="none"):
        return None if loop_f is None else response_seen_from_loop(c, loop_f, hold=hold, via="zpk")

    rows = {
        "total": bud.error_row(
            "total",
            band,
            response_seen_from_loop(src, band, via="zpk"),
            ctrl.frequency_response(band, via="zpk"),
            note="the given controller against the source as the loop sees it",
            loop=spec,
            loop_reference=lr(src, "zoh"),
            loop_candidate=lr(ctrl),
            forms=(src, ctrl),
            evaluate=lambda f: (response_seen_from_loop(src, f, via="zpk"), ctrl.frequency_response(f, via="zpk")),
        )
    }
    details = {
        "given": True,
        "expression": given.data.get("expression") or ctrl.expression(),
        "topology": f"C(s) = {ctrl.expression()}",
    }
    r = _realization(
        case,
        given,
        "analog",
        ctrl,
        details,
        bud.assemble(rows, (), "given analog"),
        [],
        lambda f, c=ctrl: c.frequency_response(f, via="zpk"),
    )
    if case.plant is not None:
        _loop_checks(case, r, ctrl, duration, 0.0, case.signals.output_range, getattr(info, "pid", None))
    return r


def _circuit(case, given, info, src, band, duration, src_step, src_dist, draws):
    d = given.data
    ctrl: Controller = info.controller
    loop_f, spec = _loop(case, ctrl)
    both_f = band if loop_f is None else np.concatenate([band, loop_f])
    tols = d["tolerances"]
    rows = {
        "series_rounding": bud.not_applicable("series_rounding", "given parts: nothing was rounded"),
        "derivative_filter": bud.not_applicable("derivative_filter", "given card: no filter was added"),
        "opamp_gbw": bud.not_applicable("opamp_gbw", "the given card is checked with ideal op-amps"),
    }
    nominal = ctrl.frequency_response(both_f, via="zpk")
    ref = response_seen_from_loop(src, both_f, via="zpk")
    drawn_total = None
    details = {"given": True}
    if "topology" in d:
        topo = get_topology(d["topology"])
        details.update(
            topology=topo.name,
            parts=dict(d["parts"]),
            parts_text={k: format_value(v, "ohm" if k[:1].upper() == "R" else "farad") for k, v in d["parts"].items()},
        )
        if tols:  # the one tolerance engine (chunked, bounded memory), as for a designed circuit
            n = int(draws or DEFAULT_DRAWS)
            loops = loop_f is not None
            mc_f = mc_spec = None
            if loops:  # each draw's margins on the grid a designed circuit's draws use, around the source loop's marks
                marks = spec.margins(ref[None, band.size :])
                mc_f = drawn_loop_grid(
                    *(float(marks[k][0]) for k in ("crossover_hz", "phase_crossover_hz", "sensitivity_peak_hz")),
                    band[-1],
                )
                mc_spec = loop_spec(case.plant, mc_f)
            mc = run_tolerances(
                topo,
                d["parts"],
                tols,
                band_f_hz=band,
                draws=n,
                seed=DEFAULT_SEED,
                parameters=False,
                comparisons=[
                    Comparison(
                        "tolerances",
                        nominal[: band.size],
                        None,
                        ctrl.frequency_response(mc_f, via="zpk") if loops else None,
                    ),
                    Comparison(
                        "total",
                        ref[: band.size],
                        None,
                        response_seen_from_loop(src, mc_f, via="zpk") if loops else None,
                    ),
                ],
                loop_f_hz=mc_f,
                loop_margins=mc_spec.margins if loops else None,
                loop_count=loop_count_of(ctrl, case.plant) if loops else None,
            )
            rows["tolerances"] = bud.drawn_row(
                "tolerances",
                mc.figures["tolerances"],
                note=f"{n} draws within ±tolerance ({', '.join(f'{k} {v * 100:g} %' for k, v in tols.items())}) "
                f"around the given parts alone; seed {DEFAULT_SEED}",
            )
            drawn_total = mc.figures["total"]
            details.update(tolerances=tols, draws=n, seed=DEFAULT_SEED)
        else:
            rows["tolerances"] = bud.not_applicable("tolerances", "no tolerances given for the card's parts")
    else:
        if tols:
            raise UnrealizableError(
                f"given form {given.name!r}: tolerances on a netlist's parts are not drawn by this "
                "version; give the card as a catalog topology with parts, or leave them out",
                **given.located("tolerances"),
            )
        rows["tolerances"] = bud.not_applicable("tolerances", "no tolerances given for the netlist's parts")
        details.update(netlist=str(d["netlist"]), topology=f"netlist {d['netlist'].name}")
    note = (
        "the given card"
        + (" with its tolerances" if drawn_total is not None else "")
        + " against the source as the loop sees it"
    )
    if drawn_total is not None:
        rows["total"] = bud.drawn_row("total", drawn_total, note=note, reference_form=src, band_f_hz=band)
    else:
        rows["total"] = bud.error_row(
            "total",
            band,
            ref[: band.size],
            nominal[: band.size],
            note=note,
            loop=spec,
            loop_reference=None if loop_f is None else ref[band.size :],
            loop_candidate=None if loop_f is None else nominal[band.size :],
            forms=(src, ctrl),
            evaluate=lambda f: (response_seen_from_loop(src, f, via="zpk"), ctrl.frequency_response(f, via="zpk")),
        )
    budget = bud.assemble(rows, bud.CIRCUIT_ROWS, "given card")
    r = _realization(
        case,
        given,
        "circuit",
        ctrl,
        details,
        budget,
        list(info.notes),
        lambda f, c=ctrl: c.frequency_response(f, via="zpk"),
    )
    if case.plant is not None:
        _loop_checks(case, r, ctrl, duration, 0.0, case.signals.output_range)
    return r


def _realization(case, given, form, controller, details, budget, warnings, seen):
    # imported here, not at the top: import cycle (convert.compare.givenwork -> convert.compare.evaluate -> convert.compare.givenwork)
    from convert.compare.evaluate import Realization

    return Realization(
        name=f"given {given.name}",
        form=form,
        controller=controller,
        details=details,
        budget=budget,
        seen=seen,
        warnings=warnings,
    )


def _loop_checks(case, r, controller, duration, delay, limits, pid=None, realized=None) -> None:
    """Margins and simulations of a given form; a PID block with setpoint weights b, c runs its
    own setpoint path (F = C_sp/C of its settings, sampled at its instants when it is firmware).
    ``realized``: a sample-by-sample model of the firmware (a velocity algorithm) for the runs."""
    # imported here, not at the top: import cycle (convert.compare.givenwork -> convert.compare.evaluate -> convert.compare.givenwork)
    from convert.compare.evaluate import _simulate_pair, setpoint_filter_of

    r.margins = loop_margins(controller, case.plant.model, case.plant.dead_time_s, delay_s=delay)
    if not controller.is_proper:
        r.warnings.append("time simulation skipped: the given form is improper")
        return
    try:
        own = setpoint_filter_of(pid)
        r.own_setpoint_path = own is not None
        r.step, r.disturbance = _simulate_pair(
            case, controller, duration, delay, limits, realized=realized, setpoint_filter=own
        )
    except InputError as exc:
        r.warnings.append(f"time simulation skipped: {exc.message}")
