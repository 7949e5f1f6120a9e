"""Measurement tables in CSV: the header, its units, and numbers read row by row in chunks.

One reader for both kinds of evidence (a bench sweep and a plant log). A header names each
column with its unit in parentheses or brackets — ``frequency (Hz)``, ``gain [dB]``,
``time (s)`` — and a *role* (frequency, gain, phase, coherence; time, setpoint, measurement,
error, output) is found by the column's name or mapped by the caller (``columns``), a unit
by the header or given by the caller (``units``).

Every problem is one :class:`InputError` naming ``file:line`` (the header is line 1) and the
column as the header wrote it: a decimal comma (refused unless ``decimal=","`` is said, then
fields are separated by ``;`` or tabs), a missing column, a cell that is not a finite number
(NaN, empty), a short row. Numbers are read in chunks of :data:`CHUNK_ROWS` rows so a long log
streams in bounded memory.
"""

from __future__ import annotations

import csv
import re
from dataclasses import dataclass, field
from pathlib import Path
from collections.abc import Iterator

import numpy as np

from convert.errors import InputError
from convert.limits import file_kind

CHUNK_ROWS = 65536

#: unit text (lower case) -> (quantity, factor to SI or to the role's base unit, kind)
UNITS: dict[str, tuple[str, float]] = {
    "hz": ("frequency", 1.0),
    "khz": ("frequency", 1e3),
    "mhz": ("frequency", 1e6),
    "rad/s": ("frequency", 1 / (2 * np.pi)),
    "db": ("gain", 1.0),
    "v/v": ("ratio", 1.0),
    "ratio": ("ratio", 1.0),
    "a/a": ("ratio", 1.0),
    "%/%": ("ratio", 1.0),
    "deg": ("angle", np.pi / 180),
    "degree": ("angle", np.pi / 180),
    "degrees": ("angle", np.pi / 180),
    "°": ("angle", np.pi / 180),
    "rad": ("angle", 1.0),
    "s": ("time", 1.0),
    "ms": ("time", 1e-3),
    "us": ("time", 1e-6),
    "µs": ("time", 1e-6),
    "min": ("time", 60.0),
    "h": ("time", 3600.0),
    "1": ("plain", 1.0),
    "": ("plain", 1.0),
}
_UNIT_RE = re.compile(r"^\s*(.*?)\s*[\(\[]\s*([^\)\]]*)\s*[\)\]]\s*$")
_DECIMAL_COMMA = re.compile(r"^\s*[-+]?\d+,\d+(?:[eE][-+]?\d+)?\s*$")


@dataclass(frozen=True)
class Role:
    """A column the reader looks for: ``names`` it answers to (lower case, first word match),
    the quantities its unit may be, and the unit assumed when the header gives none."""

    name: str
    names: tuple[str, ...]
    quantities: tuple[str, ...]
    default_unit: str
    required: bool = True
    repeats: bool = False  # several columns may carry it (repeat measurements)


@dataclass(frozen=True)
class Column:
    role: str
    header: str  # as written in the file
    index: int
    unit: str  # lower case, as found or given
    quantity: str
    factor: float


@dataclass(frozen=True)
class TableLayout:
    """Where each role's column(s) are in a file, with their units."""

    path: Path
    delimiter: str
    decimal: str
    columns: dict = field(default_factory=dict)  # role -> list[Column]
    width: int = 0

    def first(self, role: str) -> Column | None:
        cols = self.columns.get(role) or []
        return cols[0] if cols else None


def split_header(text: str) -> tuple[str, str | None]:
    """``"gain (dB)"`` -> ("gain", "db"); ``"gain"`` -> ("gain", None)."""
    m = _UNIT_RE.match(text)
    if m:
        return m.group(1).strip(), m.group(2).strip().lower()
    return text.strip(), None


