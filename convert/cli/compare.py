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
    ("--max-gain-error", "max_gain_error_db", "number", "largest gain error over the band, dB (default 1), e.g. --max-gain-error 0.5"),
    ("--max-phase-error", "max_phase_error_deg", "number", "largest phase error over the band, deg (default 5), e.g. --max-phase-error 3"),
    ("--max-phase-margin-change", "max_phase_margin_change_deg", "number",
     "largest phase-margin change with --plant, deg, e.g. --max-phase-margin-change 3"),
    ("--max-gain-margin-change", "max_gain_margin_change_db", "number",
     "largest gain-margin change with --plant, dB, e.g. --max-gain-margin-change 1"),
    ("--max-peak-change", "max_sensitivity_peak_change_db", "number",
     "largest sensitivity-peak change with --plant, dB, e.g. --max-peak-change 0.5"),
    ("--max-step-deviation", "max_step_deviation", "ratio",
     "largest setpoint-step response deviation with --plant, fraction of the step, e.g. --max-step-deviation 3%"),
    ("--max-disturbance-deviation", "max_disturbance_deviation", "ratio",
     "largest load-step response deviation with --plant, fraction of the peak, e.g. --max-disturbance-deviation 5%"),
)


def add_parser(subparsers) -> argparse.ArgumentParser:
    p = subparsers.add_parser("compare", help=HELP, description=DESCRIPTION, epilog=EPILOG,
                              formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("a", metavar="A", help="the reference form, e.g. \"2*(1 + 1/(30s))\" or \"pid: kc=2 ti=30s\"")
    p.add_argument("b", metavar="B", nargs="?",
                   help="the form to check against A, e.g. \"digital: b=0.51,-0.49 a=1,-1 fs=10Hz\"")
    p.add_argument("--fs", metavar="HZ", help="sample rate of a digital A or B that names none, e.g. --fs 10Hz")
    p.add_argument("--band", nargs=2, metavar=("LOW", "HIGH"),
                   help="band of comparison, e.g. --band 10mHz 2Hz (default: a decade beyond the corners)")
    p.add_argument("--plant", metavar="EXPR", help="plant model in s for the loop checks, e.g. --plant \"1.2/(0.8s+1)\"")
    p.add_argument("--dead-time", metavar="S", help="plant dead time, e.g. --dead-time 300ms (default 0)")
    p.add_argument("--output-limits", nargs=2, metavar=("LOW", "HIGH"),
                   help="actuator range clamping both loops' outputs in the step tests, e.g. --output-limits -10 10")
    for option, _key, _kind, text in LIMIT_OPTIONS:
        p.add_argument(option, metavar="X", help=text)
    p.add_argument("--draws", metavar="N", type=int, help="Monte Carlo draws for a card with tolerances "
                                                          "(default 2000), e.g. --draws 500")
    p.add_argument("--json", action="store_true", help="print the results as JSON, e.g. --json")
    return p


def run(args, console) -> int:
    from pathlib import Path

    from convert.cli.common import band_from_args, count, emit_json, positive_value
    from convert.compare.pair import compare_pair
    from convert.errors import InputError
    from convert.given import read_spec
    from convert.values import parse_value

    if args.b is None:
        raise InputError("give the form B to compare A with", where="command line")
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
            value = parse_value(text, kind, field=option)
            if not value > 0:
                raise InputError(f"expected a positive limit, found {text!r}", key=option)
            limits[key] = value
    draws = count(args.draws, "--draws", low=1, high=1_000_000) if args.draws is not None else None
    a = read_spec(args.a, "A", fs_hz=fs, base_dir=Path.cwd())
    b = read_spec(args.b, "B", fs_hz=fs, base_dir=Path.cwd())
    result = compare_pair(a, b, band_hz=band, plant_expression=args.plant, dead_time_s=dead,
                          output_range=limits_out, limits=limits, draws=draws)
    if args.json:
        emit_json(console, pair_json(result))
    else:
        _render(console, result)
    return result.exit_code


def pair_json(result) -> dict:
    """The comparison as plain data (what --json prints)."""
    res = result.results
    r = result.realization
    out = {
        "a": result.a.summary(), "b": result.b.summary(),
        "a_controller": {"num": list(res.reference.num), "den": list(res.reference.den),
                         "fs_hz": res.reference.fs_hz},
        "band_hz": list(result.band_hz), "band_default": result.band_default,
        "error": result.error.summary(),
        "coefficients_error": result.coefficients_error.summary() if result.coefficients_error else None,
        "spots": result.spots,
        "agreement": {"intervals_hz": [list(x) for x in result.agreement], "searched_hz": list(result.agreement_grid_hz),
                      "gain_db": result.gain_limit_db, "phase_deg": result.phase_limit_deg},
        "budget": [row.as_dict() for row in r.budget if row.applicable],
        "margins": None if res.source_margins is None else {"a": res.source_margins.as_dict(),
                                                            "b": r.margins.as_dict() if r.margins else None},
        "verdict": res.verdict.overall,
        "judgements": [j.as_dict() for j in res.verdict.judgements if j.status != "not set"],
        "notes": result.notes + list(res.notes) + list(r.warnings),
    }
    return out


def _render(console, result) -> None:
    from rich import box
    from rich.table import Table

    from convert.given import describe
    from convert.values import format_value

    def hz(x):
        return format_value(x, "hz", 4)

    res = result.results
    r = result.realization
    console.print(f"A (reference): {_what(result.a, describe)}", markup=False)
    console.print(f"B (checked):   {_what(result.b, describe)}", markup=False)
    console.print(f"band {hz(result.band_hz[0])} .. {hz(result.band_hz[1])}"
                  + (" (default)" if result.band_default else ""), markup=False)
    table = Table(title="error of B against A (B as it runs: hold and delay included)", title_justify="left",
                  box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False)
    for name in ("frequency", "|A| dB", "|B| dB", "gain error dB", "phase error deg"):
        table.add_column(name, justify="right", no_wrap=True)
    for s in result.spots:
        table.add_row(hz(s["f_hz"]), f"{s['gain_a_db']:.3f}", f"{s['gain_b_db']:.3f}", f"{s['gain_error_db']:+.4f}",
                      f"{s['phase_error_deg']:+.3f}")
    console.print(table)
    e = result.error
    console.print(f"largest over the band: gain {e.max_gain_error_db:.4g} dB at {hz(e.max_gain_error_at_hz)}, "
                  f"phase {e.max_phase_error_deg:.4g} deg at {hz(e.max_phase_error_at_hz)}", markup=False)
    if result.coefficients_error is not None:
        c = result.coefficients_error
        console.print(f"coefficients alone (no hold, no delay): gain {c.max_gain_error_db:.4g} dB, "
                      f"phase {c.max_phase_error_deg:.4g} deg", markup=False)
    lim = f"{result.gain_limit_db:g} dB and {result.phase_limit_deg:g} deg"
    if result.agreement:
        spans = ", ".join(f"{hz(lo)} .. {hz(hi)}" for lo, hi in result.agreement)
        console.print(f"agree within {lim} over: {spans} (searched {hz(result.agreement_grid_hz[0])} .. "
                      f"{hz(result.agreement_grid_hz[1])})", markup=False)
    else:
        console.print(f"they agree within {lim} nowhere in {hz(result.agreement_grid_hz[0])} .. "
                      f"{hz(result.agreement_grid_hz[1])}", markup=False)
    rows = [row for row in r.budget if row.applicable and row.key != "total"]
    for row in rows:
        console.print(f"  {row.label}: {row.max_gain_error_db:.3g} dB, {row.max_phase_error_deg:.3g} deg "
                      f"({row.note})", markup=False)
    if res.source_margins is not None:
        mt = Table(title="loop with the plant", title_justify="left", box=box.SIMPLE_HEAD, show_edge=False,
                   pad_edge=False)
        for name in ("form", "gain margin", "phase margin", "crossover", "sensitivity peak"):
            mt.add_column(name, justify="right" if name != "form" else "left", no_wrap=True)
        for label, m in (("A", res.source_margins), ("B", r.margins)):
            if m is None:
                continue
            mt.add_row(label, "none" if m.gain_margin_db is None else f"{m.gain_margin_db:.3g} dB",
                       "none" if m.phase_margin_deg is None else f"{m.phase_margin_deg:.3g} deg",
                       "none" if m.crossover_hz is None else hz(m.crossover_hz), f"{m.sensitivity_peak_db:.3g} dB")
        console.print(mt)
    vt = Table(title="verdict", title_justify="left", box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False)
    for name in ("criterion", "measured", "limit", "result"):
        vt.add_column(name, no_wrap=True)
    for j in res.verdict.judgements:
        if j.status == "not set":
            continue
        value = "—" if j.value is None else _fmt(j.value, j.unit)
        vt.add_row(j.label, value, _fmt(j.limit, j.unit), j.status.upper() if j.status == "fail" else j.status)
    console.print(vt)
    for note in result.notes + list(res.notes) + list(r.warnings):
        console.print(f"note: {note}", markup=False)
    for j in res.verdict.skipped:
        console.print(f"skipped: {j.label} ({j.note})", markup=False)
    console.print(f"verdict: {res.verdict.overall.upper()}", markup=False)
    console.print("The tool computes; it does not certify. Verify on a bench or in simulation before a live swap.",
                  markup=False)


def _fmt(value, unit: str) -> str:
    if unit.startswith("of "):
        return f"{100 * value:.3g} % {unit}"
    return f"{value:.3g} {unit}"


def _what(given, describe) -> str:
    d = given.data
    if given.form == "analog":
        return d.get("expression") or ", ".join(f"{k} = {v}" for k, v in d["settings"].items())
    return describe(given)
