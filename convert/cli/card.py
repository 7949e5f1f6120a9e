"""``loopshift card``: the controller an existing op-amp card implements.

Two ways in: a SPICE netlist of the card (``loopshift card card.cir``), or a catalog topology and
its part values (``loopshift card --topology pi-rc-feedback --part R1=100k R2=470k C1=1u``).
Prints the controller in all forms (as ``loopshift show`` does), the setpoint structure of a
two-input card, the diode clamps, and which part moves what. Only argparse is imported here.
"""

from __future__ import annotations

import argparse

DESCRIPTION = """\
Compute the controller an op-amp card implements, from its SPICE netlist or from a catalog
topology and the part values read off the board. Prints the transfer function, zeros/poles/gain,
PID forms where it is a PID, the setpoint structure of a card with separate setpoint and
measurement inputs, the diode clamps the firmware must reproduce as output limits, and the
sensitivity of every quantity to every part (percent change per +1 % of the part).

The netlist subset (elements R C L V E G D X, built-in op-amps OPAMP and OPAMP1P, .param,
.subckt, .model, SPICE suffixes with meg = mega and m = milli) is described in docs/netlists.md.
The tool computes; it does not certify: check the card on a bench before a live swap."""

EPILOG = """\
examples:
  (the netlists named here ship with the loopshift source; run these from its top folder)
  loopshift card tests/netlists/pi_card.cir                    input source VIN, output node out
  loopshift card tests/netlists/pi_card.cir --input VIN --output a    another source or node
  loopshift card cases/cards/flow_pi_card.cir --setpoint VSP --measurement VPV
                                                               two-input card: feedback + setpoint path
  loopshift card tests/netlists/pi_card.cir --json             num/den (descending s), zeros, poles, sensitivities
  loopshift card --topology pi-rc-feedback --part R1=100k R2=470k C1=1u
  loopshift card --topology lead-lag-rc --part R1=100k C1=1u --part R2=100k C2=100n

in --part values M is mega and m is milli (loopshift notation, e.g. 4.7k, 2.2n, 1M); inside a
netlist the SPICE rule holds (1meg, 4.7k; 4k7 is refused)."""


