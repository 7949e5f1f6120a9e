"""Pieces every sub-command shares: the controller input (EXPR or --pid), JSON output, tables.

Nothing heavy is imported at module level: numpy and rich load when a command runs.
"""

from __future__ import annotations

import argparse
import json

PID_HELP = (
    "PID settings as KEY=VALUE words, e.g. --pid kc=2 ti=30s td=5s n=10 "
    "(see `loopshift show --help` for every key)"
)


def add_controller_input(parser: argparse.ArgumentParser, *, allow_z: bool = False) -> None:
    """Add the positional EXPR and the --pid option; exactly one of them must be given."""
    var = "s or z (digital, needs --fs)" if allow_z else "s"
    parser.add_argument(
        "expression",
        nargs="?",
        metavar="EXPR",
        help=f'transfer function in {var}, e.g. "2*(1 + 1/(30*s))" or "(0.5s+1)/(0.05s+1)"',
    )
    parser.add_argument("--pid", nargs="+", metavar="KEY=VALUE", help=PID_HELP)


def controller_from_args(args, *, fs_hz: float | None = None):
    """The source controller from ``args.expression`` or ``args.pid``.

    Returns ``(controller, pid_settings_or_None)``.
    """
    from convert.controller import from_expression
    from convert.errors import InputError

    expression = getattr(args, "expression", None)
    pid_words = getattr(args, "pid", None)
    if expression and pid_words:
        raise InputError("give either an expression or --pid, not both", where="command line")
    if not expression and not pid_words:
        raise InputError("give a controller: an expression such as \"2*(1+1/(30*s))\" or --pid kc=2 ti=30s",
                         where="command line")
    if expression:
        return from_expression(expression, fs_hz=fs_hz, label="expression"), None
    from convert.pid import pid_from_words

    settings = pid_from_words(pid_words, where="--pid")
    return settings.to_controller(), settings


def emit_json(console, data) -> None:
    """Write ``data`` as indented JSON to the console's stream (no colour, no wrapping)."""
    from convert.jsonable import to_jsonable

    text = json.dumps(to_jsonable(data), indent=2)
    console.file.write(text + "\n")
