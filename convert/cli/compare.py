"""``loopshift compare A B``: two forms that exist, compared without a case file.

Exit codes as ``report``: 0 every checked criterion passes, 1 one fails, 2 bad input.
Only argparse is imported at module level.
"""

from __future__ import annotations

import argparse

HELP = "compare two existing forms (expression, PID, firmware coefficients, card): errors, agreement band, verdict"

DESCRIPTION = """\
Compare the form B with the reference A over a band: the gain and phase error at spot
frequencies, the largest errors, the band where they agree, the loop margins of both with
a plant (--plant), and a verdict against the limits. B is taken as it runs: a digital form
with its zero-order hold and computation delay; the error of its coefficients alone is
shown beside it.

A and B are each one of (words are KEY=VALUE, no spaces inside a value):
  "2*(1 + 1/(30s))"                       a transfer function in s (in z with --fs)
  "pid: kc=2 ti=30s td=5s n=10"           analog PID settings (the --pid keys of `show`)
  "pid: kc=2 ti=30s fs=10Hz method=tustin algorithm=velocity delay=1sample limits=-40,60"
                                          a firmware PID block as configured
  "digital: b=0.5125,-0.4875 a=1,-1 fs=10Hz delay=20ms word=float32"
                                          firmware coefficients (ascending z^-1; or
                                          sos=b0,b1,b2,a0,a1,a2;... for sections)
  "card: topology=pi-rc-feedback R1=100k R2=200k C1=4.7u tol=R:1%,C:5%"
                                          a catalog card with its parts
  cards/flow.cir  or  "netlist: cards/flow.cir setpoint=VSP measurement=VPV"
                                          a SPICE netlist of the card

The tool computes; it does not certify. Verify on a bench or in simulation before a live
swap, plan a bumpless transfer, keep safety functions independent of this controller."""

EPILOG = """\
examples:
  loopshift compare "1.0*(1 + 1/(120s))" "digital: b=1.000416667,-0.999583333 a=1,-1 fs=10Hz"
  loopshift compare "pid: kc=1 ti=2min" "pid: kc=1 ti=2min fs=10Hz delay=1sample" \\
      --plant "0.04/(s*(15s + 1))" --dead-time 2s --max-phase-margin-change 3
  loopshift compare cases/cards/flow_pi_card.cir "pid: kc=1.09 ti=0.82s" --band 10mHz 2Hz
  loopshift compare "(s+2)/(s+20)" "(0.0952*z - 0.0861)/(z - 0.8187)" --fs 100Hz --json

Exit code 0 pass, 1 fail, 2 bad input. Details: docs/compare.md"""

LIMIT_OPTIONS = (
    (
        "--max-gain-error",
        "max_gain_error_db",
        "number",
        "largest gain error over the band, dB (default 1), e.g. --max-gain-error 0.5",
    ),
    (
        "--max-phase-error",
        "max_phase_error_deg",
        "number",
        "largest phase error over the band, deg (default 5), e.g. --max-phase-error 3",
    ),
    (
        "--max-phase-margin-change",
        "max_phase_margin_change_deg",
        "number",
        "largest phase-margin change with --plant, deg, e.g. --max-phase-margin-change 3",
    ),
    (
        "--max-gain-margin-change",
        "max_gain_margin_change_db",
        "number",
        "largest gain-margin change with --plant, dB, e.g. --max-gain-margin-change 1",
    ),
    (
        "--max-peak-change",
        "max_sensitivity_peak_change_db",
        "number",
        "largest sensitivity-peak change with --plant, dB, e.g. --max-peak-change 0.5",
    ),
    (
        "--max-step-deviation",
        "max_step_deviation",
        "ratio",
        "largest setpoint-step response deviation with --plant, fraction of the step, e.g. --max-step-deviation 3%%",
    ),
    (
        "--max-disturbance-deviation",
        "max_disturbance_deviation",
        "ratio",
        "largest load-step response deviation with --plant, fraction of the peak, e.g. --max-disturbance-deviation 5%%",
    ),
)


