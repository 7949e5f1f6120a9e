"""``loopshift digital``: an analog controller turned into firmware coefficients by one or more
discretization methods, side by side, with each method's error against the analog controller.

Only argparse and the method names (convert.methods, which imports nothing) at module level; the
computation loads when the command runs.
"""

from __future__ import annotations

import argparse

from convert.methods import METHODS as METHOD_NAMES

DESCRIPTION = """\
Sample an analog controller at --fs with one or more methods and print, per method, the
coefficients b/a (ascending powers of z^-1, a0 = 1), the difference equation, and the errors
against the analog controller over a band (default: a decade below the lowest corner up to
fs/2), side by side, with the best method marked and why.

Two error figures per method: "method" compares C(e^jwT) with C(jw) (what the method alone
changes); "seen from loop" adds the zero-order hold of the output and the computation delay
(--delay). The best method is picked on the method figures: the highest frequency where both
errors stay within the agreement limits (--agreement), then the smallest errors. A method
that makes a stable analog controller unstable is never picked.

Methods: zoh (step invariant), foh (triangle hold), tustin (bilinear; --prewarp HZ makes it
exact at that frequency), matched (matched pole-zero; zeros at infinity to z = -1), impulse
(impulse invariant, T-scaled), forward-euler, backward-euler, or all.

The tool computes; it does not certify. Verify on a bench or in simulation before a live
swap, plan a bumpless transfer, keep safety functions independent of this controller."""

EPILOG = """\
examples:
  loopshift digital "(s+2)/(s+20)" --fs 1kHz --method tustin --method zoh
  loopshift digital "2*(1 + 1/(0.5*s))" --fs 200Hz --method all
  loopshift digital "(0.5s+1)/(0.05s+1)" --fs 500Hz --method tustin --prewarp 10Hz
  loopshift digital "2*(1 + 1/(0.1*s) + 0.01*s)" --fs 1kHz --derivative-filter 10 --method all
  loopshift digital --pid kc=2 ti=30s td=5s n=10 --fs 10Hz --method all --delay 1sample
  loopshift digital "(s+2)/(s+20)" --fs 1kHz --method all --band 0.1Hz 100Hz --json

delay: seconds with a unit ("--delay 250us") or samples ("--delay 1sample", "--delay 0.5samples").
In values, M is mega and m is milli (1MHz, 250ms). Details: docs/digital.md"""


