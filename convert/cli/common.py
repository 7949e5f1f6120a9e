"""Pieces every sub-command shares: the controller input (EXPR or --pid), JSON output, tables.

Nothing heavy is imported at module level: numpy and rich load when a command runs.
"""

from __future__ import annotations

import argparse
import json

PID_HELP = (
    "PID settings as KEY=VALUE words, e.g. --pid kc=2 ti=30s td=5s n=10 (see `loopshift show --help` for every key)"
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
        raise InputError(
            'give a controller: an expression such as "2*(1+1/(30*s))" or --pid kc=2 ti=30s', where="command line"
        )
    if expression:
        with at(None):
            return from_expression(expression, fs_hz=fs_hz, label="expression"), None
    from convert.pid import pid_from_words

    settings = pid_from_words(pid_words, where="--pid")
    return settings.to_controller(), settings


def styled(markup: str):
    """A rich ``Text`` from console markup the program wrote (``"[red]FAIL[/red]"``), with any
    file text inside already passed through ``rich.markup.escape``.

    The console prints with markup off (``convert.cli.main``): a netlist title such as
    ``[/old]`` or ``[rev 2]`` is shown as written, never read as markup. Styling is asked for
    explicitly through this function."""
    from rich.text import Text

    return Text.from_markup(markup)


def emit_json(console, data) -> None:
    """Write ``data`` as indented JSON to the console's stream (no colour, no wrapping)."""
    from convert.jsonable import to_jsonable

    text = json.dumps(to_jsonable(data), indent=2)
    console.file.write(text + "\n")


def positive_value(text, kind: str, field: str) -> float:
    """A value that must be above zero (a sample rate, a frequency, a ratio), read with units."""
    from convert.errors import InputError
    from convert.values import parse_value

    value = parse_value(text, kind, field=field)
    if not value > 0:
        raise InputError(f"expected a positive value, found {text!r}", key=field)
    return value


def band_from_args(words) -> tuple[float, float] | None:
    """``--band LOW HIGH`` as (low, high) in Hz, or None when not given; low < high."""
    from convert.errors import InputError

    if not words:
        return None
    band = (positive_value(words[0], "hz", "--band"), positive_value(words[1], "hz", "--band"))
    if not band[0] < band[1]:
        raise InputError(f"the band's low end must be below its high end, found {words[0]} .. {words[1]}", key="--band")
    from convert.compare.frequency import band_width_problem

    problem = band_width_problem(*band)
    if problem:
        raise InputError(problem, key="--band")
    return band


def count(value: int, field: str, *, low: int, high: int) -> int:
    """A whole number from argparse (``type=int``) checked against ``low .. high``."""
    from convert.errors import InputError

    if not low <= value <= high:
        raise InputError(f"expected a whole number from {low:,} to {high:,}, found {value:,}", key=field)
    return value


#: The options that set the neutral settings library messages name (``LoopshiftError.settings``):
#: every command that has the setting spells it this way.
SETTING_OPTIONS = {
    "sample rate fs": "--fs",
    "conversion method": "--method",
    "computation delay": "--delay",
    "derivative filter N": "--derivative-filter",
    "decimal mark setting": "--decimal",
}


class at:  # noqa: N801 - used as a context manager: ``with at("--part"): ...``
    """Give errors raised inside the block a location when they have none, e.g. ``--tolerance``.

    Library functions name the field (``R1``) but not the option it came from; the command line
    knows the option, so errors read ``--part: R1: ...`` instead of a bare ``R1: ...``. ``rename``
    maps a library key to the option that sets it (``{"prewarp": "--prewarp"}``); the neutral
    settings a message names (:data:`SETTING_OPTIONS`) are followed by their option.
    """

    def __init__(self, where: str | None, rename: dict[str, str] | None = None):
        self.where = where
        self.rename = {**SETTING_OPTIONS, **(rename or {})}

    def __enter__(self):
        return self

    def __exit__(self, kind, exc, _tb):
        from convert.errors import LoopshiftError

        if isinstance(exc, LoopshiftError):
            exc.name_settings(self.rename)
            if exc.key in self.rename:
                exc.key = self.rename[exc.key]
            elif exc.where is None and self.where and exc.key != self.where:
                exc.where = self.where
            exc.args = (exc.one_line(),)
        return False


class OutputFile:
    """One file a command will write: the ``option`` that names it, the path as ``given``, the
    ``path`` written (a symbolic link resolved to its target) and a ``note`` stating the link."""

    def __init__(self, option: str, given: str, path: str, note: str | None):
        self.option, self.given, self.path, self.note = option, given, path, note


def check_output_files(named: dict[str, str | None], *, force: bool) -> list[OutputFile]:
    """Check files a command will write before any long work starts.

    ``named`` maps the option (``--netlist``) to the path given (or None). Refuses a folder,
    a folder that does not exist, a folder that cannot be written, the same file for two
    outputs, anything but a regular file (a device such as /dev/null, a FIFO, a socket; even
    with ``force``), and an existing file unless ``force``. A symbolic link is resolved: the
    target is written and the link kept, and :attr:`OutputFile.note` says so.
    """
    import os

    from convert.errors import InputError
    from convert.limits import file_kind

    seen: dict[str, str] = {}
    out = []
    for option, path in named.items():
        if not path:
            continue
        if path.endswith(("/", os.sep)) or os.path.isdir(path):
            raise InputError(
                f"{path!r} is a folder; give a file name such as {os.path.join(path, 'out' + _ext(option))}", key=option
            )
        real = os.path.realpath(path)
        note = f"{option} {path!r} is a link; writing to {real!r}" if os.path.islink(path) else None
        if real in seen:
            raise InputError(f"{path!r} is also the file for {seen[real]}; give each output its own file", key=option)
        seen[real] = option
        kind = file_kind(real)
        if kind is not None:
            raise InputError(
                f"{path!r} is {kind}; outputs are written only as regular files (new or, with --force, "
                "replaced): give a file name",
                key=option,
            )
        folder = os.path.dirname(real)
        shown = os.path.dirname(path) or "."
        if not os.path.isdir(folder):
            raise InputError(
                f"the folder {shown!r} does not exist; create it first or choose another place", key=option
            )
        if not os.access(folder, os.W_OK):
            raise InputError(f"cannot write in the folder {shown!r} (permission denied)", key=option)
        if os.path.exists(real) and not force:
            raise InputError(f"{path} exists; choose another name or add --force to overwrite it", key=option)
        out.append(OutputFile(option, path, real, note))
    return out


def write_outputs(outputs: list[OutputFile], writers: dict[str, object]) -> None:
    """Write the outputs of one command all or none.

    ``writers`` maps each option to its content: text, or a function ``write(tmp_path)``.
    Every file is first written as a temporary file beside its destination; only when all of
    them are written are they renamed into place (an earlier file kept as a hard-link backup
    until the end, so a failing rename puts everything back). A failure names the option and
    says that nothing was written.
    """
    import os

    from convert.errors import InputError

    staged: list[tuple[OutputFile, str]] = []
    try:
        for out in outputs:
            content = writers[out.option]
            try:
                staged.append((out, _stage(out.path, content)))
            except OSError as exc:
                raise InputError(
                    f"cannot write {out.given!r} ({exc.strerror or exc}); nothing was written", key=out.option
                ) from None
        done: list[tuple[OutputFile, str | None]] = []
        failing = None
        try:
            for failing, tmp in staged:
                out = failing
                backup = None
                if os.path.exists(out.path):
                    backup = tmp + ".old"
                    try:
                        os.link(out.path, backup)
                    except OSError:
                        backup = None
                os.replace(tmp, out.path)
                done.append((out, backup))
        except OSError as exc:
            for put, backup in reversed(done):
                if backup:
                    os.replace(backup, put.path)
                else:
                    os.unlink(put.path)
            raise InputError(
                f"cannot put {failing.given!r} in place ({exc.strerror or exc}); nothing was written",
                key=failing.option,
            ) from None
        for _, backup in done:
            if backup:
                os.unlink(backup)
    finally:
        for _, tmp in staged:
            for leftover in (tmp, tmp + ".old"):
                if os.path.lexists(leftover):
                    os.unlink(leftover)


def _stage(path: str, content) -> str:
    """Write ``content`` (text, or a function of the temporary path) to a new temporary file
    beside ``path`` with the permissions a plain ``open`` would give; return its path."""
    import os
    import tempfile

    folder = os.path.dirname(os.path.abspath(path))
    fd, tmp = tempfile.mkstemp(dir=folder, prefix=".loopshift-", suffix=os.path.splitext(path)[1])
    os.close(fd)
    try:
        if callable(content):
            content(tmp)
        else:
            _write_text(tmp, content)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)
    except BaseException:
        os.unlink(tmp)
        raise
    return tmp


