"""``loopshift show``: a controller in all its forms (transfer function, zeros/poles/gain,
DC gain, properness, PID parameters in each form, corner frequencies in Hz), as tables or JSON.

Only argparse is imported at module level; numpy and rich load in :func:`run`. This command
never imports scipy or python-control.
"""

from __future__ import annotations

import argparse

DESCRIPTION = """\
Print a controller in every form loopshift knows: the transfer function (coefficients in
descending powers of s, or of z with --fs), zeros, poles and gain, the DC gain (or
"integrating"), whether it is proper, the corner frequencies in Hz, and - where it is a PID -
its parameters in the parallel, ideal (standard) and series (interacting) forms."""

EPILOG_HEAD = """\
examples:
  loopshift show "2*(1 + 1/(30*s))"                      a PI from a drawing
  loopshift show "(0.5s+1)/(0.05s+1)"                    a lead network
  loopshift show --pid kc=2 ti=30s td=5s n=10            ideal-form PID with filter N = 10
  loopshift show --pid pb=50% reset=2/min td=0.1min form=series action=direct
  loopshift show --pid kp=1.2 ki=0.04/s kd=3s tf=0.3s c=0   parallel, derivative on measurement
  loopshift show "(0.2 - 0.18 z^-1)/(1 - z^-1)" --fs 100Hz   a digital PI
  loopshift show --pid kc=2 ti=30s --json                 the same data as JSON

--pid keys (KEY=VALUE words; values take units, bare numbers use the unit named):
"""


