"""Entry point: ``main(argv=None, console=None) -> int``.

Only argparse is imported at start-up, so ``loopshift --help`` is fast; each sub-command
module imports what it needs when it runs. Exit codes: 0 done / pass, 1 verdict fail,
2 bad input or usage. Errors are one line on standard error, never a traceback (set
``LOOPSHIFT_DEBUG=1`` to see the traceback of an internal error).
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys

# Sub-command modules, in the order `loopshift --help` lists them.
COMMANDS = ("show", "digital", "analog", "circuit", "card", "report")

DESCRIPTION = """\
Move a feedback controller between its analog, digital (firmware) and op-amp circuit
forms, and show that the new form does what the old one did.

The tool computes; it does not certify. Verify on a bench or in simulation before a live
swap, plan a bumpless transfer, keep safety interlocks independent of this controller,
and follow your site's change procedure, local codes and licensed practice."""

EPILOG = """\
examples:
  loopshift show "2*(1 + 1/(30*s))"
  loopshift show --pid kc=2 ti=30s td=5s n=10
  loopshift digital "(s+2)/(s+20)" --fs 1kHz --method tustin --method zoh
  loopshift report cases/pi_card_to_firmware.toml

run `loopshift COMMAND --help` for the options of each command."""


class _Parser(argparse.ArgumentParser):
    """argparse that raises instead of exiting, so usage errors become our one-line errors."""

    def error(self, message):  # noqa: D401 - argparse API
        raise _UsageError(f"{self.prog}: {message}")


class _UsageError(Exception):
    pass


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="loopshift",
        description=DESCRIPTION,
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"loopshift {_version()}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name in COMMANDS:
        module = importlib.import_module(f"convert.cli.{name}")
        module.add_parser(subparsers)
    return parser


def _version() -> str:
    from convert import __version__

    return __version__


def _make_console():
    from rich.console import Console

    return Console(highlight=False)


def main(argv: list[str] | None = None, console=None) -> int:
    """Run the command line with ``argv`` (default: ``sys.argv[1:]``); return the exit code.

    ``console`` is a ``rich.console.Console`` to print to (tests pass one that records).
    """
    from convert.errors import LoopshiftError

    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except _UsageError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    except SystemExit as exc:  # --help / --version
        return int(exc.code or 0)
    if not args.command:
        parser.print_help()
        return 2
    module = importlib.import_module(f"convert.cli.{args.command}")
    err_console = None
    try:
        if console is None:
            console = _make_console()
        return int(module.run(args, console))
    except LoopshiftError as exc:
        _print_error(exc.one_line(), console, err_console)
        return 2
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # an internal error: one line, not a traceback
        if os.environ.get("LOOPSHIFT_DEBUG"):
            raise
        text = f"internal error ({type(exc).__name__}): {exc}. Please report it; rerun with LOOPSHIFT_DEBUG=1 for details"
        _print_error(" ".join(text.split()), console, err_console)
        return 3


def _print_error(line: str, console, err_console) -> None:
    stream = sys.stderr
    if console is not None and getattr(console, "stderr", False) is False and getattr(console, "record", False):
        # A recording console in tests: keep the error visible there too.
        console.print(f"error: {line}", markup=False, highlight=False, soft_wrap=True)
    print(f"error: {line}", file=stream)


def entry_point() -> None:
    """Console-script entry: ``loopshift``."""
    sys.exit(main())
