"""Entry point: ``main(argv=None, console=None) -> int``.

Only argparse is imported at start-up, so ``loopshift --help`` is fast; each sub-command
module imports what it needs when it runs. Exit codes: 0 done / pass, 1 verdict fail,
2 bad input or usage, 3 internal error. Errors are one line on standard error, never a traceback
(``--debug``, or ``LOOPSHIFT_DEBUG=1``, adds the traceback of an internal error for a bug report).
"""

from __future__ import annotations

import argparse
import importlib
import os
import re
import sys

# Sub-command modules, in the order `loopshift --help` lists them.
COMMANDS = ("show", "digital", "analog", "circuit", "card", "report", "batch", "compare", "code")

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


# A word that starts with "-" but is a value, not an option: a negative number with or without a
# unit ("-1kHz", "-.5"), or an expression ("-2*(1+1/s)", "-(s+1)", "-s/(s+1)", "- 2/s").
# argparse's own test only knows bare numbers, so "--fs -1kHz" or a negated expression used to
# read as an unknown option; now they reach the value checks and get a clear message.
_VALUE_STARTING_WITH_MINUS = re.compile(r"^-(?:[\d.(\s]|[sz](?![A-Za-z-]))")


class _Parser(argparse.ArgumentParser):
    """argparse that raises instead of exiting, so usage errors become our one-line errors."""

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self._negative_number_matcher = _VALUE_STARTING_WITH_MINUS

    def error(self, message):  # noqa: D401 - argparse API
        raise _UsageError(f"{self.prog}: {message}")


class _UsageError(Exception):
    pass


DEBUG_HELP = (
    "on an internal error (exit 3), print the traceback for a bug report; input errors stay one "
    "line, e.g. loopshift --debug report case.toml"
)


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="loopshift",
        description=DESCRIPTION,
        epilog=EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument(
        "--version",
        action="version",
        version=f"loopshift {_version()}",
        help="print the version and exit, e.g. loopshift --version",
    )
    subparsers = parser.add_subparsers(
        dest="command",
        metavar="COMMAND",
        parser_class=_Parser,
        help="one of the commands below; `loopshift COMMAND --help` for its options",
    )
    parser.add_argument("--debug", action="store_true", help=DEBUG_HELP)
    for name in COMMANDS:
        module = importlib.import_module(f"convert.cli.{name}")
        module.add_parser(subparsers)
        # also after the command (loopshift report case.toml --debug); SUPPRESS keeps the global one
        subparsers.choices[name].add_argument(
            "--debug", action="store_true", default=argparse.SUPPRESS, help=DEBUG_HELP
        )
    return parser


def _unknown_arguments(parser, args, extras: list[str]) -> str:
    """One line for words argparse could not place, naming the command and a near option."""
    import difflib

    sub = parser
    if getattr(args, "command", None):
        for action in parser._actions:
            if isinstance(action, argparse._SubParsersAction):
                sub = action.choices[args.command]
    from convert.limits import excerpt

    options = [s for a in sub._actions for s in a.option_strings]
    word = extras[0]
    if word.startswith("-"):
        name = word.split("=", 1)[0]
        close = difflib.get_close_matches(name, options, n=1, cutoff=0.6) if len(name) < 100 else []
        hint = f" (did you mean {close[0]}?)" if close else f"; `{sub.prog} --help` lists the options"
        shown = name if len(name) <= 60 else excerpt(name)
        return f"{sub.prog}: unknown option {shown}{hint}"
    return (
        f"{sub.prog}: unexpected word {excerpt(word)}; an expression with spaces or parentheses needs quotes, "
        f'e.g. "(s+2)/(s+20)"'
    )


def _version() -> str:
    from convert import __version__

    return __version__


def _make_console():
    from rich.console import Console

    class _Console(Console):
        def on_broken_pipe(self) -> None:  # rich would exit with 1; a closed pipe (| head) is no failure
            raise BrokenPipeError

    # markup off: text from files (a netlist title "[/old]", a case title "[rev 2]") is printed as
    # written; the program's own styling goes through convert.cli.common.styled
    return _Console(highlight=False, markup=False)


