"""``loopshift circuit``: design an op-amp circuit from standard parts for a controller, and say
how far the built circuit is from it (rounding, tolerances, derivative filter, op-amp).

Only argparse is imported at module level; the computation loads when the command runs.
"""

from __future__ import annotations

import argparse

MAX_DRAWS = 1_000_000  # = convert.circuit.tolerance.MAX_DRAWS (kept here: CLI modules import no numpy)

DESCRIPTION = """\
Design an op-amp circuit that realizes a controller with parts you can buy: pick a topology
from the catalog (or the simplest that realizes the controller exactly), choose capacitors
from a preferred series, compute resistors, round every part to an IEC 60063 series (in log
space), and search the capacitor choices and rounding directions for the smallest error.
Then report each error source alone: rounding, part tolerances (Monte Carlo and worst case),
the derivative filter the circuit adds, and the op-amp's gain-bandwidth and output swing.

The tool computes; it does not certify. Verify the circuit on a bench or in simulation before
a live swap, plan a bumpless transfer, keep safety interlocks independent of this controller,
and follow your site's change procedure, local codes and licensed practice."""

EPILOG = """\
examples:
  loopshift circuit "2*(1 + 1/(0.3*s))"                         a PI: picks pi-rc-feedback
  loopshift circuit --pid kc=2 ti=3s td=0.5s n=10 --resistors E24 --capacitors E6
  loopshift circuit --pid kp=2 ki=1/s kd=0.5s tf=0.05s b=0.5 c=0  setpoint weights: two-input stage
  loopshift circuit "(0.5s+1)/(0.05s+1)" --topology lead-lag-rc --netlist lead.cir --bom lead.csv
  loopshift circuit "(0.2 - 0.18 z^-1)/(1 - z^-1)" --fs 100Hz   a digital PI brought back to analog
  loopshift circuit "2*(1+1/(0.3*s))" --tolerance R=1% C=10% --draws 20000 --seed 7
  loopshift circuit "2*(1+1/(0.3*s))" --opamp-gbw 1MHz --amplitude 1V --rail 12V
  loopshift circuit "2*(1+1/(0.3*s))" --trim kp=1..4 --schematic pi.svg
  loopshift circuit --catalog                                    list the topologies

Rounding is to the nearest series value in log space (geometric midpoint). The search score is
the largest |ln(H_built/H_target)| over the band (1 dB weighs as 6.6 degrees). See docs/circuits.md."""


def _err(x: float, fmt: str) -> str:
    """An error figure; +∞ (a root on the jω axis inside the band) reads "unbounded"."""
    return "unbounded" if x == float("inf") else format(x, fmt)


def _bounded_only(errors: dict) -> dict:
    """``errors`` without the comparisons that are unbounded for a reason (a root on the jω axis
    inside the band, said in their ``unbounded_note``): those infinities are the result."""
    if isinstance(errors, dict):
        if errors.get("unbounded_note"):
            return {}
        return {k: _bounded_only(v) for k, v in errors.items()}
    return errors


def _figures_from_budget(errors: dict, budget) -> None:
    """Put the pipeline's budget figures (:func:`convert.pipeline.circuit_budget`, the rows
    ``loopshift report`` writes) into the documented ``errors`` fields, so the command shows one
    figure per error source: rounding, derivative filter and op-amp maxima (dB, deg, Hz)."""
    for section, key in (
        ("rounding", "series_rounding"),
        ("derivative_filter", "derivative_filter"),
        ("opamp", "opamp_gbw"),
    ):
        row = budget.row(key)
        target = errors.get(section, {}).get("response")
        if not row.applicable or target is None:
            continue
        for name in ("max_gain_error_db", "max_gain_error_at_hz", "max_phase_error_deg", "max_phase_error_at_hz"):
            target[name] = getattr(row, name)
        target["unbounded_note"] = row.unbounded_note
        target["band_hz"] = [float(budget.band_f_hz[0]), float(budget.band_f_hz[-1])]