def add_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser(
        "compare",
        help=HELP,
        description=DESCRIPTION,
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("a", metavar="A", help='the reference form, e.g. "2*(1 + 1/(30s))" or "pid: kc=2 ti=30s"')
    p.add_argument(
        "b", metavar="B", nargs="?", help='the form to check against A, e.g. "digital: b=0.51,-0.49 a=1,-1 fs=10Hz"'
    )
    p.add_argument("--fs", metavar="HZ", help="sample rate of a digital A or B that names none, e.g. --fs 10Hz")
    p.add_argument(
        "--band",
        nargs=2,
        metavar=("LOW", "HIGH"),
        help="band of comparison, e.g. --band 10mHz 2Hz (default: a decade beyond the corners)",
    )
    p.add_argument("--plant", metavar="EXPR", help='plant model in s for the loop checks, e.g. --plant "1.2/(0.8s+1)"')
    p.add_argument("--dead-time", metavar="S", help="plant dead time, e.g. --dead-time 300ms (default 0)")
    p.add_argument(
        "--output-limits",
        nargs=2,
        metavar=("LOW", "HIGH"),
        help="actuator range clamping both loops' outputs in the step tests, e.g. --output-limits -10 10",
    )
    for option, _key, _kind, text in LIMIT_OPTIONS:
        p.add_argument(option, metavar="X", help=text)
    p.add_argument(
        "--draws",
        metavar="N",
        type=int,
        help="Monte Carlo draws for a card with tolerances (default 2000), e.g. --draws 500",
    )
    g = p.add_argument_group("evidence: a bench sweep of A (instead of B)")
    g.add_argument(
        "--sweep",
        metavar="FILE",
        help="measured frequency response of A as CSV, header e.g. "
        "'frequency (Hz),gain (dB),phase (deg)', e.g. --sweep bench.csv",
    )
    g.add_argument(
        "--sweep-columns",
        nargs="+",
        metavar="ROLE=NAME",
        help="map other headers: roles frequency, gain, phase, coherence, e.g. --sweep-columns frequency=Freq gain=Mag",
    )
    g.add_argument(
        "--sweep-units",
        nargs="+",
        metavar="ROLE=UNIT",
        help="units where the header has none: Hz kHz MHz rad/s; dB V/V; deg rad, e.g. --sweep-units gain=V/V",
    )
    g.add_argument(
        "--decimal",
        metavar="C",
        default=".",
        help="the file's decimal mark: . (default) or , (then fields are separated by ; or tabs), e.g. --decimal ,",
    )
    g.add_argument(
        "--averages",
        metavar="N",
        type=int,
        help="averages the analyzer used; with a coherence column it gives each point's noise, e.g. --averages 10",
    )
    g.add_argument(
        "--min-coherence",
        metavar="X",
        help="lowest coherence of a trusted point (default 0.9), e.g. --min-coherence 0.95",
    )
    g.add_argument(
        "--inverted",
        action="store_true",
        help="the bench read an inverting stage at its output: the measurement is −A, e.g. --inverted",
    )
    g.add_argument(
        "--fit",
        nargs="*",
        metavar="NAME",
        help="estimate A's values from the sweep (all parts or PID parameters, or the NAMEs given), "
        "e.g. --fit or --fit R7 RV1",
    )
    lg = p.add_argument_group("evidence: a plant log, replayed through A (and B)")
    lg.add_argument(
        "--log",
        metavar="FILE",
        help="logged controller input and output as CSV, header e.g. "
        "'time (s),error,output' or 'time (s),setpoint,measurement,output', "
        "e.g. --log plant.csv",
    )
    lg.add_argument(
        "--log-columns",
        nargs="+",
        metavar="ROLE=NAME",
        help="map other headers: roles time, setpoint, measurement, error, output, e.g. --log-columns "
        "time=Timestamp output=MV",
    )
    lg.add_argument(
        "--log-units",
        nargs="+",
        metavar="ROLE=UNIT",
        help="time unit where the header has none: s ms min h, e.g. --log-units time=ms",
    )
    lg.add_argument(
        "--max-residual-rms",
        metavar="X",
        help="largest RMS replay residual about its offset, as a "
        "fraction of the output's range, e.g. --max-residual-rms 1%%",
    )
    lg.add_argument(
        "--max-residual-peak",
        metavar="X",
        help="largest peak replay residual about its offset, as a "
        "fraction of the output's range, e.g. --max-residual-peak 5%%",
    )
    p.add_argument("--json", action="store_true", help="print the results as JSON, e.g. --json")
    return p


def run(args, console) -> int:
    from pathlib import Path

    from convert.cli.common import at, band_from_args, count, emit_json, positive_value
    from convert.compare.pair import compare_pair
    from convert.errors import InputError
    from convert.given import read_spec
    from convert.values import parse_fraction, parse_value

    for option in ("sweep_columns", "sweep_units", "averages", "min_coherence"):
        if getattr(args, option) is not None and args.sweep is None:
            raise InputError("needs --sweep FILE.csv", key="--" + option.replace("_", "-"))
    if args.inverted and args.sweep is None:
        raise InputError("needs --sweep FILE.csv", key="--inverted")
    if args.fit is not None and args.sweep is None and args.log is None:
        raise InputError("needs a measurement: --sweep FILE.csv or --log FILE.csv", key="--fit")
    for option in ("log_columns", "log_units", "max_residual_rms", "max_residual_peak"):
        if getattr(args, option) is not None and args.log is None:
            raise InputError("needs --log FILE.csv", key="--" + option.replace("_", "-"))
    if args.sweep is not None and args.log is not None:
        raise InputError("give one measurement at a time: --sweep or --log", key="--log")
    if args.b is None and args.sweep is None and args.log is None:
        raise InputError(
            "give the form B to compare A with, or a measurement of A (--sweep FILE.csv or --log FILE.csv)",
            where="command line",
        )
    if args.b is not None and args.sweep is not None:
        raise InputError("a sweep is evidence about A alone; give B or --sweep, not both", key="--sweep")
    if args.decimal not in (".", ","):
        raise InputError(f"expected . or , found {args.decimal!r}", key="--decimal")
    fs = positive_value(args.fs, "hz", "--fs") if args.fs is not None else None
    band = band_from_args(args.band)
    dead = parse_value(args.dead_time, "second", field="--dead-time") if args.dead_time is not None else 0.0
    if dead < 0:
        raise InputError(f"expected zero or a positive time, found {args.dead_time!r}", key="--dead-time")
    limits_out = None
    if args.output_limits:
        limits_out = tuple(parse_value(v, "number", field="--output-limits") for v in args.output_limits)
        if not limits_out[0] < limits_out[1]:
            raise InputError("expected LOW < HIGH", key="--output-limits")
    limits = {}
    for option, key, kind, _ in LIMIT_OPTIONS:
        text = getattr(args, option[2:].replace("-", "_"))
        if text is not None:
            value = (
                parse_fraction(text, field=option, allow_one=False)
                if kind == "ratio"
                else parse_value(text, kind, field=option)
            )
            if not value > 0:
                raise InputError(f"expected a positive limit, found {text!r}", key=option)
            limits[key] = value
    draws = count(args.draws, "--draws", low=1, high=1_000_000) if args.draws is not None else None
    if draws is not None:
        from convert.circuit.tolerance import draws_problem

        if draws_problem(draws):
            raise InputError(draws_problem(draws), key="--draws")
    with at(None):  # names the settings a spec's error mentions (an expression in z: --fs)
        a = read_spec(args.a, "A", fs_hz=fs, base_dir=Path.cwd())
    if args.sweep is not None:
        return _run_sweep(args, console, a, band, limits)
    if args.log is not None:
        with at(None):
            b = read_spec(args.b, "B", fs_hz=fs, base_dir=Path.cwd()) if args.b is not None else None
        return _run_log(args, console, a, b, limits_out)
    with at(None):
        b = read_spec(args.b, "B", fs_hz=fs, base_dir=Path.cwd())
    result = compare_pair(
        a,
        b,
        band_hz=band,
        plant_expression=args.plant,
        dead_time_s=dead,
        output_range=limits_out,
        limits=limits,
        draws=draws,
        names={"band": "--band", "plant": "--plant", "dead time": "--dead-time"},
    )
    if args.json:
        emit_json(console, pair_json(result))
    else:
        _render(console, result)
    return result.exit_code


def _pairs(words, option: str) -> dict:
    from convert.errors import InputError

    out = {}
    for word in words or ():
        key, sep, value = word.partition("=")
        if not sep or not key or not value:
            raise InputError(f"expected ROLE=VALUE, found {word!r}", key=option)
        out[key.strip()] = value.strip()
    return out


def _run_sweep(args, console, a, band, limits) -> int:
    from convert.cli.common import at, emit_json, positive_value
    from convert.errors import InputError
    from convert.evidence.sweep import MIN_COHERENCE, read_sweep, sweep_evidence

    min_coh = MIN_COHERENCE
    if args.min_coherence is not None:
        min_coh = positive_value(args.min_coherence, "ratio", "--min-coherence")
        if min_coh > 1:
            raise InputError(f"coherence lies between 0 and 1, found {args.min_coherence}", key="--min-coherence")
    if args.averages is not None and args.averages < 1:
        raise InputError(f"expected a whole number of at least 1, found {args.averages}", key="--averages")
    with at(None):
        sweep = read_sweep(
            args.sweep,
            columns=_pairs(args.sweep_columns, "--sweep-columns"),
            units=_pairs(args.sweep_units, "--sweep-units"),
            decimal=args.decimal,
            averages=args.averages,
            option="--sweep-columns",
        )
    ev = sweep_evidence(
        a,
        sweep,
        band_hz=band,
        limits=limits,
        inverted=args.inverted,
        min_coherence=min_coh,
        fit=args.fit is not None,
        fit_names=tuple(args.fit) if args.fit else None,
    )
    if args.json:
        data = ev.as_dict()
        data["a"] = a.summary()
        emit_json(console, data)
    else:
        render_sweep(console, a, ev)
    return 0 if ev.verdict.overall == "pass" else 1


def _run_log(args, console, a, b, output_limits) -> int:
    from convert.cli.common import at, emit_json
    from convert.errors import InputError
    from convert.evidence.log import log_evidence
    from convert.values import parse_fraction

    if args.fit:
        raise InputError("a log fits A's PID parameters (kp, ki, kd); give --fit without names", key="--fit")
    fit = None
    if args.fit is not None:
        if "pid" not in a.data:
            raise InputError(
                'fitting from a log needs A as PID settings or a PID block ("pid: kc=... ti=...")', key="--fit"
            )
        fit = a
    forms = [("A", a)] + ([("B", b)] if b is not None else [])
    if output_limits is None:
        output_limits = a.data.get("output_limits")
    limits = {}
    for option, key in (("--max-residual-rms", "max_residual_rms"), ("--max-residual-peak", "max_residual_peak")):
        text = getattr(args, key)
        if text is not None:
            value = parse_fraction(text, field=option, allow_one=False)
            if not value > 0:
                raise InputError(f"expected a positive fraction, found {text!r}", key=option)
            limits[key] = value
    with at(None):
        ev = log_evidence(
            args.log,
            forms,
            columns=_pairs(args.log_columns, "--log-columns"),
            units=_pairs(args.log_units, "--log-units"),
            decimal=args.decimal,
            output_limits=output_limits,
            fit=fit,
            option="--log-columns",
        )
    verdict = judge_log(ev, limits)
    if args.json:
        data = ev.as_dict()
        data.pop("sketch", None)
        data["a"] = a.summary()
        data["b"] = b.summary() if b is not None else None
        data["verdict"] = verdict
        emit_json(console, data)
    else:
        render_log(console, ev, verdict)
    return 1 if verdict["overall"] in ("fail", "unchecked") else 0


def judge_log(ev, limits: dict) -> dict:
    """Each replay's relative residual against the limits: {"overall", "judgements"}; "none"
    when no limit was given (figures only, nothing judged); "unchecked" when nothing failed but a
    form could not be judged (``figures["unjudged"]``: most rows left out, or a setpoint path the
    log cannot show): never a pass."""
    out = []
    for r in ev.replays:
        for key, fig in (("max_residual_rms", "rms_rel"), ("max_residual_peak", "peak_rel")):
            if key not in limits:
                continue
            value = r.figures.get(fig)
            why = r.figures.get("unjudged")
            status = "unchecked" if why else "fail" if value is None or value > limits[key] else "pass"
            out.append(
                {
                    "form": r.name,
                    "criterion": key,
                    "value": None if why else value,
                    "limit": limits[key],
                    "status": status,
                    "note": why or "",
                }
            )
    statuses = {j["status"] for j in out}
    overall = (
        "none" if not out else "fail" if "fail" in statuses else "unchecked" if "unchecked" in statuses else "pass"
    )
    return {"overall": overall, "judgements": out}


def render_log(console, ev, verdict) -> None:
    """The log evidence as text: what the log holds, what was left out, each form's residual."""
    from convert.values import format_value

    def sec(x):
        return format_value(x, "second", 4) if x < 60 else f"{x:.6g} s"

    console.print(
        f"log: {ev.path.name}, {ev.rows:,} rows, {sec(ev.t_span_s[0])} .. {sec(ev.t_span_s[1])}, "
        f"step {sec(ev.step_s)}" + (" (uneven; replayed at each row's own step)" if ev.uneven else ""),
        markup=False,
    )
    console.print(
        f"input: {ev.input_kind}; output range {ev.output_range[0]:.6g} .. {ev.output_range[1]:.6g}", markup=False
    )
    if ev.gap_count:
        first = ", ".join(f"{sec(a)} .. {sec(b)}" for a, b in ev.gaps[:3])
        console.print(
            f"gaps (step over {5:g}× the usual): {ev.gap_count}, e.g. {first}; the input is interpolated across them",
            markup=False,
        )
    if ev.saturated_rows:
        first = ", ".join(f"{sec(a)} .. {sec(b)}" for a, b in ev.saturated_spans[:3])
        console.print(
            f"output at a limit: {ev.saturated_rows:,} rows (e.g. {first}); left out of a form's figures only "
            "where its replay is at or beyond that limit too",
            markup=False,
        )
    if ev.missing_rows:
        console.print(f"rows with an empty or NaN cell: {ev.missing_rows:,}, skipped", markup=False)
    for r in ev.replays:
        f = r.figures
        if not f["n"]:
            console.print(f"{r.name}: no usable rows", markup=False)
            if f.get("unjudged"):
                console.print(f"{r.name} not judged: {f['unjudged']}", markup=False)
            continue
        console.print(
            f"{r.name} replayed: offset {f['offset']:.4g} ({100 * (f['offset_rel'] or 0):.3g} % of range, "
            f"reported, not removed from the log); about it RMS {f['rms']:.4g} "
            f"({100 * (f['rms_rel'] or 0):.3g} %), peak {f['peak']:.4g} ({100 * (f['peak_rel'] or 0):.3g} %) "
            f"over {f['n']:,} rows"
            + (f"; {f['saturated']:,} saturated rows left out" if f.get("saturated") else "")
            + (
                f"; {f['at_limit_judged']:,} rows at a limit its replay does not reach are judged"
                if f.get("at_limit_judged")
                else ""
            )
            + (f"; input: {f['input']}" if f.get("input") and f["input"] != ev.input_kind else ""),
            markup=False,
        )
        if f.get("unjudged"):
            console.print(f"{r.name} not judged: {f['unjudged']}", markup=False)
    if ev.fit is not None:
        fit = ev.fit
        console.print(f"fit of the {fit.form} from the log ({fit.rows:,} rows; 95 % intervals):", markup=False)
        for n in fit.names:
            console.print(f"  {n} = {fit.values[n]:.6g} ± {fit.ci95[n]:.3g}", markup=False)
        if fit.tf_s:
            console.print(f"  (derivative filter time constant held at {fit.tf_s:.4g} s)", markup=False)
        console.print(f"  offset {fit.offset:.4g}; residual RMS {fit.residual_rms:.4g}", markup=False)
        for note in fit.notes:
            console.print(f"  note: {note}", markup=False)
    for note in ev.notes:
        console.print(f"note: {note}", markup=False)
    for j in verdict["judgements"]:
        if j["status"] == "unchecked":
            console.print(f"{j['form']}: {j['criterion'].replace('_', ' ')} UNCHECKED (see above)", markup=False)
            continue
        value = "—" if j["value"] is None else f"{100 * j['value']:.3g} %"
        console.print(
            f"{j['form']}: {j['criterion'].replace('_', ' ')} {value} (limit {100 * j['limit']:g} %) "
            f"{j['status'].upper()}",
            markup=False,
        )
    if verdict["overall"] == "none":
        console.print("verdict: none (no residual limit given: figures only, nothing judged)", markup=False)
    elif verdict["overall"] == "unchecked":
        console.print("verdict: UNCHECKED (a form could not be judged from this log; not a pass)", markup=False)
    else:
        console.print(f"verdict: {verdict['overall'].upper()}", markup=False)
    console.print(
        "The tool computes; it does not certify. Verify on a bench or in simulation before a live swap.", markup=False
    )


def render_sweep(console, a, ev) -> None:
    """The sweep evidence as text: error vs frequency with the noise, trusted band, verdict, fit."""
    import numpy as np

    from convert.given import describe
    from convert.values import format_value

    def hz(x):
        return format_value(x, "hz", 4)

    sw, chk = ev.sweep, ev.check
    console.print(f"A (model): {_what(a, describe)}", markup=False)
    console.print(
        f"sweep: {sw.path.name}, {sw.f_hz.size} points, {hz(sw.f_hz[0])} .. {hz(sw.f_hz[-1])}"
        + (f", {sw.repeats} repeats" if sw.repeats > 1 else ""),
        markup=False,
    )
    console.print(f"noise (1 σ): {chk.noise_source}", markup=False)
    console.print(
        f"band {hz(ev.band_hz[0])} .. {hz(ev.band_hz[1])}" + (" (the sweep's range)" if ev.band_default else ""),
        markup=False,
    )
    trusted = ", ".join(f"{hz(lo)} .. {hz(hi)}" for lo, hi in chk.trusted_bands) or "nowhere"
    console.print(f"trusted (noise and coherence good enough to judge the limits): {trusted}", markup=False)
    picks = _spread(sw.f_hz, 12)
    rows = [
        [
            hz(sw.f_hz[i]),
            f"{20 * np.log10(abs(sw.response[i])):.3f}",
            f"{20 * np.log10(abs(ev.model[i])):.3f}",
            f"{chk.gain_error_db[i]:+.3f} ± {2 * chk.noise_db[i]:.3f}",
            f"{chk.phase_error_deg[i]:+.2f} ± {2 * chk.noise_deg[i]:.2f}",
            "yes" if chk.trusted[i] else "no",
        ]
        for i in picks
    ]
    header = ["frequency", "measured dB", "model dB", "gain error dB", "phase error deg", "trusted"]
    console.print(_fitted_table(console, "measured against the model (error ± 2σ noise)", header, rows, "right"))
    for j in ev.verdict.judgements:
        if j.status != "not set":
            figure = "no figure" if j.value is None else f"{j.value:.3g} {j.unit}"
            limit = "" if j.limit is None else f" (limit {j.limit:g})"
            status = "NOT JUDGED" if j.status == "skipped" else j.status.upper()
            console.print(f"{j.label}: {figure}{limit} {status}" + (f" — {j.note}" if j.note else ""), markup=False)
    for note in chk.notes:
        console.print(f"note: {note}", markup=False)
    if ev.fit is not None:
        _render_fit(console, ev.fit)
    console.print(f"verdict: {ev.verdict.overall.upper()} (the measurement against the model of A)", markup=False)
    console.print(
        "The tool computes; it does not certify. Verify on a bench or in simulation before a live swap.", markup=False
    )


def _spread(f, n: int) -> list[int]:
    import numpy as np

    if f.size <= n:
        return list(range(f.size))
    return sorted(set(np.round(np.linspace(0, f.size - 1, n)).astype(int).tolist()))


def _render_fit(console, fit) -> None:
    from convert.evidence.fit import value_text

    console.print(
        f"fit of the {fit.model} (weighted least squares; 95 % intervals; χ²/dof {fit.chi2_dof:.3g} "
        f"after, {fit.chi2_dof_drawn:.3g} as drawn):",
        markup=False,
    )
    for v in fit.values:
        drawn = value_text(v.drawn, v.kind, 4)
        if v.determined:
            mark = "  (changed)" if v.significant else ""
            console.print(
                f"  {v.name} measures as {value_text(v.fitted, v.kind, 3)} ± {100 * v.ci95_fraction:.2g} %, "
                f"drawn {drawn}{mark}",
                markup=False,
            )
        else:
            console.print(
                f"  {v.name}: not determined alone by this measurement (kept as drawn, {drawn})", markup=False
            )
    if fit.undetermined:
        console.print("  determined: " + ", ".join(fit.determined), markup=False)
        console.print(
            "  cannot be told apart (these move without changing the response): " + ", ".join(fit.undetermined),
            markup=False,
        )
    console.print("single changes that could explain the measurement (each value alone, best first):", markup=False)
    for s in fit.singles[:5]:
        console.print(
            f"  {s.name}: {value_text(s.drawn, s.kind, 4)} -> {value_text(s.fitted, s.kind, 4)}, "
            f"χ²/dof {s.chi2_dof:.3g}" + ("  explains the measurement" if s.explains else ""),
            markup=False,
        )
    if not any(s.explains for s in fit.singles):
        console.print("  no single change explains it to its noise", markup=False)
    for note in fit.notes:
        console.print(f"  note: {note}", markup=False)


def pair_json(result) -> dict:
    """The comparison as plain data (what --json prints)."""
    res = result.results
    r = result.realization
    out = {
        "a": result.a.summary(),
        "b": result.b.summary(),
        "a_controller": {"num": list(res.reference.num), "den": list(res.reference.den), "fs_hz": res.reference.fs_hz},
        "band_hz": list(result.band_hz),
        "band_default": result.band_default,
        "error": result.error.summary(),
        "coefficients_error": result.coefficients_error.summary() if result.coefficients_error else None,
        "spots": result.spots,
        "agreement": {
            "intervals_hz": [list(x) for x in result.agreement],
            "searched_hz": list(result.agreement_grid_hz),
            "gain_db": result.gain_limit_db,
            "phase_deg": result.phase_limit_deg,
        },
        "budget": [row.as_dict() for row in r.budget if row.applicable],
        "margins": None
        if res.source_margins is None
        else {"a": res.source_margins.as_dict(), "b": r.margins.as_dict() if r.margins else None},
        "verdict": res.verdict.overall,
        "judgements": [j.as_dict() for j in res.verdict.judgements if j.status != "not set"],
        "notes": result.notes + list(res.notes) + list(r.warnings),
    }
    return out


def _fitted_table(console, title: str, header: list[str], rows: list[list[str]], justify):
    """A rich table of plain text fitted to the console's width (convert.cli.common.fit_columns:
    words wrap, never break, so every column stays on screen). ``justify``: one for all columns
    or one per column."""
    from rich import box
    from rich.table import Table
    from rich.text import Text

    from convert.cli.common import fit_columns

    widths, head, cells = fit_columns(header, rows, console.width)
    how = [justify] * len(header) if isinstance(justify, str) else list(justify)
    table = Table(  # one space of padding and the box's blank divider: the two columns fit_columns leaves
        title=Text(title),
        title_justify="left",
        box=box.SIMPLE_HEAD,
        show_edge=False,
        pad_edge=False,
        padding=(0, 1, 0, 0),
    )
    for text, w, j in zip(head, widths, how):
        table.add_column(Text(text), width=w, no_wrap=True, justify=j)
    for row in cells:
        table.add_row(*(Text(c) for c in row))
    return table


def _render(console, result) -> None:

    from convert.given import describe
    from convert.values import format_value

    def hz(x):
        return format_value(x, "hz", 4)

    res = result.results
    r = result.realization
    for alarm in res.alarms:  # an unstable or sign-inverted loop comes before any figure
        console.print(f"LOOP NOT WORKING: {alarm}", markup=False, style="bold red")
    console.print(f"A (reference): {_what(result.a, describe)}", markup=False)
    console.print(f"B (checked):   {_what(result.b, describe)}", markup=False)
    console.print(
        f"band {hz(result.band_hz[0])} .. {hz(result.band_hz[1])}" + (" (default)" if result.band_default else ""),
        markup=False,
    )
    rows = [
        [
            hz(s["f_hz"]),
            f"{s['gain_a_db']:.3f}",
            f"{s['gain_b_db']:.3f}",
            f"{s['gain_error_db']:+.4f}",
            f"{s['phase_error_deg']:+.3f}",
        ]
        for s in result.spots
    ]
    header = ["frequency", "|A| dB", "|B| dB", "gain error dB", "phase error deg"]
    console.print(
        _fitted_table(console, "error of B against A (B as it runs: hold and delay included)", header, rows, "right")
    )
    e = result.error
    console.print(
        f"largest over the band: gain {e.max_gain_error_db:.4g} dB at {hz(e.max_gain_error_at_hz)}, "
        f"phase {e.max_phase_error_deg:.4g} deg at {hz(e.max_phase_error_at_hz)}",
        markup=False,
    )
    if e.unbounded_note:
        console.print(f"the error is {e.unbounded_note}", markup=False)
    if result.coefficients_error is not None:
        c = result.coefficients_error
        console.print(
            f"coefficients alone (no hold, no delay): gain {c.max_gain_error_db:.4g} dB, "
            f"phase {c.max_phase_error_deg:.4g} deg",
            markup=False,
        )
    lim = f"{result.gain_limit_db:g} dB and {result.phase_limit_deg:g} deg"
    if result.agreement:
        spans = ", ".join(f"{hz(lo)} .. {hz(hi)}" for lo, hi in result.agreement)
        console.print(
            f"agree within {lim} over: {spans} (searched {hz(result.agreement_grid_hz[0])} .. "
            f"{hz(result.agreement_grid_hz[1])})",
            markup=False,
        )
    else:
        console.print(
            f"they agree within {lim} nowhere in {hz(result.agreement_grid_hz[0])} .. "
            f"{hz(result.agreement_grid_hz[1])}",
            markup=False,
        )
    rows = [row for row in r.budget if row.applicable and row.key != "total"]
    for row in rows:
        console.print(
            f"  {row.label}: {row.max_gain_error_db:.3g} dB, {row.max_phase_error_deg:.3g} deg ({row.note})",
            markup=False,
        )
    if res.source_margins is not None:
        mrows = []
        for label, m, name in (("A", res.source_margins, "source"), ("B", r.margins, r.name)):
            if m is None:
                continue
            if res.loop_is_stable(name) is False:  # margins of an unstable loop are not robustness
                mrows.append([label, "unstable loop", "—", "—", "—"])
                continue
            mrows.append(
                [
                    label,
                    "none" if m.gain_margin_db is None else f"{m.gain_margin_db:.3g} dB",
                    "none" if m.phase_margin_deg is None else f"{m.phase_margin_deg:.3g} deg",
                    "none" if m.crossover_hz is None else hz(m.crossover_hz),
                    f"{m.sensitivity_peak_db:.3g} dB",
                ]
            )
        header = ["form", "gain margin", "phase margin", "crossover", "sensitivity peak"]
        console.print(_fitted_table(console, "loop with the plant", header, mrows, ["left"] + ["right"] * 4))
    vrows = []
    for j in res.verdict.judgements:
        if j.status == "not set":
            continue
        if j.criterion == "closed_loop_stable":  # a check without a number
            found = {"pass": "stable", "skipped": "not decided"}.get(
                j.status, "sign inverted" if "negative low-frequency" in j.note else "unstable"
            )
            which = "A" if j.realization == "source" else "B"
            vrows.append([f"loop with {which}", found, "stable", j.status.upper() if j.status == "fail" else j.status])
            continue
        value = "—" if j.value is None else _fmt(j.value, j.unit)
        vrows.append([j.label, value, _fmt(j.limit, j.unit), j.status.upper() if j.status == "fail" else j.status])
    # fitted to the terminal, wrapping words: the result column always shows (at 80 columns too)
    console.print(_fitted_table(console, "verdict", ["criterion", "measured", "limit", "result"], vrows, "left"))
    for note in result.notes + list(res.notes) + list(r.warnings):
        console.print(f"note: {note}", markup=False)
    for j in res.verdict.skipped:
        console.print(f"skipped: {j.label} ({j.note})", markup=False)
    console.print(f"verdict: {res.verdict.overall.upper()}", markup=False)
    console.print(
        "The tool computes; it does not certify. Verify on a bench or in simulation before a live swap.", markup=False
    )


def _fmt(value, unit: str) -> str:
    if value is None:  # a check without a limit (e.g. an analog controller's largest real part)
        return "—"
    if unit.startswith("of "):
        return f"{100 * value:.3g} % {unit}"
    return f"{value:.3g} {unit}"


def _what(given, describe) -> str:
    d = given.data
    if given.form == "analog":
        return d.get("expression") or ", ".join(f"{k} = {v}" for k, v in d["settings"].items())
    return describe(given)