def _quiet_stdout() -> None:
    """The reader closed the pipe (``loopshift ... | head -1``): send what is left to /dev/null
    so nothing more fails on the way out."""
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError):  # pragma: no cover - stdout without a file descriptor
        pass


def main(argv: list[str] | None = None, console=None) -> int:
    """Run the command line with ``argv`` (default: ``sys.argv[1:]``); return the exit code.

    ``console`` is a ``rich.console.Console`` to print to (tests pass one that records).
    """
    from convert.errors import LoopshiftError

    parser = build_parser()
    try:
        args, extras = parser.parse_known_args(argv)
        if extras:
            raise _UsageError(_unknown_arguments(parser, args, extras))
    except _UsageError as exc:
        text = " ".join(str(exc).split())
        if len(text) > 400:  # argparse quotes the words it could not use
            text = text[:200] + f" …[{len(text) - 380:,} characters left out]… " + text[-180:]
        print(f"error: {text}", file=sys.stderr)
        return 2
    except SystemExit as exc:  # --help / --version
        return int(exc.code or 0)
    if not args.command:
        print(
            "error: loopshift: give a command: " + ", ".join(COMMANDS) + " (`loopshift --help` describes each)",
            file=sys.stderr,
        )
        return 2
    module = importlib.import_module(f"convert.cli.{args.command}")
    debug = bool(getattr(args, "debug", False) or os.environ.get("LOOPSHIFT_DEBUG"))
    err_console = None
    try:
        if console is None:
            console = _make_console()
        code = int(module.run(args, console))
        sys.stdout.flush()  # a closed pipe shows here, inside the handlers below, not at exit
        return code
    except LoopshiftError as exc:
        _print_error(exc.one_line(), console, err_console)
        return 2
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError as exc:  # the reader stopped early (| head): quiet, and a verdict's code is kept
        _quiet_stdout()
        return int(getattr(exc, "exit_code", 0))
    except OSError as exc:  # a file or folder the system refused (permission, disk full, ...)
        name = exc.filename if exc.filename is not None else "file"
        _print_error(f"{name}: {exc.strerror or exc}", console, err_console)
        return 2
    except RecursionError:  # a last guard: the readers bound nesting (convert.limits.MAX_NESTING) before this
        _traceback(debug)
        _print_error(
            "the input is nested too deeply to read (Python's recursion limit); write it flatter", console, err_console
        )
        return 2
    except MemoryError:
        _print_error(
            "not enough memory for this run; ask for less (fewer --draws, a narrower --band)", console, err_console
        )
        return 2
    except Exception as exc:  # an internal error: one line, not a traceback (unless --debug)
        _traceback(debug)
        text = f"internal error ({type(exc).__name__}): {exc}"
        text = " ".join(text.split())
        if len(text) > 300:
            text = text[:300] + "…"
        advice = "the traceback is above" if debug else "rerun with --debug for the traceback"
        _print_error(f"{text}. Please report it; {advice}", console, err_console)
        return 3


def _traceback(debug: bool) -> None:
    """The traceback of the exception being handled, on standard error, when asked for."""
    if debug:
        import traceback

        traceback.print_exc(file=sys.stderr)


def _print_error(line: str, console, err_console) -> None:
    stream = sys.stderr
    if console is not None and getattr(console, "stderr", False) is False and getattr(console, "record", False):
        # A recording console in tests: keep the error visible there too.
        console.print(f"error: {line}", markup=False, highlight=False, soft_wrap=True)
    print(f"error: {line}", file=stream)


def _one_line_warning(message, category, filename, lineno, line=None) -> str:
    where = os.path.basename(filename)
    return f"warning: {' '.join(str(message).split())} ({category.__name__} in {where}:{lineno})\n"


def entry_point() -> None:
    """Console-script entry: ``loopshift``. Library warnings print as one line each."""
    import warnings

    warnings.formatwarning = _one_line_warning
    sys.exit(main())