def _write_text(path: str, text: str) -> None:
    with open(path, "w", newline="") as fh:
        fh.write(text)


def _ext(option: str) -> str:
    return {"--netlist": ".cir", "--bom": ".csv", "--schematic": ".svg", "--buy-list": ".csv"}.get(option, "")


def write_file_atomic(path: str, write) -> None:
    """Create ``path`` through a temporary file in the same folder, then rename it into place.

    ``write(tmp_path)`` writes the content. The file gets the permissions a plain ``open`` would
    give it (0666 less the umask), not the private 0600 of a temporary file, so a BOM or netlist
    written for colleagues is readable by them. Nothing is left behind when ``write`` fails.
    """
    import os

    tmp = _stage(path, write)
    try:
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def write_text_atomic(path: str, text: str) -> None:
    """Write ``text`` to ``path`` atomically (see :func:`write_file_atomic`)."""

    write_file_atomic(path, lambda tmp: _write_text(tmp, text))


def fit_columns(
    header: list[str], rows: list[list[str]], width: int, gap: int = 2
) -> tuple[list[int], list[str], list[list[str]]]:
    """Column widths that fit ``width`` terminal columns without breaking a word, and the header
    and cells wrapped to them (lines joined by newlines).

    Each column gets at least its longest word; when even that does not fit, words break after
    their hyphens ("disturbance-" / "response"), never inside. The room left goes to the columns
    in proportion to how much wider their longest cell is. ``gap``: columns between two cells."""
    import textwrap

    columns = [[header[i]] + [r[i] for r in rows] for i in range(len(header))]

    def longest(texts, hyphens: bool, whole: int) -> int:
        # cells up to ``whole`` characters (a number with its unit) stay on one line
        return max(
            len(t)
            if len(t) <= whole
            else max(len(p) for p in textwrap.wrap(t, 1, break_long_words=False, break_on_hyphens=hyphens) or [""])
            for t in texts
        )

    natural = [max(len(t) for t in col) for col in columns]
    room = width - gap * (len(columns) - 1)
    hyphens = False
    if sum(natural) <= room:
        widths = natural
    else:
        for hyphens, whole in ((False, 12), (False, 0), (True, 0)):
            base = [max(longest(col[1:], hyphens, whole), longest(col[:1], hyphens, 0)) for col in columns]
            if sum(base) <= room:
                break
        spare = max(room - sum(base), 0)
        want = [n - b for n, b in zip(natural, base)]
        total = sum(want) or 1
        widths = [b + (spare * w) // total for b, w in zip(base, want)]

    def wrap(text: str, w: int) -> str:
        return "\n".join(textwrap.wrap(text, w, break_long_words=False, break_on_hyphens=hyphens)) or text

    return (
        widths,
        [wrap(h, w) for h, w in zip(header, widths)],
        [[wrap(c, w) for c, w in zip(row, widths)] for row in rows],
    )
