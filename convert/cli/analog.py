"""``loopshift analog``: a digital controller (an expression in z or z^-1) mapped back to the
analog controller it corresponds to under a named method. Only argparse at module level."""

from __future__ import annotations

import argparse

from convert.methods import INVERSE_METHODS as INVERSE_NAMES

DESCRIPTION = """\
Map a digital controller back to an analog one: the continuous transfer function whose
discretization by --method is the given digital controller. Methods: tustin (with the same
--prewarp used going forward), zoh (poles by z = e^(sT) inverted exactly, numerator fitted on the unit circle),
matched, backward-euler.

Some digital controllers have no real continuous equivalent: a pole on the negative real
axis (zoh, matched), a pole at z = 0 or a pure delay (b0 = 0 with more than the method allows),
a pole at z = -1 (tustin). Those are refused with the pole named and what you can do.

The result is checked by discretizing it again with the same method; the largest relative
coefficient difference is printed."""

EPILOG = """\
examples:
  loopshift analog "(0.2 - 0.18 z^-1)/(1 - z^-1)" --fs 100Hz --method tustin
  loopshift analog "0.0952/(z - 0.9048)" --fs 1kHz --method zoh
  loopshift analog "(1.1 - 0.9z^-1)/(1 - 0.8z^-1)" --fs 500Hz --method tustin --prewarp 20Hz --json

In values, M is mega and m is milli (1MHz, 250ms). Details: docs/digital.md"""


def add_parser(subparsers) -> argparse.ArgumentParser:
    parser = subparsers.add_parser(
        "analog",
        help="digital controller (in z) -> the analog controller it corresponds to under a method",
        description=DESCRIPTION,
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument(
        "expression",
        metavar="EXPR_IN_Z",
        help='digital transfer function in z or z^-1, e.g. "(0.2 - 0.18 z^-1)/(1 - z^-1)"',
    )
    parser.add_argument(
        "--fs", metavar="HZ", required=True, help="sample rate of the digital controller, e.g. --fs 1kHz"
    )
    parser.add_argument(
        "--method",
        metavar="M",
        required=True,
        help="the method the digital controller was made with: " + ", ".join(INVERSE_NAMES) + ", e.g. --method tustin",
    )
    parser.add_argument(
        "--prewarp", metavar="HZ", help="tustin only: the prewarp frequency used going forward, e.g. --prewarp 20Hz"
    )
    parser.add_argument(
        "--match-at",
        metavar="HZ",
        help="matched only: the gain-match frequency used going forward, e.g. --match-at 1Hz",
    )
    parser.add_argument(
        "--json",
        action="store_true",
        help="print a JSON list with one result: method, fs_hz, num, den (descending powers of s), e.g. --json",
    )
    return parser


def run(args, console) -> int:
    import numpy as np

    from convert.cli.common import at, emit_json
    from convert.cli.digital import _positive, below_nyquist
    from convert.controller import from_expression
    from convert.digital import discretize, read_analog
    from convert.digital.printed import expression_den_radius
    from convert.errors import InputError
    from convert.jsonable import roots_json
    from convert.values import format_value

    fs = _positive(args.fs, "hz", "--fs")
    if args.method not in INVERSE_NAMES:
        raise InputError(
            f"no inverse for method {args.method!r}; expected one of {', '.join(INVERSE_NAMES)}", key="--method"
        )
    prewarp = _positive(args.prewarp, "hz", "--prewarp") if args.prewarp is not None else None
    match_at = _positive(args.match_at, "hz", "--match-at") if args.match_at is not None else None
    if prewarp is not None and args.method != "tustin":
        raise InputError("applies to --method tustin only", key="--prewarp")
    if match_at is not None and args.method != "matched":
        raise InputError("applies to --method matched only", key="--match-at")
    if prewarp is not None:
        below_nyquist(prewarp, args.prewarp, fs, "--prewarp")
    if match_at is not None:
        below_nyquist(match_at, args.match_at, fs, "--match-at")
    with at(None):
        digital = from_expression(args.expression, fs_hz=fs, label="EXPR_IN_Z")
    if not digital.is_digital:
        raise InputError(
            "the expression is analog (in s); `loopshift analog` takes an expression in z", key="EXPR_IN_Z"
        )
    with at(None, rename={"prewarp": "--prewarp", "match_at_hz": "--match-at", "method": "--method"}):
        reading = read_analog(
            digital, args.method, prewarp, match_at_hz=match_at, den_radius=expression_den_radius(args.expression, fs)
        )
        analog = reading.controller
        again = (
            discretize(analog, fs, args.method, prewarp_hz=prewarp, match_at_hz=match_at).controller
            if analog.is_proper
            else None
        )
    b0, a0 = np.array(digital.b), np.array(digital.a)
    if again is None:  # an unfiltered derivative: check the substitution on the unit circle instead
        z = np.exp(1j * np.linspace(0.01, 0.99, 50) * np.pi)
        want = digital.frequency_response(np.angle(z) * fs / (2 * np.pi))
        got = np.polyval(analog.num, (z - 1) / (z / fs)) / np.polyval(analog.den, (z - 1) / (z / fs))
        check = float(np.max(np.abs(got - want) / np.abs(want)))
    elif np.array(again.b).size == b0.size and np.array(again.a).size == a0.size:
        b1, a1 = np.array(again.b), np.array(again.a)
        scale = max(np.max(np.abs(b0)), np.max(np.abs(a0)))
        check = float(max(np.max(np.abs(b1 - b0)), np.max(np.abs(a1 - a0))) / scale)
    else:
        check = None
    result = {
        "method": args.method,
        "fs_hz": fs,
        "num": list(analog.num),
        "den": list(analog.den),
        "expression": analog.expression(),
        "zeros_s": roots_json(analog.zeros()),
        "poles_s": roots_json(analog.poles()),
        "gain": analog.gain,
        "round_trip_max_relative_difference": check,
    }
    result["notes"] = list(reading.notes)
    if prewarp is not None:
        result["prewarp_hz"] = prewarp
    if match_at is not None:
        result["match_at_hz"] = match_at
    if args.json:
        emit_json(console, [result])
        return 0
    console.print(f"digital controller at {format_value(fs, 'hz', 6)}: {digital.expression(12)}", markup=False)
    console.print(
        f"analog equivalent under {args.method}"
        + (f" (prewarp {format_value(prewarp, 'hz', 4)})" if prewarp else "")
        + ":",
        markup=False,
    )
    console.print(f"  C(s) = {analog.expression(8)}", markup=False)
    console.print(f"  num (descending powers of s): {[float(format(x, '.10g')) for x in analog.num]}", markup=False)
    console.print(f"  den (descending powers of s): {[float(format(x, '.10g')) for x in analog.den]}", markup=False)
    corners = analog.corner_frequencies_hz()
    for kind in ("zeros", "poles"):
        if corners.get(kind):
            console.print(
                f"  {kind[:-1]} corners: " + ", ".join(format_value(f, "hz", 4) for f in corners[kind]), markup=False
            )
    if analog.integrator_count():
        console.print(f"  integrators: {analog.integrator_count()}", markup=False)
    for note in reading.notes:
        console.print(f"note: {note}", markup=False)
    if check is not None and again is None:
        console.print(
            f"check: substituting s = (z - 1)/(zT) into it reproduces the digital response to {check:.2g} "
            "(largest relative difference on the unit circle)",
            markup=False,
        )
    elif check is not None:
        console.print(
            f"check: discretizing it again by {args.method} reproduces the coefficients to {check:.2g} "
            "(largest difference relative to the largest coefficient)",
            markup=False,
        )
    return 0