def add_parser(subparsers) -> argparse.ArgumentParser:
    from convert.cli.common import add_controller_input
    from convert.pid import describe_keys

    parser = subparsers.add_parser(
        "show",
        help="print a controller in all its forms (transfer function, poles/zeros, PID forms)",
        description=DESCRIPTION,
        epilog=EPILOG_HEAD + describe_keys() + "\n\nforms: ideal  Kc(1 + 1/(Ti s) + Td s/((Td/N) s + 1));"
        "  series  Kc(1 + 1/(Ti s))(1 + Td s)/((Td/N) s + 1);"
        "\n       parallel  kp + ki/s + kd s/(tf s + 1).  Details: docs/pid.md",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    add_controller_input(parser, allow_z=True)
    parser.add_argument(
        "--fs",
        metavar="HZ",
        help="sample rate for an expression in z or z^-1, e.g. --fs 1kHz (an s expression ignores it)",
    )
    parser.add_argument(
        "--json",
        action="store_true",
        help="print the same information as JSON (numbers as numbers, coefficients as lists), e.g. --json",
    )
    parser.add_argument(
        "--digits",
        type=int,
        default=6,
        metavar="N",
        help="significant digits in the tables (default 6), e.g. --digits 4; JSON always has full precision",
    )
    return parser


def summary(controller, settings=None, not_pid_reason=None) -> dict:
    """Everything ``show`` prints, as plain data (the JSON shape; see docs/controller.md)."""
    from convert.errors import LoopshiftError

    digital = controller.is_digital
    data: dict = {
        "name": controller.name,
        "domain": controller.domain,
        "variable": controller.variable,
        "expression": controller.expression(digits=12),
        "num": list(controller.num),
        "den": list(controller.den),
    }
    if digital:
        data["fs_hz"] = controller.fs_hz
        data["sample_period_s"] = controller.sample_period_s
        try:
            data["b"], data["a"] = list(controller.b), list(controller.a)
        except LoopshiftError:
            data["b"], data["a"] = None, None
        # the coefficients as given are the expanded polynomial: direct form I is what they describe
        data["structure"] = "direct1"
    integrators = controller.integrator_count()
    data.update(
        gain=controller.gain,
        zeros=controller.zeros(),
        poles=controller.poles(),
        zero_roots=[r.as_dict() for r in controller.zero_roots()],
        pole_roots=[r.as_dict() for r in controller.pole_roots()],
        dc_gain=controller.dc_gain(),
        integrating=integrators > 0,
        integrators=integrators,
        proper=controller.is_proper,
        strictly_proper=controller.is_strictly_proper,
        relative_degree=controller.relative_degree,
        corner_frequencies_hz=controller.corner_frequencies_hz(),
    )
    if not digital:
        data["high_frequency_gain"] = controller.high_frequency_gain()
    data["pid"] = settings.table() if settings is not None else None
    data["not_pid"] = not_pid_reason if settings is None else None
    data["setpoint_path"] = None
    if settings is not None and (settings.b != 1 or settings.c != 1):
        try:
            sp = settings.setpoint_controller()
            data["setpoint_path"] = {"expression": sp.expression(digits=12), "num": list(sp.num), "den": list(sp.den)}
        except LoopshiftError as exc:
            data["setpoint_path"] = {"unavailable": exc.message}
    return data


def run(args, console) -> int:
    from convert.cli.common import controller_from_args, emit_json
    from convert.errors import InputError
    from convert.pid import pid_from_controller, why_not_pid
    from convert.values import parse_value

    fs_hz = None
    if args.fs is not None:
        fs_hz = parse_value(args.fs, "hz", field="--fs")
        if fs_hz <= 0:
            raise InputError(f"the sample rate must be positive, found {args.fs!r}", key="--fs")
    if args.digits < 1 or args.digits > 17:
        raise InputError(f"expected 1 to 17 significant digits, found {args.digits}", key="--digits")
    controller, settings = controller_from_args(args, fs_hz=fs_hz)
    reason = None
    if settings is None:
        settings = pid_from_controller(controller)
        reason = why_not_pid(controller) if settings is None else None
    data = summary(controller, settings, reason)
    data["source"] = {"pid": list(args.pid)} if args.pid else {"expression": args.expression}
    if args.json:
        emit_json(console, data)
        return 0
    _render(console, data, args.digits)
    return 0


# ------------------------------------------------------------------------------ rendering
def _n(x, digits: int) -> str:
    if x is None:
        return "—"
    return f"{x + 0.0:.{digits}g}"  # + 0.0: a negative zero prints as 0, not -0


def _root(r: complex, digits: int) -> str:
    re_, im = float(r.real), float(r.imag)
    if abs(im) <= 1e-12 * max(1.0, abs(r)):
        return _n(re_ + 0.0, digits)
    return f"{re_ + 0.0:.{digits}g} {'+' if im > 0 else '−'} {abs(im):.{digits}g}j"


def _coefs(values, digits: int) -> str:
    return "[" + ", ".join(_n(v, digits) for v in values) + "]"


def _render(console, data: dict, d: int) -> None:
    from rich import box
    from rich.table import Table

    digital = data["domain"] == "digital"
    var = data["variable"]
    source = data["source"]
    title = " ".join(source["pid"]) if "pid" in source else source["expression"]

    tf = Table(title=f"Controller: {title}", box=box.SIMPLE_HEAD, show_header=False, title_justify="left")
    tf.add_column("item", style="bold")
    tf.add_column("value", overflow="fold")
    if digital:
        tf.add_row("domain", f"digital, fs = {_n(data['fs_hz'], d)} Hz (T = {_n(data['sample_period_s'], d)} s)")
    else:
        tf.add_row("domain", "analog (continuous, in s)")
    tf.add_row("C(" + var + ")", _expression(data, d))
    tf.add_row(f"num (descending {var})", _coefs(data["num"], d))
    tf.add_row(f"den (descending {var})", _coefs(data["den"], d))
    if digital:
        if data["b"] is None:
            tf.add_row("b, a (z^-1)", "— (improper: not causal)")
        else:
            tf.add_row("b (ascending z^-1)", _coefs(data["b"], d))
            tf.add_row("a (ascending z^-1)", _coefs(data["a"], d))
            tf.add_row(
                "structure",
                "direct1: direct form I on b/a as given (loopshift code --structure sections|delta realizes another)",
            )
    console.print(tf)

    zp = Table(title="Zeros, poles and gain", box=box.SIMPLE_HEAD, title_justify="left")
    zp.add_column("", style="bold")
    zp.add_column(f"{var}-plane")
    zp.add_column("times", justify="right")
    zp.add_column("accuracy (±)", justify="right")
    zp.add_column("corner (Hz)" if not digital else "equivalent corner (Hz)", justify="right")
    for label in ("zeros", "poles"):
        roots = data[label[:-1] + "_roots"]
        if not roots:
            zp.add_row(label, "none", "", "", "")
        for i, root in enumerate(roots):
            r = complex(root["re"], root["im"])
            exact = root["accuracy"] == 0
            zp.add_row(
                label if i == 0 else "",
                _root(r, d),
                str(root["multiplicity"]),
                "exact" if exact else f"{root['accuracy']:.1g}",
                _corner(r, exact, data, d, label),
            )
    console.print(zp)

    g = Table(box=box.SIMPLE_HEAD, show_header=False)
    g.add_column("item", style="bold")
    g.add_column("value")
    g.add_row("gain k (zpk)", _n(data["gain"], d))
    if data["integrating"]:
        count = data["integrators"]
        g.add_row("DC gain", f"integrating ({count} integrator{'s' if count > 1 else ''})")
    else:
        g.add_row("DC gain", _n(data["dc_gain"], d))
    if not digital:
        hf = data["high_frequency_gain"]
        g.add_row("high-frequency gain", "unbounded (improper)" if hf is None else _n(hf, d))
    rd = data["relative_degree"]
    if rd > 0:
        prop = f"strictly proper (relative degree {rd})"
    elif rd == 0:
        prop = "proper (relative degree 0: passes high frequencies)"
    else:
        prop = f"improper (relative degree {rd}): needs a filter before it can be built or sampled"
    g.add_row("properness", prop)
    corners = data["corner_frequencies_hz"]
    g.add_row("corner frequencies (Hz)", f"zeros {_list(corners['zeros'], d)}; poles {_list(corners['poles'], d)}")
    console.print(g)

    pid = data["pid"]
    if pid is None:
        console.print(f"PID forms: not a PID — {data['not_pid']}", markup=False, highlight=False)
        return
    _render_pid(console, pid, data, d)


def _expression(data: dict, d: int) -> str:
    from convert.expr import format_polynomial

    num = format_polynomial(data["num"], data["variable"], d)
    den = format_polynomial(data["den"], data["variable"], d)
    return num if den == "1" else f"({num}) / ({den})"


def _corner(r: complex, exact: bool, data: dict, d: int, label: str) -> str:
    """The corner column: a root exactly at s = 0 / z = 1 / z = 0 is named (``exact``: counted
    there by Controller's relative rule), any other root gets its corner frequency."""
    import cmath
    import math

    if data["domain"] == "digital":
        if exact and r == 0:
            return "z = 0 (pure delay)"
        if exact and r == 1:
            return "integrator" if label == "poles" else "at z = 1 (differencer)"
        return _n(abs(cmath.log(r)) / (2 * math.pi * data["sample_period_s"]), d)
    if exact and r == 0:
        return "integrator" if label == "poles" else "at s = 0 (differentiator)"
    return _n(abs(r) / (2 * math.pi), d)


def _list(values, d: int) -> str:
    return "none" if not values else ", ".join(_n(v, d) for v in values)


def _render_pid(console, pid: dict, data: dict, d: int) -> None:
    from rich import box
    from rich.table import Table

    t = Table(title=f"PID forms ({pid['kind']}, {pid['action']} action)", box=box.SIMPLE_HEAD, title_justify="left")
    t.add_column("", style="bold", no_wrap=True)
    t.add_column("parallel")
    t.add_column("ideal (standard)")
    t.add_column("series (interacting)")
    par = pid["parallel"]
    forms = [pid["ideal"], pid["series"]]

    def cells(fn):
        return [("—" if "unavailable" in f else fn(f)) for f in forms]

    def secs(x):
        return "none" if not x else f"{_n(x, d)} s"

    t.add_row("gain", f"kp = {_n(par['kp'], d)}", *cells(lambda f: f"Kc = {_n(f['kc'], d)}"))
    t.add_row("proportional band", "", *cells(lambda f: f"{_n(f['pb_percent'], d)} %"))
    t.add_row(
        "integral",
        f"ki = {_n(par['ki_per_s'], d)} /s",
        *cells(lambda f: "none" if f["ti_s"] is None else f"Ti = {_n(f['ti_s'], d)} s"),
    )
    t.add_row("  min/repeat", "", *cells(lambda f: "" if f["ti_s"] is None else f"{_n(f['ti_min'], d)} min"))
    t.add_row("  reset rate", "", *cells(lambda f: "" if f["ti_s"] is None else f"{_n(f['reset_per_min'], d)} /min"))
    t.add_row(
        "derivative",
        f"kd = {_n(par['kd_s'], d)} s",
        *cells(lambda f: "none" if not f["td_s"] else f"Td = {_n(f['td_s'], d)} s"),
    )
    t.add_row("  in minutes", "", *cells(lambda f: "" if not f["td_s"] else f"{_n(f['td_min'], d)} min"))
    t.add_row(
        "derivative filter",
        f"tf = {secs(par['tf_s'])}" if par["tf_s"] else "none",
        *cells(lambda f: "none" if f["n"] is None else f"N = {_n(f['n'], d)}"),
    )
    if par["tf_s"]:
        t.add_row("  time constant", "", *cells(lambda f: "" if f["n"] is None else f"Tf = {secs(f['tf_s'])}"))
    console.print(t)
    for line in (
        "parallel: kp + ki/s + kd·s/(tf·s+1)",
        "ideal:    Kc·(1 + 1/(Ti·s) + Td·s/((Td/N)·s+1))",
        "series:   Kc·(1 + 1/(Ti·s))·(1 + Td·s)/((Td/N)·s+1)",
    ):
        console.print(line, highlight=False, markup=False)
    for label, form in (("ideal", pid["ideal"]), ("series", pid["series"])):
        if "unavailable" in form:
            console.print(f"{label}: {form['unavailable']}", highlight=False, markup=False)
    if pid["b"] is None:  # a two-input card whose setpoint path is not a weighted form of this PID
        weights = "setpoint weights: none describe this setpoint path (see Setpoint and measurement)"
    else:
        weights = f"setpoint weights: b = {_n(pid['b'], d)} (P), c = {_n(pid['c'], d)} (D)"
    if pid["derivative_on"] == "measurement" and pid["b"] is not None:
        weights += " — derivative on measurement"
    console.print(weights, highlight=False, markup=False)
    sp = data.get("setpoint_path")
    if sp:
        text = sp.get("expression") or sp.get("unavailable")
        console.print(f"setpoint → output: {text}", highlight=False, markup=False)
    sign = "+1" if pid["action"] == "reverse" else "−1 (direct action: the transfer function is negated)"
    console.print(f"action sign in C(s): {sign}", highlight=False, markup=False)