def add_parser(subparsers) -> argparse.ArgumentParser:
    from convert.cli.common import add_controller_input

    p = subparsers.add_parser(
        "circuit",
        help="design an op-amp circuit from standard parts and report its errors",
        description=DESCRIPTION,
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    add_controller_input(p, allow_z=True)
    p.add_argument("--fs", metavar="HZ", help="sample rate of an expression in z, e.g. --fs 100Hz")
    p.add_argument(
        "--inverse-method",
        default="tustin",
        metavar="METHOD",
        help="method bringing a digital controller back to analog: tustin (default), zoh, matched or "
        "backward-euler, e.g. --inverse-method zoh",
    )
    p.add_argument(
        "--topology",
        default="auto",
        metavar="NAME",
        help="catalog topology, cascade (a chain of catalog stages for any proper, stable or "
        "integrating controller), or auto for the simplest single stage that realizes the "
        "controller exactly and else a cascade (default auto), e.g. --topology pid-parallel; "
        "see --catalog",
    )
    p.add_argument(
        "--max-opamps",
        type=int,
        metavar="N",
        help="at most N op-amps (a cascade's stages and any inverter); with auto, a catalog stage over "
        "the cap gives way to a cascade, e.g. --max-opamps 3",
    )
    p.add_argument("--catalog", action="store_true", help="list the catalog of topologies and exit, e.g. --catalog")
    p.add_argument(
        "--resistors",
        default="E96",
        metavar="SERIES",
        help="IEC 60063 series for resistors (E3 E6 E12 E24 E48 E96 E192; default E96), e.g. --resistors E24",
    )
    p.add_argument(
        "--capacitors",
        default="E12",
        metavar="SERIES",
        help="IEC 60063 series for capacitors (default E12), e.g. --capacitors E6",
    )
    p.add_argument("--r-min", default="1k", metavar="OHMS", help="smallest resistor (default 1k), e.g. --r-min 2.2k")
    p.add_argument(
        "--r-max", default="1M", metavar="OHMS", help="largest resistor (default 1M; M is mega), e.g. --r-max 4.7M"
    )
    p.add_argument(
        "--c-min", default="100p", metavar="FARADS", help="smallest capacitor (default 100p), e.g. --c-min 1n"
    )
    p.add_argument(
        "--c-max",
        default="10u",
        metavar="FARADS",
        help="largest capacitor, non-polarized (default 10u), e.g. --c-max 22u",
    )
    p.add_argument(
        "--band",
        nargs=2,
        metavar=("LOW", "HIGH"),
        help="band for the search and the error figures (default: a decade around the corners), "
        "e.g. --band 10mHz 100Hz",
    )
    p.add_argument(
        "--derivative-filter",
        default="10",
        metavar="N",
        help="for an ideal derivative: a derivative filter with time constant Td/N (default N = 10), "
        "the same rule as `loopshift digital`, e.g. --derivative-filter 8",
    )
    p.add_argument(
        "--tolerance",
        nargs="+",
        metavar="PART=PCT",
        help="part tolerances by kind or part (default R=1%% C=5%%), e.g. --tolerance R=1%% C=10%% R3=0.1%%",
    )
    p.add_argument(
        "--distribution",
        default="uniform",
        choices=("uniform", "normal"),
        help="Monte Carlo spread inside the tolerance: uniform (default), or normal with the tolerance "
        "as 3 sigma, e.g. --distribution normal",
    )
    p.add_argument(
        "--draws",
        type=int,
        default=10000,
        metavar="N",
        help=f"Monte Carlo draws (default 10000, 200 to {MAX_DRAWS:,}; 0 skips the tolerance analysis), "
        "e.g. --draws 100000",
    )
    p.add_argument("--seed", type=int, default=1, metavar="S", help="Monte Carlo seed (default 1), e.g. --seed 7")
    p.add_argument(
        "--opamp-gbw",
        metavar="HZ",
        help="op-amp gain-bandwidth for the single-pole model in the errors and the netlist, e.g. --opamp-gbw 1MHz",
    )
    p.add_argument(
        "--amplitude", metavar="VOLTS", help="input amplitude for the output-swing check, e.g. --amplitude 1V"
    )
    p.add_argument("--rail", metavar="VOLTS", help="largest output peak of the op-amps, e.g. --rail 12V")
    p.add_argument(
        "--trim",
        nargs="+",
        metavar="PARAM=LOW..HIGH",
        help="size a trimmer pot so a design quantity covers a range, e.g. --trim kp=1..4",
    )
    p.add_argument(
        "--top",
        type=int,
        default=5,
        metavar="N",
        help="candidate part sets to list (default 5, 1 to 100), e.g. --top 3",
    )
    p.add_argument(
        "--netlist", metavar="FILE", help="write a SPICE netlist realizing +C(s) from in to out, e.g. --netlist pid.cir"
    )
    p.add_argument(
        "--bom",
        metavar="FILE",
        help="write the bill of materials (one row per part) as ASCII CSV; quantities, ratings and "
        "dielectrics are in --buy-list, e.g. --bom pid.csv",
    )
    p.add_argument(
        "--buy-list",
        metavar="FILE",
        help="write the bill of materials a buyer orders from (grouped lines, ratings from --rail and "
        "--amplitude, op-amp requirements, a tighter tolerance for a dominant part) as ASCII CSV, "
        "or as JSON when FILE ends in .json, e.g. --buy-list order.csv",
    )
    p.add_argument("--schematic", metavar="FILE", help="draw the schematic (.png or .svg), e.g. --schematic pid.svg")
    p.add_argument("--force", action="store_true", help="allow overwriting existing output files, e.g. --force")
    p.add_argument("--json", action="store_true", help="print the result as JSON, e.g. --json")
    return p


def _value(text, kind, field):
    from convert.values import parse_value

    return parse_value(text, kind, field=field)


def _check_outputs(args) -> list[str]:
    from convert.cli.common import check_output_files
    from convert.errors import InputError

    if args.schematic and not args.schematic.lower().endswith((".png", ".svg")):
        raise InputError(f"a schematic is written as .png or .svg, found {args.schematic!r}", key="--schematic")
    if args.buy_list and not args.buy_list.lower().endswith((".csv", ".json")):
        raise InputError(f"a buy list is written as .csv or .json, found {args.buy_list!r}", key="--buy-list")
    return check_output_files(
        {"--netlist": args.netlist, "--bom": args.bom, "--schematic": args.schematic, "--buy-list": args.buy_list},
        force=args.force,
    )


def _trims(args, design):
    from convert.circuit.trim import size_trim
    from convert.cli.common import at
    from convert.errors import InputError

    out = []
    for word in args.trim or ():
        name, sep, rng = word.partition("=")
        lo, sep2, hi = rng.partition("..")
        if not sep or not sep2:
            raise InputError(f"expected PARAM=LOW..HIGH such as kp=1..4, found {word!r}", key="--trim")
        with at(None, rename={"trim": "--trim"}):
            out.append(size_trim(design, name.strip(), _value(lo, "number", "--trim"), _value(hi, "number", "--trim")))
    return out


def _catalog(console, as_json: bool) -> int:
    from convert.circuit.topologies import TOPOLOGIES
    from convert.cli.common import emit_json

    if as_json:
        emit_json(console, {name: t.summary() for name, t in TOPOLOGIES.items()})
        return 0
    from rich.table import Table

    table = Table(title="op-amp stage catalog", show_lines=True)
    for col in ("name", "amps", "sign", "realizes", "parts"):
        table.add_column(col)
    for t in TOPOLOGIES.values():
        table.add_row(
            t.name,
            str(t.amplifiers),
            "inverting" if t.inverting else "non-inverting",
            t.represents,
            ", ".join(p.name for p in t.parts),
        )
    console.print(table)
    return 0


def run(args, console) -> int:
    if args.catalog:
        return _catalog(console, args.json)
    import math

    from convert.circuit.design import DesignOptions, design_circuit, error_sources
    from convert.circuit.opamp import OpAmpModel
    from convert.circuit.tolerance import parse_tolerances
    from convert.cli.analog import INVERSE_NAMES
    from convert.cli.common import (
        at,
        band_from_args,
        controller_from_args,
        count,
        emit_json,
        positive_value,
        write_outputs,
    )
    from convert.errors import InputError

    from convert.circuit.tolerance import draws_problem

    count(args.draws, "--draws", low=0, high=MAX_DRAWS)
    count(args.seed, "--seed", low=0, high=2**32 - 1)
    if args.draws and draws_problem(args.draws):  # 0 skips the tolerance analysis
        raise InputError(draws_problem(args.draws) + " (or 0 to skip the tolerance analysis)", key="--draws")
    count(args.top, "--top", low=1, high=100)
    if args.inverse_method not in INVERSE_NAMES:
        raise InputError(
            f"no inverse for method {args.inverse_method!r}; expected one of {', '.join(INVERSE_NAMES)}",
            key="--inverse-method",
        )
    fs = positive_value(args.fs, "hz", "--fs") if args.fs else None
    controller, settings = controller_from_args(args, fs_hz=fs)
    band = band_from_args(args.band)
    renames = {
        "resistor range": "--r-min/--r-max",
        "capacitor range": "--c-min/--c-max",
        "topology": "--topology",
        "method": "--inverse-method",
        "resistor maximum": "--r-max",
        "resistor minimum": "--r-min",
        "capacitor maximum": "--c-max",
        "capacitor minimum": "--c-min",
        "resistors": "--resistors",
        "capacitors": "--capacitors",
        "band": "--band",
        "derivative filter": "--derivative-filter",
        "draws": "--draws",
        "opamp gbw": "--opamp-gbw",
        "max opamps": "--max-opamps",
        "amplitude/rail": "--amplitude/--rail",
        "conversion method": "--inverse-method",
    }
    with at(None, rename=renames):
        options = DesignOptions(
            topology=args.topology,
            resistors=args.resistors,
            capacitors=args.capacitors,
            r_min=positive_value(args.r_min, "ohm", "--r-min"),
            r_max=positive_value(args.r_max, "ohm", "--r-max"),
            c_min=positive_value(args.c_min, "farad", "--c-min"),
            c_max=positive_value(args.c_max, "farad", "--c-max"),
            band_hz=band,
            derivative_filter_n=positive_value(args.derivative_filter, "number", "--derivative-filter"),
            inverse_method=args.inverse_method,
            top=args.top,
            max_opamps=args.max_opamps,
        )
    outputs = _check_outputs(args)
    opamp = OpAmpModel(positive_value(args.opamp_gbw, "hz", "--opamp-gbw")) if args.opamp_gbw else None
    amplitude = positive_value(args.amplitude, "volt", "--amplitude") if args.amplitude else None
    rail = positive_value(args.rail, "volt", "--rail") if args.rail else None
    if (amplitude is None) != (rail is None):
        raise InputError("the output-swing check needs both --amplitude and --rail", key="--amplitude/--rail")
    with at(None, rename=renames):
        design = design_circuit(controller, options, settings=settings)
    with at("--tolerance"):
        tolerances = parse_tolerances(args.tolerance, part_names=design.topology.part_names, where="--tolerance")
    import numpy as np

    from convert.compare.frequency import log_grid
    from convert.pipeline import circuit_budget

    # Overflow far from the corners shows up as a non-finite figure, refused just below.
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        # the figures are the pipeline's budget rows, the same stage `loopshift report` runs
        grid = log_grid(design.band_hz[0], design.band_hz[1], 100)
        budget = circuit_budget(
            design,
            controller,
            design.target if controller.is_digital else controller,
            grid,
            tolerances=dict(tolerances),
            draws=args.draws,
            seed=args.seed,
            distribution=args.distribution,
            opamp_gbw_hz=None if opamp is None else opamp.gbw_hz,
            display_f_hz=grid,
            parameters=True,
        )
        errors = error_sources(
            design,
            tolerances=tolerances,
            draws=args.draws,
            seed=args.seed,
            distribution=args.distribution,
            opamp=opamp,
            amplitude_v=amplitude,
            rail_v=rail,
            run=budget.monte_carlo,
        )
    _figures_from_budget(errors, budget)
    from convert.jsonable import non_finite_path

    bad = non_finite_path(_bounded_only(errors))
    if bad:  # never print NaN as a result (issue 9): the figures over/underflow somewhere in the band
        shown = f"{band[0]:g} Hz .. {band[1]:g} Hz" if band else "the default band"
        raise InputError(
            f"the error figure {bad} is not a finite number over {shown}: the circuit's response "
            "overflows or underflows there in floating point; give a band a few decades around the "
            "controller's corners",
            key="--band",
        )
    from convert.circuit.opamp import swing_noted

    design.notes[:] = swing_noted(design.notes, amplitude, rail)
    trims = _trims(args, design)
    writers = {}
    if args.netlist:
        from convert.circuit.netlist_out import design_netlist

        writers["--netlist"] = design_netlist(design, opamp=opamp)
    if args.bom:
        from convert.circuit.bom import bom_csv, bom_rows

        writers["--bom"] = bom_csv(bom_rows(design, tolerances, trims))
    if args.buy_list:
        import json

        from convert.circuit.buylist import buy_list
        from convert.jsonable import to_jsonable

        order = buy_list(
            design,
            tolerances,
            rail_v=rail or 15.0,
            amplitude_v=amplitude,
            draws=args.draws,
            seed=args.seed,
            distribution=args.distribution,
        )
        writers["--buy-list"] = (
            json.dumps(to_jsonable(order.summary()), indent=2, ensure_ascii=True) + "\n"
            if args.buy_list.lower().endswith(".json")
            else order.csv()
        )
        for t in order.tightenings:
            design.notes.append(f"buy list: {t.part} {t.note()}")
    if args.schematic:
        from convert.report.schematic import design_schematic

        writers["--schematic"] = lambda tmp: design_schematic(design, tmp)
    write_outputs(outputs, writers)  # all or none
    written = [o.given for o in outputs]
    link_notes = [o.note for o in outputs if o.note]

    parts = {}
    for p in design.topology.parts:
        nominal = design.nominal.get(p.name)
        rounded = design.rounded[p.name]
        if (p.kind == "R" and math.isinf(rounded)) or (p.kind == "C" and rounded == 0):
            parts[p.name] = {"nominal": None, "rounded": None, "fitted": False, "role": p.role}
            continue
        parts[p.name] = {
            "nominal": nominal,
            "rounded": rounded,
            "fitted": True,
            "role": p.role,
            "series": options.series_for(p.kind),
            "unit": "ohm" if p.kind == "R" else "farad",
        }
    data = {
        "topology": design.topology.name,
        "inverting": design.topology.inverting,
        "needs_inverter": design.needs_inverter,
        "target": {"num": list(design.target.num), "den": list(design.target.den)},
        "num": list(design.realized.num),
        "den": list(design.realized.den),
        "design_quantities": design.params,
        "parts": parts,
        "candidates": [c.summary() for c in design.candidates],
        "errors": errors,
        "budget": [row.as_dict() for row in budget.rows],
        "trims": [t.summary() for t in trims],
        "notes": design.notes,
        "written": written,
        "written_through_links": link_notes,
        "seed": args.seed,
        "series": {"resistors": options.resistors, "capacitors": options.capacitors},
    }
    if design.cascade is not None:
        data["cascade"] = {
            "stages": design.cascade.summary(),
            "opamps": design.cascade.total_amplifiers,
            "noise_gain": design.cascade.noise_gain,
        }
    if args.json:
        emit_json(console, data)
        return 0
    _render(console, design, data)
    return 0


def _render(console, design, data) -> None:
    from rich.table import Table

    from convert.values import format_value

    topo = design.topology
    console.print(f"{topo.name}: {topo.description}", markup=False)
    console.print(f"target  C(s) = {design.target.expression(6)}", markup=False)
    console.print(f"built   C(s) = {design.realized.expression(6)}", markup=False)
    for note in design.notes:
        console.print(f"note: {note}", markup=False)
    table = Table(title="parts")
    for col in ("part", "computed", "rounded", "series", "role"):
        table.add_column(col)
    for name, row in data["parts"].items():
        kind = "ohm" if topo.part(name).kind == "R" else "farad"
        if not row["fitted"]:
            table.add_row(name, "-", "not fitted", "", row["role"])
            continue
        table.add_row(
            name,
            format_value(row["nominal"], kind, 4),
            format_value(row["rounded"], kind, 4),
            row["series"],
            row["role"],
        )
    console.print(table)
    err = data["errors"]
    t2 = Table(title=f"error by source, {err['band_hz'][0]:.4g} Hz to {err['band_hz'][1]:.4g} Hz")
    for col in ("source", "max gain error (dB)", "max phase error (deg)", "detail"):
        t2.add_column(col)
    r = err["rounding"]["response"]
    t2.add_row(
        "rounding to series",
        _err(r["max_gain_error_db"], ".3f"),
        _err(r["max_phase_error_deg"], ".2f"),
        ", ".join(f"{k} {v['relative_error'] * 100:+.2f}%" for k, v in err["rounding"]["quantities"].items()),
    )
    if "derivative_filter" in err:
        r = err["derivative_filter"]["response"]
        t2.add_row(
            "derivative filter added", _err(r["max_gain_error_db"], ".3f"), _err(r["max_phase_error_deg"], ".2f"), ""
        )
    if "setpoint_path" in err:
        r = err["setpoint_path"]["response"]
        t2.add_row(
            "setpoint path (rounding)", _err(r["max_gain_error_db"], ".3f"), _err(r["max_phase_error_deg"], ".2f"), ""
        )
    if "tolerance" in err:
        mc = err["tolerance"]["monte_carlo"]
        wc = err["tolerance"]["worst_case"]
        fig = mc["figures"]["tolerances"]
        t2.add_row(
            f"tolerances, Monte Carlo (p{mc['figure_percentile']:g} of each draw's largest error)",
            f"{fig['max_gain_error_db']:.3f}",
            f"{fig['max_phase_error_deg']:.2f}",
            f"{mc['draws']} draws, seed {mc['seed']}, {mc['distribution']}",
        )
        t2.add_row("tolerances, worst case", f"{wc['spread']['gain_db']:.3f}", f"{wc['spread']['phase_deg']:.2f}", "")
    op = err.get("opamp", {})
    if "response" in op:
        r = op["response"]
        t2.add_row(
            f"op-amp GBW {format_value(op['gbw_hz'], 'hz', 3)}",
            _err(r["max_gain_error_db"], ".3f"),
            _err(r["max_phase_error_deg"], ".2f"),
            "",
        )
    if "swing" in op:
        sw = op["swing"]
        detail = (
            "within the rails"
            if sw["ok"]
            else "; ".join(
                f"{amp} exceeds {sw['rail_v']:g} V from {rng[0][0]:.4g} Hz" for amp, rng in sw["exceeded_hz"].items()
            )
        )
        t2.add_row(f"output swing at {sw['amplitude_v']:g} V in", "", "", detail)
    total = next(row for row in data["budget"] if row["key"] == "total")
    t2.add_row(
        "total, everything on" + (f" (p{total['percentile']:g} over the draws)" if total["percentile"] else ""),
        _err(total["max_gain_error_db"], ".3f"),
        _err(total["max_phase_error_deg"], ".2f"),
        "against the controller as the loop sees it",
    )
    console.print(t2)
    if "tolerance" in err:
        t3 = Table(title="design quantities across tolerances (Monte Carlo percentiles; worst case)")
        for col in ("quantity", "nominal", "0.5 %", "99.5 %", "worst low", "worst high"):
            t3.add_column(col)
        wcp = err["tolerance"]["worst_case"]["parameters"]
        for k, v in err["tolerance"]["monte_carlo"]["parameters"].items():
            w = wcp.get(k, [float("nan"), float("nan")])
            t3.add_row(k, _g5(v["nominal"]), *(_g5(x) for x in v["percentiles"]), _g5(w[0]), _g5(w[1]))
        console.print(t3)
    t4 = Table(title="best part sets")
    t4.add_column("#")
    t4.add_column("score")
    t4.add_column("gain dB")
    t4.add_column("phase deg")
    t4.add_column("parts")
    for i, c in enumerate(data["candidates"], 1):
        t4.add_row(
            str(i),
            f"{c['score']:.4g}",
            _err(c["max_gain_error_db"], ".3f"),
            _err(c["max_phase_error_deg"], ".2f"),
            " ".join(
                f"{k}={format_value(v, 'ohm' if k.startswith('R') else 'farad', 3)}"
                for k, v in c["parts"].items()
                if v not in (0.0, float("inf"))
            ),
        )
    console.print(t4)
    for t in data["trims"]:
        console.print(
            f"trim {t['parameter']}: {t['part']} = {format_value(t['fixed_ohm'], 'ohm', 3)} fixed + "
            f"{format_value(t['pot_ohm'], 'ohm', 3)} pot covers {t['covered'][0]:.4g} .. {t['covered'][1]:.4g}",
            markup=False,
        )
    for path in data["written"]:
        console.print(f"wrote {path}", markup=False)
    for note in data["written_through_links"]:
        console.print(f"note: {note}", markup=False)
    console.print("Verify on a bench or in simulation before a live swap; the tool computes, it does not certify.")


def _g5(x) -> str:
    """Five significant digits; "—" where a quantity has no value (NaN: not defined for this design)."""
    import math

    return "—" if x is None or (isinstance(x, float) and math.isnan(x)) else f"{x:.5g}"