def add_parser(subparsers) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(
        "card",
        help="the controller an op-amp card implements (from a SPICE netlist or topology + parts)",
        description=DESCRIPTION,
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument(
        "netlist",
        nargs="?",
        metavar="FILE.cir",
        help="SPICE netlist of the card, e.g. card.cir (first line is the title)",
    )
    parser.add_argument(
        "--input",
        default="VIN",
        metavar="SOURCE",
        help="voltage source that drives the card (default VIN), e.g. --input VERR",
    )
    parser.add_argument(
        "--output",
        default="out",
        metavar="NODE",
        help="node whose voltage is the card's output (default out), e.g. --output u1",
    )
    parser.add_argument(
        "--setpoint",
        metavar="SOURCE",
        help="setpoint source of a two-input card, e.g. --setpoint VSP (needs --measurement)",
    )
    parser.add_argument(
        "--measurement",
        metavar="SOURCE",
        help="measurement source of a two-input card, e.g. --measurement VPV (needs --setpoint)",
    )
    parser.add_argument(
        "--topology",
        metavar="NAME",
        help="catalog topology instead of a netlist, e.g. --topology pi-rc-feedback "
        "(`loopshift circuit --help` lists the catalog)",
    )
    parser.add_argument(
        "--part",
        action="extend",
        nargs="+",
        metavar="NAME=VALUE",
        default=None,
        help="part values for --topology, e.g. --part R1=47k C1=1u (loopshift notation: M mega, m milli)",
    )
    parser.add_argument(
        "--band",
        nargs=2,
        metavar=("LOW", "HIGH"),
        help="band of interest: op-amp poles and zeros above 10x HIGH are left out of the controller "
        "(default: the card's corners with ideal op-amps), e.g. --band 10mHz 5Hz",
    )
    parser.add_argument(
        "--fs",
        metavar="HZ",
        help="sample rate of the planned firmware: roots above fs/2 are left out too, e.g. --fs 200Hz",
    )
    parser.add_argument(
        "--no-sensitivity",
        action="store_true",
        help="skip the sensitivity table (faster on large cards), e.g. --no-sensitivity",
    )
    parser.add_argument("--json", action="store_true", help="print the results as JSON, e.g. --json")
    parser.add_argument(
        "--digits",
        type=int,
        default=6,
        metavar="N",
        help="significant digits in the tables (default 6), e.g. --digits 4",
    )
    return parser


def run(args, console) -> int:
    from convert.errors import InputError

    if args.digits < 1 or args.digits > 17:
        raise InputError(f"expected 1 to 17 significant digits, found {args.digits}", key="--digits")
    if args.topology is not None:
        if args.netlist is not None:
            raise InputError("give either a netlist file or --topology with --part, not both", where="command line")
        for opt in ("setpoint", "measurement"):
            if getattr(args, opt) is not None:
                raise InputError(
                    f"--{opt} applies to a netlist; a two-input topology reports both paths itself",
                    where="command line",
                    key=f"--{opt}",
                )
        data = _from_topology(args)
    else:
        if args.netlist is None:
            raise InputError(
                "give a netlist file (e.g. loopshift card card.cir) or --topology NAME --part ...", where="command line"
            )
        if args.part:
            raise InputError(
                "--part goes with --topology; a netlist carries its own part values", where="command line", key="--part"
            )
        data = _from_netlist(args)
    if args.json:
        from convert.cli.common import emit_json

        emit_json(console, data)
        return 0
    _render(console, data, args.digits)
    return 0


# ------------------------------------------------------------------------------ computation
def _controller_block(controller, pid, reason, title: str) -> dict:
    from convert.cli.show import summary

    data = summary(controller, pid, reason)
    data["source"] = {"expression": title}
    return data


def _rows(rows) -> list[dict]:
    from convert.circuit.sensitivity import ranked_parts

    return [
        {"part": r.part, "kind": r.kind, "value": r.value, "effects_percent_per_percent": r.effects}
        for r in ranked_parts(rows)
    ]


def _from_netlist(args) -> dict:
    from convert.circuit.netlist import read_netlist_file
    from convert.pipeline import read_card_source

    netlist = read_netlist_file(args.netlist)
    if (args.setpoint is None) != (args.measurement is None):
        from convert.errors import InputError

        raise InputError(
            "give both --setpoint and --measurement, or neither",
            where="command line",
            key="--setpoint" if args.setpoint is None else "--measurement",
        )
    hint = None
    if args.setpoint is None:
        from convert.circuit.card import two_input_hint

        known = {e.name for e in netlist.sources}
        hint = two_input_hint(
            netlist, args.input if args.input.upper() in known else None, spelling="--setpoint {sp} --measurement {pv}"
        )
        if hint and args.input.upper() not in known:
            from convert.errors import InputError

            raise InputError(f"input source {args.input!r} not found; {hint}", where=netlist.source, key="--input")
    from convert.cli.common import band_from_args, positive_value

    fs = None if args.fs is None else positive_value(args.fs, "hz", "--fs")
    analysis = read_card_source(  # the same reading as a case whose source is this netlist
        netlist,
        input=args.input,
        output=args.output,
        setpoint=args.setpoint,
        measurement=args.measurement,
        sensitivities=not args.no_sensitivity,
        band_hz=band_from_args(args.band),
        fs_hz=fs,
    )
    data = _controller_block(
        analysis.controller,
        analysis.pid,
        analysis.not_pid_reason,
        f"{netlist.source} — {netlist.title}" if netlist.title else netlist.source,
    )
    data["card"] = {
        "file": args.netlist,
        "title": netlist.title,
        "inputs": list(analysis.inputs),
        "output": analysis.output,
        "elements": len(netlist.elements),
    }
    data["paths"] = {
        name: {
            "expression": r.controller.expression(12),
            "num": list(r.controller.num),
            "den": list(r.controller.den),
            "cancelled": [{"zero": z, "pole": p} for z, p in r.cancelled],
            "max_fit_error": r.max_fit_error,
        }
        for name, r in analysis.results.items()
    }
    st = analysis.structure
    data["setpoint_structure"] = (
        None
        if st is None
        else {
            "description": st.description,
            "feedback": {
                "expression": st.feedback.expression(12),
                "num": list(st.feedback.num),
                "den": list(st.feedback.den),
            },
            "setpoint_path": {
                "expression": st.setpoint_path.expression(12),
                "num": list(st.setpoint_path.num),
                "den": list(st.setpoint_path.den),
            },
            "setpoint_filter": {
                "expression": st.setpoint_filter.expression(12),
                "num": list(st.setpoint_filter.num),
                "den": list(st.setpoint_filter.den),
            },
            "b": None if st.pid is None else st.pid.b,
            "c": None if st.pid is None else st.pid.c,
        }
    )
    if st is not None and st.pid is None and data.get("pid"):
        # two inputs whose setpoint path is no weighted form of this PID: no b, c describe it
        data["pid"]["b"] = data["pid"]["c"] = None
    data["clamps"] = [
        {
            "diodes": list(c.diodes),
            "node_a": c.node_a,
            "node_b": c.node_b,
            "conducts_above_v": c.positive_v,
            "conducts_below_v": -c.negative_v,
            "role": c.role,
            "where": c.where,
            "text": c.describe(),
        }
        for c in analysis.clamps
    ]
    data["output_limits"] = None if analysis.output_limits is None else list(analysis.output_limits)
    data["reduction"] = None if analysis.reduction is None else analysis.reduction.as_dict()
    data["warnings"] = list(netlist.warnings)
    data["notes"] = ([hint] if hint else []) + list(analysis.notes)
    data["sensitivities"] = None if args.no_sensitivity else _rows(analysis.sensitivities)
    return data


def _parse_parts(words) -> dict[str, str]:
    from convert.errors import InputError

    parts: dict[str, str] = {}
    for word in words or []:
        name, sep, value = word.partition("=")
        if not sep or not name.strip() or not value.strip():
            raise InputError(f"expected NAME=VALUE such as R1=47k, found {word!r}", key="--part")
        name = name.strip().upper()
        if name in parts:
            raise InputError(f"{name} is given twice", key="--part")
        parts[name] = value.strip()
    return parts


def _from_topology(args) -> dict:
    import math

    import numpy as np

    from convert.errors import InputError

    try:
        from convert.circuit.topologies import get_topology
    except ImportError:  # pragma: no cover - the catalog ships with the package
        raise InputError(
            "the topology catalog (convert.circuit.topologies) is not available in this build", key="--topology"
        ) from None
    from convert.circuit.card import setpoint_quantities, setpoint_structure
    from convert.circuit.sensitivity import controller_quantities, value_sensitivities
    from convert.pid import pid_from_controller, why_not_pid

    topo = get_topology(args.topology, key="--topology")
    raw = _parse_parts(args.part)
    if not raw:
        raise InputError(
            f"{topo.name} needs part values: --part " + " ".join(f"{p}=..." for p in topo.part_names), key="--part"
        )
    from convert.cli.common import at

    with at("--part"):
        checked = topo.check_parts(raw, where="--part")
    values = {k: float(np.asarray(v).ravel()[0]) for k, v in checked.items()}

    def analyse(vals: dict[str, float]):
        if topo.two_input:
            paths = topo.paths_from_parts(vals)
            st = setpoint_structure(paths["setpoint"], paths["measurement"].scaled(-1.0))
            return st.feedback, (st.pid or pid_from_controller(st.feedback)), st
        c = topo.controller_from_parts(vals)
        return c, pid_from_controller(c), None

    controller, pid, st = analyse(values)
    controller = controller.with_name(topo.name)
    reason = None if pid is not None else why_not_pid(controller)
    data = _controller_block(controller, pid, reason, f"topology {topo.name}")
    data["card"] = {
        "topology": topo.name,
        "inverting": topo.inverting,
        "description": topo.description,
        "parts": values,
    }
    notes = []
    if topo.inverting:
        notes.append(
            f"{topo.name} inverts: the bare stage's output is −1 × this controller; add an inverter or "
            "swap the error amplifier's inputs to get it with the sign shown"
        )
    data["setpoint_structure"] = (
        None
        if st is None
        else {
            "description": st.description,
            "setpoint_path": {
                "expression": st.setpoint_path.expression(12),
                "num": list(st.setpoint_path.num),
                "den": list(st.setpoint_path.den),
            },
            "b": None if st.pid is None else st.pid.b,
            "c": None if st.pid is None else st.pid.c,
        }
    )
    data["clamps"] = []
    data["notes"] = notes
    if args.no_sensitivity:
        data["sensitivities"] = None
    else:
        finite = {k: v for k, v in values.items() if math.isfinite(v)}

        def evaluate(vals):
            c, p, structure = analyse({**values, **vals})
            out = controller_quantities(c, p)
            if structure is not None:
                out.update(setpoint_quantities(structure))
            return out

        rows = value_sensitivities(finite, evaluate, {p.name: p.kind for p in topo.parts})
        data["sensitivities"] = _rows(rows)
    return data


# ------------------------------------------------------------------------------ rendering
def _render(console, data: dict, d: int) -> None:
    from rich import box
    from rich.table import Table

    from convert.cli.show import _render as render_controller

    for text in data.get("warnings") or ():  # readings that may not be what was meant: before any result
        console.print(f"warning: {text}", style="bold yellow", markup=False, highlight=False)
    render_controller(console, data, d)
    st = data.get("setpoint_structure")
    if st:
        console.print()
        console.print("Setpoint and measurement", style="bold")
        console.print(st["description"], markup=False, highlight=False)
        console.print(f"setpoint path H_sp(s) = {st['setpoint_path']['expression']}", markup=False, highlight=False)
        if "setpoint_filter" in st:
            console.print(
                f"setpoint filter F(s) = H_sp / C = {st['setpoint_filter']['expression']}",
                markup=False,
                highlight=False,
            )
    red = data.get("reduction")
    if red and red["changed"]:
        console.print()
        console.print("Op-amp parasitics left out (the controller above is the reduced one)", style="bold")
        console.print(f"full card C(s) = {red['full_card']['expression']}", markup=False, highlight=False)
        e = red["error_over_band"]
        console.print(
            f"error of leaving them out, {red['band_hz'][0]:.4g} Hz to {red['band_hz'][1]:.4g} Hz: "
            f"{e['max_gain_error_db']:.3g} dB, {e['max_phase_error_deg']:.3g}° (reduced against full card)",
            markup=False,
            highlight=False,
        )
    paths = data.get("paths") or {}
    if len(paths) > 1:
        for name, p in paths.items():
            console.print(f"from {name}: {p['expression']}", markup=False, highlight=False)
    if data.get("clamps"):
        console.print()
        console.print("Clamps (left out of the linear analysis)", style="bold")
        console.print(_bullets([c["text"] for c in data["clamps"]], mark=""))
        lim = data.get("output_limits")
        if lim:
            from convert.circuit.clamps import limits_text

            console.print(
                f"output limits for the firmware: {limits_text(tuple(lim))} (what the clamps hold "
                f"V({data['card']['output']}) to)",
                markup=False,
                highlight=False,
            )
    if data.get("notes"):
        console.print()
        console.print("Notes", style="bold")
        console.print(_bullets(data["notes"], mark="-"))
    rows = data.get("sensitivities")
    if rows:
        t = Table(
            title="Sensitivity: % change per +1 % of the part (pots: per 1 % of travel), largest first",
            box=box.SIMPLE_HEAD,
            title_justify="left",
        )
        t.add_column("part", style="bold")
        t.add_column("value", justify="right")
        t.add_column("moves", overflow="fold")
        for r in rows:
            eff = sorted(r["effects_percent_per_percent"].items(), key=lambda kv: -abs(kv[1]))
            shown = [f"{k} {v:+.{min(d, 3)}g}" for k, v in eff if abs(v) >= 0.005]
            t.add_row(r["part"], _value(r), "; ".join(shown) if shown else "nothing measurable")
        console.print(t)
    console.print(
        "The tool computes; it does not certify. Verify on a bench before a live swap and follow the "
        "site's change procedure.",
        markup=False,
        highlight=False,
    )


def _bullets(items, mark: str):
    """A list whose wrapped lines line up under the text, not at the left margin."""
    from rich.table import Table
    from rich.text import Text

    grid = Table.grid(padding=(0, 1))
    grid.add_column(no_wrap=True)
    grid.add_column()
    for item in items:
        grid.add_row(" " + mark, Text(str(item)))
    return grid


def _value(row: dict) -> str:
    from convert.values import format_value

    kind = {"R": "ohm", "pot": "ohm", "C": "farad", "L": "henry", "gbw": "hz"}.get(row["kind"], "number")
    return format_value(row["value"], kind, 4)