def _open(path: Path):
    kind = file_kind(path)
    if kind is not None and kind != "a folder":  # /dev/zero has no line end: readline would never return
        raise InputError(f"expected a CSV file (a regular file), found {kind}", where=str(path))
    try:
        return open(path, newline="", encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputError("no such file", where=str(path)) from None
    except IsADirectoryError:
        raise InputError("expected a CSV file, found a folder", where=str(path)) from None
    except OSError as exc:
        raise InputError(f"cannot read the file ({exc.strerror})", where=str(path)) from None


def _sniff(path: Path, first: str, decimal: str) -> str:
    if "\t" in first:
        return "\t"
    if ";" in first:
        return ";"
    if decimal == ",":
        raise InputError(
            "decimal=',' needs fields separated by ';' or tabs (a comma cannot be both)", where=f"{path.name}:1"
        )
    return ","


def layout(
    path: str | Path,
    roles: tuple[Role, ...],
    *,
    columns: dict | None = None,
    units: dict | None = None,
    decimal: str = ".",
    option: str = "columns",
) -> TableLayout:
    """Read the header of ``path`` and place each role. ``columns`` maps a role to the header
    text of its column (exact, case-insensitive, units part optional); ``units`` maps a role to
    its unit when the header has none or says otherwise; ``option`` names the mapping in hints."""
    path = Path(path)
    if decimal not in (".", ","):
        raise InputError(f"expected '.' or ',', found {decimal!r}", key="decimal")
    with _open(path) as fh:
        try:
            first = fh.readline()
        except UnicodeDecodeError as exc:
            raise InputError(f"the file is not UTF-8 text ({exc.reason})", where=str(path)) from None
    if not first.strip():
        shown = {"hz": "Hz", "db": "dB"}
        raise InputError(
            "the file is empty; expected a header line such as "
            + ",".join(
                f"{r.name} ({shown.get(r.default_unit, r.default_unit)})" if r.default_unit else r.name
                for r in roles
                if r.required
            ),
            where=f"{path.name}:1",
        )
    delim = _sniff(path, first, decimal)
    header = next(csv.reader([first], delimiter=delim))
    parsed = [split_header(h) for h in header]
    columns = {k.lower(): v for k, v in (columns or {}).items()}
    units = {k.lower(): str(v).lower() for k, v in (units or {}).items()}
    known = {r.name for r in roles}
    for key in list(columns) + list(units):
        if key not in known:
            import difflib

            close = difflib.get_close_matches(key, sorted(known), n=1)
            hint = f" (did you mean {close[0]!r}?)" if close else ""
            raise InputError(
                f"unknown column role {key!r}{hint}; roles: {', '.join(r.name for r in roles)}", key=option
            )
    placed: dict[str, list[Column]] = {}
    taken: set[int] = set()
    for role in roles:
        idx: list[int] = []
        if role.name in columns:
            want = columns[role.name].strip().lower()
            idx = [
                i for i, (h, (n, _)) in enumerate(zip(header, parsed)) if h.strip().lower() == want or n.lower() == want
            ]
            if not idx:
                raise InputError(
                    f"no column {columns[role.name]!r} for {role.name}; the header has "
                    f"{', '.join(repr(h) for h in header)}",
                    where=f"{path.name}:1",
                    key=option,
                )
        else:
            for i, (name, _) in enumerate(parsed):
                if i in taken:
                    continue
                word = re.split(r"[\s_]+", name.lower())[0] if name else ""
                if name.lower() in role.names or word in role.names:
                    idx.append(i)
        if not role.repeats:
            idx = idx[:1]
        if not idx:
            if role.required:
                raise InputError(
                    f"no {role.name} column: the header has {', '.join(repr(h) for h in header)}; "
                    f"name it '{role.name} ({role.default_unit})' or map it with {option} "
                    f"{role.name}=NAME",
                    where=f"{path.name}:1",
                )
            continue
        cols = []
        for i in idx:
            taken.add(i)
            unit = units.get(role.name, parsed[i][1] if parsed[i][1] is not None else role.default_unit)
            if role.quantities == ("plain",):  # a signal in engineering units (%, degC, bar): a label only
                cols.append(Column(role.name, header[i], i, unit, "plain", 1.0))
                continue
            if unit not in UNITS or UNITS[unit][0] not in role.quantities:
                allowed = sorted(u for u, (q, _) in UNITS.items() if q in role.quantities and u)
                raise InputError(
                    f"column {header[i]!r}: unit {unit!r} is not a unit of {role.name}; expected one of "
                    f"{', '.join(allowed)}",
                    where=f"{path.name}:1",
                )
            q, factor = UNITS[unit]
            cols.append(Column(role.name, header[i], i, unit, q, factor))
        placed[role.name] = cols
    return TableLayout(path, delim, decimal, placed, len(header))


def chunks(
    lay: TableLayout, *, chunk_rows: int = CHUNK_ROWS, allow_missing: tuple[str, ...] = ()
) -> Iterator[tuple[np.ndarray, dict[str, np.ndarray]]]:
    """Yield ``(line_numbers, {role: values (rows,) or (rows, repeats)})`` in chunks, values in
    the role's unit as written times its factor (SI; gain in dB or as a ratio is left to the
    caller by the column's quantity). Cells of roles in ``allow_missing`` may be empty or NaN
    (read as NaN: a gap); any other bad cell stops the read with file:line and column."""
    path = lay.path
    wanted = [(role, c) for role, cols in lay.columns.items() for c in cols]
    with _open(path) as fh:
        reader = csv.reader(fh, delimiter=lay.delimiter)
        try:
            next(reader)
        except StopIteration:  # pragma: no cover - layout() checked the header
            return
        cells: list[list[str]] = []
        lines: list[int] = []
        line = 1
        index = [c.index for _, c in wanted]
        try:
            for row in reader:
                line += 1
                if not row or all(not x.strip() for x in row):
                    continue
                if row[0].lstrip().startswith("#"):
                    continue
                if len(row) != lay.width:
                    _check_width(row, lay, wanted, line)
                cells.append([row[i] for i in index])
                lines.append(line)
                if len(cells) == chunk_rows:
                    yield _convert(cells, lines, lay, wanted, allow_missing)
                    cells, lines = [], []
        except UnicodeDecodeError as exc:
            raise InputError(f"the file is not UTF-8 text ({exc.reason})", where=f"{path.name}:{line + 1}") from None
        except csv.Error as exc:
            raise InputError(f"not readable as CSV ({exc})", where=f"{path.name}:{line}") from None
        if cells:
            yield _convert(cells, lines, lay, wanted, allow_missing)


def require_rising(values: np.ndarray, col: Column, noun: str, path: Path, lines, before: float | None = None) -> None:
    """Refuse a column (``noun``: what its values are, e.g. "time") that does not rise row by row
    (``before``: the last value of the previous chunk), naming the row where it stops rising."""
    if before is not None and values.size and values[0] <= before:
        raise InputError(
            f"column {col.header!r}: {noun} must rise row by row; {values[0] / col.factor:g} follows "
            f"{before / col.factor:g}",
            where=f"{path.name}:{lines[0]}",
        )
    step = np.flatnonzero(np.diff(values) <= 0)
    if step.size:
        i = step[0] + 1
        raise InputError(
            f"column {col.header!r}: {noun} must rise row by row; {values[i] / col.factor:g} follows "
            f"{values[i - 1] / col.factor:g}",
            where=f"{path.name}:{lines[i]}",
        )


def _check_width(row, lay: TableLayout, wanted, line: int) -> None:
    if len(row) > lay.width:
        hint = (
            "; a decimal comma in a comma-separated file splits numbers (write decimal points, or "
            "separate fields with ';' and say decimal=',')"
            if lay.delimiter == ","
            else ""
        )
        raise InputError(
            f"the row has {len(row)} fields, the header {lay.width}{hint}", where=f"{lay.path.name}:{line}"
        )
    for _, c in wanted:
        if c.index >= len(row):
            raise InputError(
                f"column {c.header!r}: the row has {len(row)} fields, the header {lay.width}",
                where=f"{lay.path.name}:{line}",
            )


def _convert(cells, lines, lay: TableLayout, wanted, allow_missing):
    """A chunk of text cells as numbers: numpy's parser first, the cell-by-cell reader (which
    names the bad cell) when anything is off."""
    line_arr = np.asarray(lines, dtype=np.int64)
    values = None
    if lay.decimal == ".":
        try:
            values = np.array(cells, dtype=float)
        except ValueError:
            values = None
        if values is not None and not np.isfinite(values).all():
            values = None
    if values is None:
        values = np.empty((len(cells), len(wanted)))
        for k, row in enumerate(cells):
            for j, (role, c) in enumerate(wanted):
                values[k, j] = _number(row[j], lay, c, lines[k], role in allow_missing, scaled=False)
    factors = np.array([c.factor for _, c in wanted])
    return line_arr, _split(values * factors, wanted, len(cells))


def _split(buf, wanted, k):
    out: dict[str, list] = {}
    for j, (role, _) in enumerate(wanted):
        out.setdefault(role, []).append(buf[:k, j].copy())
    return {role: (v[0] if len(v) == 1 else np.stack(v, axis=1)) for role, v in out.items()}


def _number(text: str, lay: TableLayout, c: Column, line: int, gap_ok: bool, scaled: bool = True) -> float:
    s = text.strip()
    if lay.decimal == ",":
        s = s.replace(",", ".")
    elif _DECIMAL_COMMA.match(s):
        raise InputError(
            f"column {c.header!r}: {text.strip()!r} has a decimal comma; write a decimal point, or say "
            "the file uses decimal commas (the decimal mark setting: ','; fields then separated by ';')",
            where=f"{lay.path.name}:{line}",
            settings=("decimal mark setting",),
        )
    try:
        value = float(s)
    except ValueError:
        if gap_ok and s.lower() in ("", "nan"):
            return float("nan")
        found = "an empty cell" if not s else repr(text.strip())
        raise InputError(
            f"column {c.header!r}: expected a number, found {found}", where=f"{lay.path.name}:{line}"
        ) from None
    if not np.isfinite(value):
        if gap_ok and np.isnan(value):
            return value
        raise InputError(
            f"column {c.header!r}: expected a finite number, found {text.strip()!r}", where=f"{lay.path.name}:{line}"
        )
    return value * c.factor if scaled else value
