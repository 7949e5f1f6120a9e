"""Bounds on what loopshift reads, stated in one place and enforced before the work starts.

Every input is bounded so a typo or a hostile file gets a one-line refusal naming the limit,
never minutes of work, gigabytes of memory or an internal error. docs/reliability.md explains
each figure. Only the file-size limit can be changed (it depends on the machine, the others on
what a controller is): set ``LOOPSHIFT_MAX_INPUT_MB``.

This module also owns reading an input file (:func:`read_input_text`): regular files only, at
most :func:`max_input_bytes`, UTF-8.
"""

from __future__ import annotations

import os
import stat

from convert.errors import InputError

#: Default largest input file (case file, netlist), bytes. A case file is a few kB and a card's
#: netlist a few tens of kB; 4 MiB leaves a margin of 100x.
DEFAULT_MAX_INPUT_BYTES = 4 * 1024 * 1024
#: The environment variable that changes the input file limit (in MiB).
INPUT_LIMIT_VARIABLE = "LOOPSHIFT_MAX_INPUT_MB"

#: Longest transfer-function expression, characters.
MAX_EXPRESSION_CHARS = 10_000
#: Deepest nesting of parentheses and unary signs in an expression or a netlist `.param`.
MAX_NESTING = 100
#: Largest degree of the numerator or the denominator while an expression is read (exact
#: rational arithmetic; a real controller has a handful of poles).
MAX_DEGREE = 100
#: Longest number written in an expression or a value: digits of the mantissa, and the
#: largest exponent magnitude.
MAX_NUMBER_DIGITS = 200
MAX_EXPONENT = 400
#: Case files: the sample rates of one digital target, and rates x methods (each pair is a full
#: realization with its own loop checks and figures).
MAX_RATES = 32
MAX_RATE_METHOD_PAIRS = 64
#: Characters of the input an error message quotes.
EXCERPT_CHARS = 60


def excerpt(text, limit: int = EXCERPT_CHARS) -> str:
    """``text`` quoted for an error message, shortened to about ``limit`` characters with its
    length stated, e.g. ``'(s+1)*(s+1)*…' (10,000 characters)``."""
    text = str(text).strip()
    if len(text) <= limit:
        return repr(text)
    return f"{text[:limit]!r}… ({len(text):,} characters)"


def max_input_bytes() -> int:
    """The input file limit in bytes (``LOOPSHIFT_MAX_INPUT_MB`` when set to a positive number)."""
    raw = os.environ.get(INPUT_LIMIT_VARIABLE, "").strip()
    if not raw:
        return DEFAULT_MAX_INPUT_BYTES
    try:
        mb = float(raw)
    except ValueError:
        mb = -1.0
    if not (mb > 0 and mb < 1e6):
        raise InputError(
            f"expected a size in MiB from 0 to 1,000,000, found {excerpt(raw)}",
            where="environment",
            key=INPUT_LIMIT_VARIABLE,
        )
    return int(mb * 1024 * 1024)


def read_input_text(path, *, what: str = "file") -> str:
    """Read the input file ``path`` as UTF-8 text, refusing anything but a regular file within
    :func:`max_input_bytes`. ``what`` names the file in errors ("case file", "netlist").

    The size is checked on the open file (so a file that grows, or a device that reports size
    0, is still cut at the limit): at most limit + 1 bytes are ever read.
    """
    name = str(path)
    limit = max_input_bytes()
    try:
        fd = os.open(name, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
    except FileNotFoundError:
        raise InputError(
            "no such case file" if what == "case file" else f"no such file (expected a {what})", where=name
        ) from None
    except IsADirectoryError:
        raise InputError(f"expected a {what}, found a folder", where=name) from None
    except OSError as exc:
        raise InputError(f"cannot read the {what} ({exc.strerror or exc})", where=name) from None
    try:
        info = os.fstat(fd)
        if stat.S_ISDIR(info.st_mode):
            raise InputError(f"expected a {what}, found a folder", where=name)
        if not stat.S_ISREG(info.st_mode):
            raise InputError(f"expected a {what} (a regular file), found {_file_kind(info.st_mode)}", where=name)
        if info.st_size > limit:
            raise InputError(_too_big(what, info.st_size, limit), where=name)
        data = b""
        while len(data) <= limit:
            chunk = os.read(fd, limit + 1 - len(data))
            if not chunk:
                break
            data += chunk
        if len(data) > limit:
            raise InputError(_too_big(what, None, limit), where=name)
    except OSError as exc:
        raise InputError(f"cannot read the {what} ({exc.strerror or exc})", where=name) from None
    finally:
        os.close(fd)
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise InputError(f"the file is not UTF-8 text ({exc.reason} at byte {exc.start})", where=name) from None


def _too_big(what: str, size: int | None, limit: int) -> str:
    found = f"it has {size:,} bytes" if size is not None else "it is larger"
    return (
        f"the {what} is larger than the input limit of {limit:,} bytes ({found}); "
        f"set {INPUT_LIMIT_VARIABLE} to a larger size in MiB to read it"
    )


def _file_kind(mode: int) -> str:
    """Plain words for a file type that is not a regular file."""
    if stat.S_ISCHR(mode):
        return "a character device"
    if stat.S_ISBLK(mode):
        return "a block device"
    if stat.S_ISFIFO(mode):
        return "a named pipe (FIFO)"
    if stat.S_ISSOCK(mode):
        return "a socket"
    if stat.S_ISDIR(mode):
        return "a folder"
    return "a special file"


def file_kind(path) -> str | None:
    """None when ``path`` is absent or a regular file (following links); otherwise what it is,
    in words ("a character device", "a folder", ...)."""
    try:
        info = os.stat(path)
    except FileNotFoundError:
        return None
    if stat.S_ISREG(info.st_mode):
        return None
    return _file_kind(info.st_mode)