def add_parser(subparsers) -> argparse.ArgumentParser:
    from convert.cli.common import add_controller_input

    parser = subparsers.add_parser(
        "digital",
        help="analog controller -> digital coefficients by each method, with the error each method adds",
        description=DESCRIPTION,
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    add_controller_input(parser)
    parser.add_argument("--fs", metavar="HZ", required=True, help="sample rate, e.g. --fs 1kHz or --fs 100Hz")
    parser.add_argument(
        "--method",
        metavar="M",
        action="append",
        help="discretization method, repeatable: "
        + ", ".join(METHOD_NAMES)
        + ", or all (the default), e.g. --method tustin --method zoh",
    )
    parser.add_argument(
        "--prewarp",
        metavar="HZ",
        help="tustin only: frequency where digital and analog responses are made equal, e.g. --prewarp 50Hz",
    )
    parser.add_argument(
        "--delay",
        metavar="S",
        default=None,
        help="computation delay for the loop-seen figures, in seconds or samples, "
        "e.g. --delay 200us or --delay 1sample (default 0)",
    )
    parser.add_argument(
        "--band",
        nargs=2,
        metavar=("LOW", "HIGH"),
        help="band for the error figures, e.g. --band 0.1Hz 200Hz "
        "(default: a decade below the lowest corner up to fs/2)",
    )
    parser.add_argument(
        "--derivative-filter",
        metavar="N",
        dest="filter_n",
        help="add a derivative filter with ratio N to an improper controller (ideal PD/PID): "
        "the derivative part gets the pole N/Td, e.g. --derivative-filter 10 "
        "(the same name as in `loopshift circuit` and in case files)",
    )
    # The earlier spelling keeps working in scripts; help shows one name only.
    parser.add_argument("--filter", metavar="N", dest="filter_n", help=argparse.SUPPRESS)
    parser.add_argument(
        "--match-at",
        metavar="HZ",
        help="matched only: frequency where gain is matched instead of DC, e.g. --match-at 1Hz "
        "(default for an integrating controller: a decade below its lowest corner, at most fs/100)",
    )
    parser.add_argument(
        "--keep-delay",
        action="store_true",
        help="matched only: keep one zero at infinity as a one-sample delay instead of mapping it to z = -1, "
        "e.g. --method matched --keep-delay",
    )
    parser.add_argument(
        "--agreement",
        nargs=2,
        metavar=("DB", "DEG"),
        default=None,
        help="agreement limits for the 'agrees up to' figure, e.g. --agreement 0.5 3 (default 1 dB, 5 deg)",
    )
    parser.add_argument(
        "--structure",
        metavar="S",
        default="direct1",
        help="firmware arithmetic the coefficients are judged in: direct1, direct2t, sections, delta "
        "(default direct1: b/a as printed), or pid_block (a PID source: the firmware PID block, its own "
        "rule, judged beside the methods), e.g. --structure sections",
    )
    parser.add_argument(
        "--word-format",
        metavar="F",
        default="float64",
        dest="word_format",
        help="word format: float64 (default), float32, q15, q31, e.g. --word-format float32",
    )
    add_signal_ranges(parser)
    parser.add_argument(
        "--plant",
        metavar="EXPR",
        help="plant model in s: adds each method's loop margins (as `loopshift report` computes them), "
        'e.g. --plant "0.5/(20s + 1)"',
    )
    parser.add_argument("--dead-time", metavar="S", help="plant dead time, e.g. --dead-time 1s (default 0)")
    parser.add_argument(
        "--json",
        action="store_true",
        help="print a JSON list of results (method, fs_hz, b, a, prewarp_hz, errors, and the analog "
        "num/den they came from), e.g. --json",
    )
    return parser


def parse_delay(text: str | None, fs_hz: float):
    """(seconds) from "250us" / "0.25ms" or from "1sample" / "2 samples"."""
    from convert.compare.frequency import delay_in_seconds
    from convert.values import parse_delay as read_delay

    if text is None:
        return 0.0
    from convert.errors import InputError

    delay_s, delay_samples = read_delay(text, field="--delay")
    try:
        return delay_in_seconds(delay_s=delay_s, delay_samples=delay_samples, fs_hz=fs_hz)
    except InputError as exc:
        raise InputError(exc.message, key="--delay") from None


def _methods(args) -> list[str]:
    from convert.errors import InputError

    wanted = args.method or ["all"]
    out: list[str] = []
    for m in wanted:
        if m == "all":
            out.extend(METHOD_NAMES)
        elif m in METHOD_NAMES:
            out.append(m)
        else:
            raise InputError(f"unknown method {m!r}; expected one of {', '.join(METHOD_NAMES)} or all", key="--method")
    return list(dict.fromkeys(out))


def _positive(text, kind: str, field: str) -> float:
    from convert.cli.common import positive_value

    return positive_value(text, kind, field)


def below_nyquist(value: float, text: str, fs: float, field: str) -> float:
    """Refuse a frequency option at or above fs/2 with the option's own name."""
    from convert.errors import InputError

    if value >= fs / 2:
        raise InputError(f"must be below fs/2 = {fs / 2:g} Hz, found {text}", key=field)
    return value


def run(args, console) -> int:
    from convert.cli.common import at, band_from_args, controller_from_args, emit_json
    from convert.digital import survey_methods
    from convert.errors import InputError

    fs = _positive(args.fs, "hz", "--fs")
    prewarp = _positive(args.prewarp, "hz", "--prewarp") if args.prewarp is not None else None
    if prewarp is not None:
        below_nyquist(prewarp, args.prewarp, fs, "--prewarp")
    match_at = _positive(args.match_at, "hz", "--match-at") if args.match_at is not None else None
    if match_at is not None:
        below_nyquist(match_at, args.match_at, fs, "--match-at")
    filter_n = _positive(args.filter_n, "number", "--derivative-filter") if args.filter_n is not None else None
    delay = parse_delay(args.delay, fs)
    band = band_from_args(args.band)
    if band is not None:
        if band[1] > fs / 2:
            raise InputError(f"the band's top {args.band[1]} is above fs/2 = {fs / 2:g} Hz", key="--band")
    limits = (1.0, 5.0)
    if args.agreement:
        limits = (
            _positive(args.agreement[0], "number", "--agreement"),
            _positive(args.agreement[1], "number", "--agreement"),
        )
    methods = _methods(args)
    if prewarp is not None and "tustin" not in methods:
        raise InputError("applies to tustin only; add --method tustin", key="--prewarp")
    if match_at is not None and "matched" not in methods:
        raise InputError("applies to matched only; add --method matched", key="--match-at")
    if args.keep_delay and "matched" not in methods:
        raise InputError("applies to matched only; add --method matched", key="--keep-delay")
    controller, _pid = controller_from_args(args, fs_hz=fs)
    if controller.is_digital:
        raise InputError("the controller is already digital; use `loopshift analog` to go back", key="EXPR")
    with at(
        None,
        rename={"fs": "--fs", "prewarp": "--prewarp", "match_at_hz": "--match-at", "filter_n": "--derivative-filter"},
    ):
        survey = survey_methods(
            controller,
            fs,
            methods,
            prewarp_hz=prewarp,
            delay_s=delay,
            band_hz=band,
            match_at_hz=match_at,
            keep_delay=args.keep_delay,
            filter_n=filter_n,
            gain_limit_db=limits[0],
            phase_limit_deg=limits[1],
        )
    block = None
    if str(args.structure).lower() == "pid_block":
        block = _pid_block_check(args, survey, _pid, fs)
        firmware = {}
    else:
        firmware = _firmware(args, survey)
    plant = _plant(args)
    # the report's figures per method (its budget rows, its loop check) for --json and --plant: the
    # refined word-format row costs about 0.2 s a method, so the quick table ranks on the survey alone;
    # with pid_block the methods are not built in a structure (the block is the firmware): no figures
    want = (args.json or plant is not None) and firmware
    stages = _pipeline_figures(controller, survey, firmware, args, plant) if want else {}
    if args.json:
        out = []
        for row in survey.rows:
            item = row.summary()
            if row.realization.method in stages:
                budget, loop = stages[row.realization.method]
                item["budget"] = [r.as_dict() for r in budget]
                if loop is not None:
                    item["loop"] = loop.as_dict()
            item["structure"] = args.structure
            item["word_format"] = args.word_format
            item["firmware"] = firmware[row.realization.method].summary() if firmware else None
            item["best"] = row.realization.method == survey.best
            item["delay_s"] = survey.delay_s
            # the analog controller the coefficients came from (after any derivative filter)
            item["analog"] = {"num": list(survey.analog.num), "den": list(survey.analog.den)}
            if survey.filter_error is not None:
                item["derivative_filter"] = {
                    "n": survey.filter_n,
                    "tau_s": survey.filter_tau_s,
                    "error": survey.filter_error.summary(),
                }
            out.append(item)
        if block is not None:
            out.append(_block_item(block))
        emit_json(console, out)
        return 0 if block is None or block.ok else 1
    _render(console, survey, controller, firmware)
    for method, (_, loop) in stages.items():
        if loop is not None and loop.margins is not None:
            console.print(f"loop with the plant, {method}: {_margins_text(loop.margins)}", markup=False)
    if block is not None:
        from convert.cli.code import _render_block_check

        console.print(
            f"structure: pid_block (the firmware PID block, {block.block.form}: integral by forward Euler, derivative "
            f"by backward difference, its own rule beside the methods above) in {block.word_format}",
            markup=False,
        )
        _render_block_check(console, block)
        return 0 if block.ok else 1
    return 0


def _margins_text(m) -> str:
    """Phase margin, gain margin and sensitivity peak in one line ("none" where a loop has no such figure)."""

    def fig(x, unit):
        return "none" if x is None else f"{x:.3g} {unit}"

    return (
        f"phase margin {fig(m.phase_margin_deg, 'deg')}, gain margin {fig(m.gain_margin_db, 'dB')}, "
        f"sensitivity peak {fig(m.sensitivity_peak_db, 'dB')}"
    )


def _plant(args):
    """The --plant/--dead-time plant, or None."""
    from convert.errors import InputError
    from convert.pipeline import plant_from_words
    from convert.values import parse_value

    dead = parse_value(args.dead_time, "second", field="--dead-time") if args.dead_time is not None else 0.0
    if dead < 0:
        raise InputError(f"expected zero or a positive time, found {args.dead_time!r}", key="--dead-time")
    if args.plant is None and args.dead_time is not None:
        raise InputError("a dead time belongs to a plant; give --plant too", key="--dead-time")
    return plant_from_words(args.plant, dead, where="--plant", dead_where="--dead-time")


def _pipeline_figures(controller, survey, firmware, args, plant) -> dict:
    """Per method: the budget rows (the stage :func:`convert.pipeline.digital_budget`, the rows
    `loopshift report` writes for the same rate and method) and, with a plant, the loop check
    (:func:`convert.pipeline.loop_check`, margins and stability)."""
    from convert.compare.frequency import comparison_grid
    from convert.compare.stages import realized_controller
    from convert.pipeline import digital_budget, loop_check

    fs = survey.rows[0].realization.fs_hz
    grid = comparison_grid(survey.band_hz, fs, 100)
    note = f"derivative filter N = {survey.filter_n:g} added (filter time constant Td/N)" if survey.filter_n else None
    out = {}
    for row in survey.rows:
        real = row.realization
        fw = firmware[real.method]
        budget = digital_budget(
            controller,
            controller,
            survey.analog,
            real,
            fw,
            grid,
            delay_s=survey.delay_s,
            structure=args.structure,
            word_format=args.word_format,
            filter_note=note,
            plant=plant,
        )
        loop = None
        if plant is not None:
            stored = real.controller if fw.realized is None else realized_controller(fw.realized)
            loop = loop_check(stored, plant.model, plant.dead_time_s, delay_s=survey.delay_s)
        out[real.method] = (budget, loop)
    return out


def _pid_block_check(args, survey, pid, fs):
    """``--structure pid_block``: the PID block of the (filtered) source and its word-format analysis."""
    import dataclasses

    from convert.cli.common import at
    from convert.compare.frequency import comparison_grid
    from convert.digital.pidblock import PidBlock
    from convert.digital.pidcheck import analyze_block
    from convert.errors import InputError
    from convert.pid import pid_from_controller, why_not_pid

    settings = pid_from_controller(survey.analog)
    if settings is None:
        raise InputError(f"pid_block needs a PID: {why_not_pid(survey.analog)}", key="--structure")
    if pid is not None:
        settings = dataclasses.replace(settings, b=pid.b, c=pid.c)
    rng = range_pair(args.input_range, "--input-range")
    lim = range_pair(args.output_limits, "--output-limits")
    with at(
        None,
        rename={"input_range": "--input-range", "output_limits": "--output-limits", "word_format": "--word-format"},
    ):
        block = PidBlock.from_settings(
            settings,
            fs,
            limits=lim,
            word_format=str(args.word_format).lower(),
            input_range=max(map(abs, rng)) if rng else None,
        )
        band = comparison_grid(survey.band_hz, fs, points_per_decade=20)
        return analyze_block(block, band)


def _block_item(check) -> dict:
    """The PID block's entry in ``--json`` (beside the methods' entries)."""
    from convert.digital.pidcheck import linear_controller

    out = {"method": "pid_block", "structure": "pid_block", "word_format": check.word_format, "best": False}
    out["firmware"] = check.summary()
    if not check.refused:
        c = linear_controller(check.block)
        out["b"], out["a"] = list(c.b), list(c.a)
    return out


def add_signal_ranges(parser) -> None:
    """--input-range and --output-limits, shared by `digital` and `code`."""
    parser.add_argument(
        "--input-range",
        nargs=2,
        metavar=("LOW", "HIGH"),
        dest="input_range",
        help="range of the error input, controller input units (scales q15/q31 words, bounds "
        "overflow), e.g. --input-range -10 10",
    )
    parser.add_argument(
        "--output-limits",
        nargs=2,
        metavar=("LOW", "HIGH"),
        dest="output_limits",
        help="output limits, controller output units (the integrator's level), e.g. --output-limits 0 100",
    )


def range_pair(words, field: str) -> tuple[float, float] | None:
    """A (low, high) pair of plain numbers from two command-line words, low < high."""
    from convert.errors import InputError
    from convert.values import parse_value

    if not words:
        return None
    low, high = (parse_value(w, "number", field=field) for w in words)
    if not low < high:
        raise InputError(f"expected LOW < HIGH, found {words[0]} {words[1]}", key=field)
    return low, high


def _firmware(args, survey) -> dict:
    """The structure x word-format analysis of every method's result (convert.digital.quantized)."""
    from convert.cli.common import at
    from convert.compare.frequency import comparison_grid
    from convert.digital.quantized import analyze
    from convert.digital.structures import structure_name
    from convert.digital.wordformats import get_format

    structure = structure_name(args.structure, key="--structure")
    word = get_format(args.word_format, key="--word-format")
    args.structure, args.word_format = structure, word.name
    rng = range_pair(args.input_range, "--input-range")
    lim = range_pair(args.output_limits, "--output-limits")
    if word.is_fixed and rng is None:
        from convert.errors import InputError

        raise InputError(
            f"{word.name} needs --input-range LOW HIGH (the error's range, in controller input units, scales the words)",
            key="--input-range",
        )
    band = comparison_grid(survey.band_hz, survey.rows[0].realization.fs_hz, points_per_decade=100)
    out = {}
    with at(
        None,
        rename={
            "input_range": "--input-range",
            "output_limits": "--output-limits",
            "structure": "--structure",
            "word_format": "--word-format",
        },
    ):
        for row in survey.rows:
            r = row.realization
            out[r.method] = analyze(
                r.roots,
                structure,
                word,
                band,
                b=r.b,
                a=r.a,
                input_range=max(map(abs, rng)) if rng else None,
                output_level=max(map(abs, lim)) if lim else None,
            )
    return out


def _hz(x) -> str:
    from convert.values import format_value

    return "full band" if x is None else format_value(x, "hz", 4)


def _wrap_terms(text: str, width: int, sep: str) -> list[str]:
    """Break ``text`` into lines of at most ``width`` only after ``sep`` (", " between coefficients,
    " " between the terms of a difference equation), never inside a number; continuation lines
    are indented under the first "[" or "=" so the list or equation reads as one block."""
    if len(text) <= width:
        return [text]
    mark = max(text.find("["), text.find("= ") + 1)
    indent = " " * (mark + 1 if mark > 0 else 6)
    import re

    # Terms of an equation break before their sign, so "+ 1.99*u[n-1]" stays together.
    pieces = re.split(r" (?=[-+] )", text) if sep == " " else text.split(sep)
    lines, current = [], pieces[0]
    for piece in pieces[1:]:
        candidate = current + sep + piece
        if len(candidate.rstrip()) <= width or current.strip() == "":
            current = candidate
        else:
            lines.append(current + sep.rstrip())  # "," stays at the line's end; a space goes
            current = indent + piece
    lines.append(current)
    return lines


def _coefs(values) -> str:
    return ", ".join(format(float(v), ".12g") for v in values)


def _render(console, survey, source, firmware=None) -> None:
    from rich import box
    from rich.table import Table

    from convert.values import format_value

    fs = survey.rows[0].realization.fs_hz
    console.print(f"analog controller: {survey.analog.expression()}", markup=False)
    if survey.filter_error is not None:
        fe = survey.filter_error
        console.print(
            f"derivative filter N = {survey.filter_n:g} added (tau = Td/N = {format_value(survey.filter_tau_s, 'second', 4)}); "
            f"its own error over the band: {fe.max_gain_error_db:.3g} dB, {fe.max_phase_error_deg:.3g} deg, "
            f"agrees up to {_hz(fe.agreement_limit_hz)}",
            markup=False,
        )
    console.print(
        f"sample rate {format_value(fs, 'hz', 6)}, band {_hz(survey.band_hz[0])} .. {_hz(survey.band_hz[1])}, "
        f"computation delay {format_value(survey.delay_s, 'second', 4)}",
        markup=False,
    )
    first = survey.rows[0]
    lim = f"{first.method_error.gain_limit_db:g} dB / {first.method_error.phase_limit_deg:g} deg"
    # One row per method and no coefficients in the table, so it stays readable in an 80-column
    # terminal; the coefficients follow below it in full precision.
    table = Table(
        title=f"errors against the analog controller (agrees: within {lim})",
        title_justify="left",
        box=box.SIMPLE_HEAD,
        show_edge=False,
        pad_edge=False,
        padding=(0, 1, 0, 0),
        leading=1,
        caption="hold, delay: as the plant sees it, with the output's zero-order hold and the "
        "computation delay (--delay)",
        caption_justify="left",
    )
    # Every column keeps its words whole (no_wrap): the widths add up to less than 80 columns
    # with the longest method name, so a frequency never breaks between its number and its unit.
    table.add_column("method", no_wrap=True)
    table.add_column("max gain\nerror, at", justify="right", no_wrap=True)
    table.add_column("max phase\nerror, at", justify="right", no_wrap=True)
    table.add_column("agrees\nup to", justify="right", no_wrap=True)
    table.add_column("hold,\ndelay:\ngain,\nphase", justify="right", no_wrap=True)
    table.add_column("hold,\ndelay:\nagrees\nup to", justify="right", no_wrap=True)
    table.add_column("warn", justify="right", no_wrap=True)
    for r in survey.rows:
        m = r.realization.method
        label = m + ("\n(best)" if m == survey.best else "") + ("\nUNSTABLE" if r.unstable else "")
        if m == "tustin" and r.realization.prewarp_hz is not None:
            label += f"\nprewarp\n{_hz(r.realization.prewarp_hz)}"
        e = r.method_error
        table.add_row(
            label,
            f"{e.max_gain_error_db:.3g} dB\n@ {_hz(e.max_gain_error_at_hz)}",
            f"{e.max_phase_error_deg:.3g}°\n@ {_hz(e.max_phase_error_at_hz)}",
            _hz(r.method_error.agreement_limit_hz),
            f"{r.loop_error.max_gain_error_db:.3g} dB\n{r.loop_error.max_phase_error_deg:.3g}°",
            _hz(r.loop_error.agreement_limit_hz),
            str(len(r.realization.warnings)) if r.realization.warnings else "none",
        )
    console.print(table)
    for r in survey.rows:
        if r.unstable:  # its errors describe a controller that cannot run: say so beside the table
            console.print(
                f"{r.realization.method}: UNSTABLE at this rate (a pole outside the unit circle the analog "
                "controller has no counterpart of): its error figures describe a controller that runs away; "
                "do not use it (raise --fs or choose another method)",
                markup=False,
            )
    if survey.best:
        console.print(f"best: {survey.best} — {survey.best_reason}", markup=False)
    else:
        console.print(f"no method picked: {survey.best_reason}", markup=False)
    console.print(
        "coefficients (b, a in ascending powers of z^-1, a0 = 1) and difference equations "
        "(e = error input, u = output):",
        markup=False,
    )
    width = max(console.width, 40)
    for row in survey.rows:
        real = row.realization
        pad = " " * (len(real.method) + 4)
        for text, sep in (
            (f"  {real.method}: b = [{_coefs(real.b)}]", ", "),
            (f"{pad}a = [{_coefs(real.a)}]", ", "),
            (f"{pad}{real.difference_equation}", " "),
        ):
            for line in _wrap_terms(text, width, sep):
                console.print(line, markup=False, soft_wrap=True)
    if firmware:
        from convert.digital.structures import STRUCTURES

        any_fw = next(iter(firmware.values()))
        console.print(
            f"structure: {any_fw.structure} ({STRUCTURES[any_fw.structure]}) in {any_fw.word_format}; "
            "the b/a above are the float64 design",
            markup=False,
        )
        for method, fw in firmware.items():
            if fw.refused:
                console.print(f"  {method}: cannot be built: {fw.refused}", markup=False)
                continue
            console.print(
                f"  {method}: quantization alone {fw.gain_error_db:.3g} dB, {fw.phase_error_deg:.3g} deg;", markup=False
            )
            console.print(
                f"    poles moved <= {fw.pole_shift:.2g}; largest |z| = {fw.max_pole_radius:.10g}", markup=False
            )
            for text in fw.failures or ("ok: stable, no overflow, no stall",):
                console.print(f"    {'FAILS: ' if fw.failures else ''}{text}", markup=False)
    for row in survey.rows:
        for note in row.realization.notes:
            console.print(f"note: {note}", markup=False)
        for w in row.realization.warnings:
            console.print(f"warning: {w}", markup=False)
    console.print(
        "The tool computes; it does not certify. Verify on a bench or in simulation before a live swap.", markup=False
    )
