"""``loopshift code``: a controller as firmware source — C99 (double, float, Q15, Q31) or IEC
61131-3 Structured Text — in a chosen or recommended structure, with the quantization analysis.

Only argparse is imported at module level; the computation loads when the command runs.
"""

from __future__ import annotations

import argparse

DESCRIPTION = """\
Sample an analog controller (EXPR, --pid or --card) at --fs by --method, arrange it in a
structure (direct1, direct2t, sections, delta; default: the one recommended for the word
format) and write it as C99 (NAME.h, NAME.c: NAME_state, NAME_reset, NAME_step, and
NAME_set_output for an integrating controller) or as an IEC 61131-3 Structured Text function
block (NAME.st). The files are written only when the stored coefficients are stable and
neither overflow nor stall (exit 1 otherwise, with the numbers and the structure to use).

Fixed point (q15, q31) needs --input-range (the error's range, which scales the words) and,
for an integrating controller, --output-limits (the integrator saturates there).

The tool computes; it does not certify. Verify the code on a bench or in simulation before a
live swap, plan a bumpless transfer (NAME_set_output), keep safety functions independent."""

EPILOG = """\
examples:
  loopshift code "2*(1 + 1/(0.5*s))" --fs 1kHz --format float --name level_pi --out fw/
  loopshift code --pid kc=2 ti=30s td=5s n=10 --fs 10Hz --format q31 --input-range -10 10 \\
      --output-limits -100 100 --name flow --out fw/
  loopshift code "(0.2s+1)/(0.02s+1)" --fs 2kHz --structure sections --lang st --format double \\
      --name lead --out plc/ --json
  loopshift code --card card.cir --fs 5Hz --format float --output-limits -10 10 --name card --out fw/

formats: double (C double / ST LREAL), float (C float / ST REAL), q15 (int16_t words, 32-bit
accumulator), q31 (int32_t words, 64-bit accumulator); Structured Text takes double or float,
and q15/q31 in the structures direct2t and delta (INT/DINT words).
Details: docs/firmware.md"""

#: Structured Text in fixed point: the structures whose words the block computes in INT/DINT/LINT.
ST_FIXED_STRUCTURES = ("direct2t", "delta")

FORMAT_WORDS = {
    "double": "float64",
    "float": "float32",
    "q15": "q15",
    "q31": "q31",
    "float64": "float64",
    "float32": "float32",
}


def add_parser(subparsers) -> argparse.ArgumentParser:
    from convert.cli.common import add_controller_input
    from convert.cli.digital import add_signal_ranges

    parser = subparsers.add_parser(
        "code",
        help="controller -> C99 or Structured Text firmware, with the word-format analysis",
        description=DESCRIPTION,
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    add_controller_input(parser)
    parser.add_argument(
        "--card",
        metavar="FILE.cir",
        help="read the controller from a card's SPICE netlist (input source VIN, output node out), "
        "e.g. --card card.cir",
    )
    parser.add_argument("--fs", metavar="HZ", required=True, help="sample rate, e.g. --fs 1kHz")
    parser.add_argument("--method", metavar="M", help="discretization method (default tustin), e.g. --method zoh")
    parser.add_argument("--prewarp", metavar="HZ", help="tustin prewarp frequency, e.g. --prewarp 50Hz")
    parser.add_argument(
        "--derivative-filter",
        metavar="N",
        dest="filter_n",
        help="derivative filter ratio for an ideal PID, e.g. --derivative-filter 10",
    )
    parser.add_argument(
        "--structure",
        metavar="S",
        help="direct1, direct2t, sections, delta or auto (default: the recommended one), e.g. --structure sections",
    )
    parser.add_argument("--lang", metavar="L", default="c", help="c (default) or st, e.g. --lang st")
    parser.add_argument(
        "--format",
        metavar="F",
        default="double",
        dest="fmt",
        help="double (default), float, q15 or q31, e.g. --format q15",
    )
    parser.add_argument(
        "--name",
        metavar="NAME",
        default="controller",
        help="C/ST identifier for the files and functions (default controller), e.g. --name level_pi",
    )
    parser.add_argument("--out", metavar="DIR", help="folder for the files (created if missing), e.g. --out fw/")
    parser.add_argument(
        "--force", action="store_true", help="overwrite files of the same name in --out, e.g. --out fw/ --force"
    )
    add_signal_ranges(parser)
    parser.add_argument(
        "--input-resolution",
        metavar="E",
        dest="input_resolution",
        help="smallest error the integral must act on (default: input range / 2^15), e.g. --input-resolution 0.001",
    )
    parser.add_argument(
        "--input-scale",
        nargs=4,
        metavar=("SIG_LO", "SIG_HI", "FW_LO", "FW_HI"),
        dest="input_scale",
        help="the card's input signal range and the firmware values at its ends (only slopes matter; "
        "may be inverted), e.g. --input-scale 1V 5V 0 4095",
    )
    parser.add_argument(
        "--output-scale",
        nargs=4,
        metavar=("SIG_LO", "SIG_HI", "FW_LO", "FW_HI"),
        dest="output_scale",
        help="the card's output signal range and the firmware values at its ends; --output-limits, --input-range and "
        "--input-resolution stay in the controller's own units and are mapped (slopes only), "
        "e.g. --output-scale 0V 10V 0 4095",
    )
    parser.add_argument(
        "--pid-block",
        action="store_true",
        dest="pid_block",
        help="write a PID block instead (NAME_step(st, setpoint, measurement), limits with "
        "anti-windup, setpoint weights b/c from --pid, NAME_set_output for bumpless transfer), "
        "e.g. --pid kc=2 ti=30s --pid-block --output-limits 0 100",
    )
    parser.add_argument(
        "--velocity",
        action="store_true",
        help="PID block in velocity (incremental) form instead of positional, e.g. --pid-block --velocity",
    )
    parser.add_argument(
        "--anti-windup",
        metavar="A",
        dest="anti_windup",
        help="PID block: clamp (conditional integration, default), track (back-calculation) or none, "
        "e.g. --anti-windup track",
    )
    parser.add_argument(
        "--tracking-time",
        metavar="S",
        dest="tracking_time",
        help="PID block, back-calculation: tracking time constant (default sqrt(Ti*Td), Ti for a PI), "
        "e.g. --tracking-time 5s",
    )
    parser.add_argument(
        "--json",
        action="store_true",
        help="print the realized coefficients (b/a or sos rows [b0, b1, b2, 1, a1, a2]) and the "
        "analysis of every structure as JSON, e.g. --json",
    )
    return parser


def _controller(args):
    from convert.cli.common import controller_from_args
    from convert.errors import InputError

    if args.card:
        if args.expression or args.pid:
            raise InputError("give one controller: EXPR, --pid or --card", where="command line", key="--card")
        from convert.circuit.card import analyze_card
        from convert.circuit.netlist import read_netlist_file

        analysis = analyze_card(read_netlist_file(args.card), with_sensitivities=False)
        clamp = getattr(analysis, "output_limits", None)
        if clamp and not args.output_limits:  # the card's clamps offered as the output limits
            args.output_limits = [repr(float(clamp[0])), repr(float(clamp[1]))]
            args.limits_from_card = True
        elif not args.output_limits:  # clamped somewhere, but nothing carries the limits to the output
            from convert.circuit.clamps import unreached_clamp_note

            args.card_clamp_note = unreached_clamp_note(analysis.netlist, analysis.output)
        return analysis.controller, f"card {args.card}: {analysis.controller.expression(8)}"
    try:
        controller, _ = controller_from_args(args)
    except InputError as exc:
        if exc.message.startswith("an expression in z"):
            raise InputError(
                "code takes an analog controller (in s) and samples it at --fs; this expression is in z",
                key="EXPR",
            ) from None
        raise
    src = " ".join(args.pid) if args.pid else args.expression
    return controller, src


def run(args, console) -> int:
    from convert.cli.common import at, emit_json, positive_value
    from convert.cli.digital import range_pair
    from convert.compare.frequency import comparison_grid, default_band_hz
    from convert.digital import add_derivative_filter, discretize
    from convert.digital.codegen import LANGUAGES, emit
    from convert.digital.quantized import choose
    from convert.errors import InputError

    fs = positive_value(args.fs, "hz", "--fs")
    _refuse_inapplicable(args)
    word = FORMAT_WORDS.get(str(args.fmt).lower())
    if word is None:
        raise InputError(f"expected double, float, q15 or q31, found {args.fmt!r}", key="--format")
    lang = str(args.lang).lower()
    if lang not in LANGUAGES:
        raise InputError(f"expected c or st, found {args.lang!r}", key="--lang")
    st_fixed = lang == "st" and word.startswith("q")
    if st_fixed and args.pid_block:
        raise InputError(
            "Structured Text of the PID block is written in double (LREAL) or float (REAL); q15/q31 are for C",
            key="--format",
        )
    if st_fixed and str(args.structure or "auto").lower() not in ST_FIXED_STRUCTURES + ("auto",):
        raise InputError(
            f"Structured Text in {args.fmt} is written for the structures direct2t and delta (integer words); "
            f"{args.structure} in {args.fmt} is for C",
            key="--structure",
        )
    if not args.out and not args.json:
        raise InputError("give --out DIR for the files (or --json to see the result only)", key="--out")
    rng = range_pair(args.input_range, "--input-range")
    resolution = (
        positive_value(args.input_resolution, "number", "--input-resolution") if args.input_resolution else None
    )
    if word.startswith("q") and rng is None:
        what = "the setpoint and measurement range" if args.pid_block else "the error's range"
        raise InputError(
            f"{args.fmt}{' Structured Text' if st_fixed else ''} needs --input-range LOW HIGH ({what} scales the words)",
            key="--input-range",
        )
    controller, source = _controller(args)
    lim = range_pair(args.output_limits, "--output-limits")
    sc = _scaling(args)
    scaled_from = None
    if sc is not None:
        # --output-limits, --input-range and --input-resolution are in the controller's own units
        # (as given, e.g. volts): the firmware works in firmware units, so they move with the maps
        # (slopes only, as in a case file: convert.digital.scaling.deviations_in_firmware)
        from convert.digital.scaling import deviations_in_firmware, scale_controller, slope, wide_limits_problem

        controller = scale_controller(controller, sc)
        source = f"{source} (scaled to firmware units: gain x {sc.gain:.6g})"
        scaled_from = {"limits": lim}
        lim = deviations_in_firmware(lim, sc.output_map)
        problem = wide_limits_problem(lim, sc.output_map)
        scaled_from["warnings"] = [f"{problem} (the units of --output-scale's signal, SI: V or A)"] if problem else []
        for text in scaled_from["warnings"]:
            if not args.json:
                console.print(f"warning: {text}", markup=False, style="bold yellow")
        rng = deviations_in_firmware(rng, sc.input_map)
        if resolution is not None:
            resolution *= abs(slope(sc.input_map))
    if args.pid_block:
        if scaled_from and scaled_from["limits"]:
            given = scaled_from["limits"]
            source += f"; output limits given as {given[0]:.10g} .. {given[1]:.10g} in controller output units"
        return _pid_block(args, console, controller, source, fs, word, lang, lim, sc, rng, resolution)
    if controller.is_digital:
        raise InputError("give an analog controller (in s); the tool samples it at --fs", key="EXPR")
    if args.filter_n is not None:
        controller = add_derivative_filter(controller, positive_value(args.filter_n, "number", "--derivative-filter"))
    prewarp = positive_value(args.prewarp, "hz", "--prewarp") if args.prewarp else None
    with at(
        None,
        rename={
            "prewarp": "--prewarp",
            "method": "--method",
            "fs": "--fs",
            "structure": "--structure",
            "input_range": "--input-range",
            "output_limits": "--output-limits",
            "word_format": "--format",
            "name": "--name",
        },
    ):
        real = discretize(controller, fs, args.method or "tustin", prewarp_hz=prewarp)
        band = comparison_grid(default_band_hz(controller, fs), fs, points_per_decade=20)
        pick, every, why = choose(
            real.roots,
            word,
            band,
            structure=args.structure or "auto",
            b=real.b,
            a=real.a,
            input_range=max(map(abs, rng)) if rng else None,
            output_level=max(map(abs, lim)) if lim else None,
            input_resolution=resolution,
            among=ST_FIXED_STRUCTURES if st_fixed else None,
        )
        if pick is not None and pick.stall_unchecked and lim is None:
            raise InputError(
                f"{word} holds the integral at the output's level: give --output-limits LOW HIGH "
                "(the integrator-stall check needs that level)",
                key="--output-limits",
            )
        files = {}
        if pick is not None and pick.ok:
            files = emit(
                pick.realized,
                args.name,
                lang,
                source=source,
                method=args.method or "tustin",
                limits=lim,
                scaled_from=scaled_from,
            )
    paths = _write(args, files)
    ok = pick is not None and pick.ok
    if args.json:
        emit_json(
            console,
            {
                "source": source,
                "fs_hz": fs,
                "method": args.method or "tustin",
                "word_format": word,
                "structure": pick.structure if pick else None,
                "recommendation": why,
                "written": list(paths.values()),
                "ok": ok,
                "scaling": sc.text if sc else None,
                "scale_gain": sc.gain if sc else None,
                "output_limits": list(lim) if lim else None,
                "output_limits_given": list(scaled_from["limits"]) if scaled_from and scaled_from["limits"] else None,
                "warnings": scaled_from["warnings"] if scaled_from else [],
                "realized": _coefficients(pick) if pick and pick.realized else None,
                "analysis": [x.summary() for x in every],
            },
        )
        return 0 if ok else 1
    note = (
        f"output limits {lim[0]:.4g} .. {lim[1]:.4g} V from the card's clamps (--output-limits overrides them)"
        if getattr(args, "limits_from_card", False) and lim
        else getattr(args, "card_clamp_note", None)
    )
    if scaled_from and scaled_from["limits"] and lim:
        given = scaled_from["limits"]
        note = (note + "; " if note else "") + (
            f"output limits {given[0]:.4g} .. {given[1]:.4g} (controller output units) = "
            f"{lim[0]:.4g} .. {lim[1]:.4g} firmware units"
        )
    _render(console, pick, every, why, paths, word, sc.text if sc else None, note)
    for link in getattr(args, "link_notes", ()):
        console.print(f"note: {link}", markup=False)
    return 0 if ok else 1


def _write(args, files: dict) -> dict:
    """Write ``files`` into ``--out`` (created if missing; existing files only with --force)."""
    import os

    from convert.cli.common import check_output_files, write_outputs
    from convert.errors import InputError

    if not args.out or not files:
        return {}
    if os.path.exists(args.out) and not os.path.isdir(args.out):
        raise InputError(f"{args.out!r} is a file; give a folder", key="--out")
    os.makedirs(args.out, exist_ok=True)
    paths = {n: os.path.join(args.out, n) for n in files}
    outputs = check_output_files({f"--out {n}": p for n, p in paths.items()}, force=args.force)
    write_outputs(outputs, {f"--out {n}": text for n, text in files.items()})  # all or none (.h with its .c)
    args.link_notes = [o.note for o in outputs if o.note]  # a link is written through: said after "wrote"
    return paths


def _coefficients(pick) -> dict:
    r = pick.realized
    if r.structure in ("direct1", "direct2t"):
        out = {"b": list(r.sections[0].b), "a": list(r.sections[0].a)}
    else:
        out = {
            "sos": [list(s.b) + [0.0] * (3 - len(s.b)) + list(s.a) + [0.0] * (3 - len(s.a)) for s in r.sections],
            "operator": "delta" if r.form == "delta" else "z^-1",
        }
    if r.word.is_fixed:
        out["words"] = [
            {"b": list(s.b_int), "a": list(s.a_int), "shift": s.shift, "b_shift": s.b_shift} for s in r.sections
        ]
        out["node_scales"] = list(r.node_scales)
    return out


def _render(console, pick, every, why, paths, word, scale_text=None, limits_note=None) -> None:
    p = console.print
    for x in every:
        if x.refused:
            p(f"{x.structure:9} not offered: {x.refused}", markup=False)
            continue
        state = "ok" if x.ok else "FAILS"
        p(
            f"{x.structure:9} {state}: quantization alone {x.gain_error_db:.3g} dB, {x.phase_error_deg:.3g} deg; "
            f"largest |z| = {x.max_pole_radius:.10g}",
            markup=False,
        )
        for f in x.failures:
            p(f"          {f}", markup=False)
    p(f"recommendation for {word}: {why}", markup=False)
    if pick is None or not pick.ok:
        if pick is None:  # every structure refused or failing: the recommendation says why
            p(f"not written: no structure is usable in {word} (see above)", markup=False)
            return
        reasons = (pick.refused and [pick.refused]) or pick.failures
        p(f"not written: {pick.structure} in {word} fails: {'; '.join(reasons) if reasons else why}", markup=False)
        return
    p(f"structure used: {pick.structure} in {word}", markup=False)
    if limits_note:
        p(limits_note, markup=False)
    if scale_text:
        p(f"scaling: {scale_text}", markup=False)
    for n in pick.notes:
        p(f"note: {n}", markup=False)
    for path in paths.values():
        p(f"wrote {path}", markup=False)
    p("The tool computes; it does not certify. Bench-test the code before a live swap.", markup=False)


def _scaling(args):
    """The --input-scale / --output-scale maps (convert.digital.scaling), or None."""
    if not args.input_scale and not args.output_scale:
        return None
    from convert.digital.scaling import SignalMap, scaling
    from convert.errors import InputError
    from convert.values import parse_value

    maps = []
    for words, option in ((args.input_scale, "--input-scale"), (args.output_scale, "--output-scale")):
        if not words:
            maps.append(None)
            continue
        nums, kinds = [], []
        for w in words:
            v = None
            for kind in ("number", "volt", "ampere"):
                try:
                    v = parse_value(w, kind, field=option)
                    break
                except InputError:
                    continue
            if v is None:
                raise InputError(f"expected a number, volts or amperes (1V, 4mA, 4095), found {w!r}", key=option)
            nums.append(v)
            kinds.append(kind)
        if len(kinds) >= 2 and kinds[0] != kinds[1]:
            raise InputError(
                f"the signal's two ends mix units ({words[0]!r}, {words[1]!r}): give both in V or both in mA",
                key=option,
            )
        try:
            maps.append(SignalMap(*nums))
        except InputError as exc:
            raise InputError(exc.message, key=option) from None
    return scaling(*maps)


# options that shape only one of the two kinds of code: (option, its argparse attribute)
_LINEAR_ONLY = (
    ("--method", "method"),
    ("--prewarp", "prewarp"),
    ("--structure", "structure"),
    ("--derivative-filter", "filter_n"),
)
_BLOCK_ONLY = (("--velocity", "velocity"), ("--anti-windup", "anti_windup"), ("--tracking-time", "tracking_time"))


def _refuse_inapplicable(args) -> None:
    """An option that the chosen kind of code would ignore is an error, not silently dropped."""
    from convert.errors import InputError

    def given(attr: str) -> bool:
        return getattr(args, attr, None) not in (None, False)

    if args.pid_block:
        for option, attr in _LINEAR_ONLY:
            if given(attr):
                raise InputError(
                    "does not apply to the PID block (the block samples kp, ki and kd itself, with the derivative "
                    "filter of the controller given, e.g. --pid ... n=10); leave it out or drop --pid-block",
                    key=option,
                )
    else:
        for option, attr in _BLOCK_ONLY:
            if given(attr):
                raise InputError("applies to the PID block only; add --pid-block", key=option)
    if given("prewarp") and str(args.method or "tustin").lower() != "tustin":
        raise InputError("applies to tustin only; drop it or use --method tustin", key="--prewarp")
    if args.tracking_time and (args.anti_windup or "clamp") != "track":
        raise InputError("applies to --anti-windup track only; add --anti-windup track", key="--tracking-time")


def _pid_block(args, console, controller, source, fs, word, lang, lim, sc=None, rng=None, res=None) -> int:
    """``--pid-block``: the PID block of convert.digital.pidblock in C (double, float, Q15, Q31) or
    Structured Text (double, float), with its word-format analysis (convert.digital.pidcheck);
    nothing is written when the analysis fails (exit 1). ``lim``, ``rng`` and ``res`` are in the
    units the block works in (firmware units with signal scaling ``sc``)."""
    from convert.cli.common import at, emit_json, positive_value
    from convert.digital.pidblock import PidBlock, emit_pid_c
    from convert.errors import InputError
    from convert.pid import pid_from_controller, pid_from_words, why_not_pid

    from convert.digital.pidblock import emit_pid_st
    from convert.digital.pidcheck import analyze_block

    settings = pid_from_words(args.pid, where="--pid") if args.pid else pid_from_controller(controller)
    if settings is None:
        raise InputError(f"the controller is not a PID: {why_not_pid(controller)}", key="--pid-block")
    if sc is not None and args.pid:
        from convert.digital.scaling import scale_pid

        settings = scale_pid(settings, sc)
    tt = positive_value(args.tracking_time, "second", "--tracking-time") if args.tracking_time else None
    with at(
        None,
        rename={
            "anti_windup": "--anti-windup",
            "tracking_time": "--tracking-time",
            "output_limits": "--output-limits",
            "name": "--name",
        },
    ):
        block = PidBlock.from_settings(
            settings,
            fs,
            form="velocity" if args.velocity else "positional",
            limits=lim,
            anti_windup=args.anti_windup or "clamp",
            tracking_time_s=tt,
            word_format=word,
            input_range=max(map(abs, rng)) if rng else None,
        )
        from convert.compare.frequency import comparison_grid, default_band_hz

        band = comparison_grid(default_band_hz(controller, fs), fs, points_per_decade=20)
        check = analyze_block(block, band, input_resolution=res)
        files = {}
        usable = check.ok and not check.stall_unchecked
        if usable:
            files = (emit_pid_c if lang == "c" else emit_pid_st)(block, args.name, source=source)
    paths = _write(args, files)
    info = {
        "kind": "pid-block",
        "form": block.form,
        "scaling": sc.text if sc else None,
        "scaled_gains": {"kp": settings.kp, "ki": settings.ki, "kd": settings.kd, "action": settings.action},
        "anti_windup": block.anti_windup,
        "tracking_time_s": block.tracking_time_s if block.anti_windup == "track" else None,
        "limits": block.limits,
        "constants": block.constants(),
        "word_format": word,
        "fs_hz": fs,
        "structure": "pid_block",
        "language": lang,
        "ok": usable,
        "analysis": check.summary(),
        "written": list(paths.values()),
    }
    if args.json:
        emit_json(console, info)
        return 0 if usable else 1
    k = block.constants()
    if sc is not None:
        console.print(f"scaling: {sc.text}", markup=False)
        console.print(
            f"scaled gains (firmware units): kp = {settings.kp:.6g}, ki = {settings.ki:.6g} 1/s, "
            f"kd = {settings.kd:.6g} s, action {settings.action}",
            markup=False,
        )
    console.print(
        f"PID block, {block.form} form, {word}; kp = {k['kp']:.6g}, ki*T = {k['bi']:.6g}, "
        f"kd/(Tf+T) = {k['bd']:.6g}, b = {block.b:g}, c = {block.c:g}",
        markup=False,
    )
    console.print(
        f"anti-windup: {block.anti_windup}"
        + (f", tracking time constant {block.tracking_time_s:.4g} s" if block.anti_windup == "track" else "")
        + (
            f"; limits {lim[0]:g} .. {lim[1]:g}{' firmware units' if sc is not None else ''}"
            if lim
            else "; no output limits (no clamp)"
        ),
        markup=False,
    )
    _render_block_check(console, check)
    if not usable:
        why = "fails its checks" if not check.ok else "has an undecided integrator stall"
        console.print(f"not written: the PID block in {word} {why} (see above)", markup=False)
        return 1
    console.print(f"structure used: PID block ({block.form}) in {word}", markup=False)
    for p in paths.values():
        console.print(f"wrote {p}", markup=False)
    for link in getattr(args, "link_notes", ()):
        console.print(f"note: {link}", markup=False)
    console.print("The tool computes; it does not certify. Bench-test the code before a live swap.", markup=False)
    return 0


def _render_block_check(console, check) -> None:
    """The PID block's word-format analysis in a few lines (convert.digital.pidcheck)."""
    p = console.print
    if check.refused:
        p(f"PID block not offered in {check.word_format}: {check.refused}", markup=False)
        return
    p(
        f"quantization alone {check.gain_error_db:.3g} dB, {check.phase_error_deg:.3g} deg; "
        f"derivative pole ad = {check.free_pole_radius:.10g}"
        + (f"; headroom {check.headroom_db:.3g} dB" if check.headroom_db is not None else ""),
        markup=False,
    )
    if check.stall_error is not None:
        p(
            f"integrator moves for errors above {check.stall_error:.4g} (input units) at output level "
            f"{check.output_level:.4g}; resolution asked {check.stall_limit:.4g}",
            markup=False,
        )
    if check.stall_unchecked:
        p(f"integrator stall {check.stall_unchecked}", markup=False)
    for f in check.failures:
        p(f"FAILS: {f}", markup=False)
    for n in check.notes:
        p(f"note: {n}", markup=False)
