"""Numbers with SI prefixes and units: the one place that reads and writes them.

Two dialects live here, side by side, so no other module parses numbers:

* **loopshift values** (case files, the command line): ``4.7k``, ``2.2 nF``, ``250 ms``,
  ``1 kHz``, ``10 Hz``, ``0.5 s``, ``1e-3``, ``2 min``, ``150 %``. The prefix letter is case
  sensitive: ``M`` is mega (1e6) and ``m`` is milli (1e-3); ``u`` and ``µ`` are micro.
  A unit is optional; when given it must fit the field (a capacitance given in Hz is an
  error naming the field). A space between number, prefix and unit is allowed.
* **SPICE numbers** (netlists): the SPICE rule — suffixes are case-insensitive, ``meg`` is
  mega and ``m`` is milli, letters after the suffix are ignored (``10uF`` is 10e-6), and a
  value written like ``4k7`` is refused rather than read as 4000.

Units (``kind`` argument):
``ohm`` (Ω, ohm, R is not accepted as a unit), ``farad`` (F), ``henry`` (H), ``hz`` (Hz),
``second`` (s, min, h), ``volt`` (V), ``percent`` (%), ``ratio`` (no unit; ``%`` is read as
/100), ``number`` (no unit).
"""

from __future__ import annotations

import math
import re
from decimal import Decimal, InvalidOperation

from convert.errors import InputError
from convert.limits import MAX_EXPONENT, MAX_NUMBER_DIGITS, excerpt

SI_PREFIXES: dict[str, float] = {
    "f": 1e-15,
    "p": 1e-12,
    "n": 1e-9,
    "u": 1e-6,
    "µ": 1e-6,
    "μ": 1e-6,
    "m": 1e-3,
    "": 1.0,
    "k": 1e3,
    "K": 1e3,
    "M": 1e6,
    "G": 1e9,
    "T": 1e12,
}

# unit spelling -> (kind, multiplier to SI)
_UNITS: dict[str, tuple[str, float]] = {
    "ohm": ("ohm", 1.0),
    "ohms": ("ohm", 1.0),
    "Ω": ("ohm", 1.0),
    "Ohm": ("ohm", 1.0),
    "F": ("farad", 1.0),
    "H": ("henry", 1.0),
    "Hz": ("hz", 1.0),
    "hz": ("hz", 1.0),
    "s": ("second", 1.0),
    "sec": ("second", 1.0),
    "min": ("second", 60.0),
    "h": ("second", 3600.0),
    "V": ("volt", 1.0),
    "A": ("ampere", 1.0),
    "%": ("percent", 1.0),
}

KIND_NAMES = {
    "ohm": "a resistance in ohms (e.g. 4.7k, 10 kohm)",
    "farad": "a capacitance in farads (e.g. 2.2 nF, 100n)",
    "henry": "an inductance in henries (e.g. 10 mH)",
    "hz": "a frequency in Hz (e.g. 1 kHz, 50 Hz)",
    "second": "a time (e.g. 250 ms, 0.5 s, 2 min)",
    "volt": "a voltage (e.g. 12 V)",
    "ampere": "a current (e.g. 20 mA)",
    "percent": "a percentage (e.g. 150 %)",
    "ratio": "a plain number or percentage (e.g. 0.5 or 50 %)",
    "number": "a plain number (e.g. 2.5, 1e-3)",
}

_NUMBER = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_VALUE_RE = re.compile(rf"^\s*(?P<num>{_NUMBER})\s*(?P<rest>.*?)\s*$")


def parse_value(text: str | float | int, kind: str = "number", *, field: str = "value") -> float:
    """Read a loopshift value such as ``"2.2 nF"`` and return it in SI units (a float).

    Parameters
    ----------
    text:
        The written value. Plain ints and floats pass through (after a finiteness check).
    kind:
        What the field holds; one of the keys of :data:`KIND_NAMES`.
    field:
        The field's name for error messages (e.g. ``"--fs"`` or ``"ti"``).

    Raises
    ------
    InputError
        Naming ``field`` when the text is not a number, the prefix is unknown, the unit does
        not fit ``kind``, or the value is NaN or infinite.
    """
    if kind not in KIND_NAMES:
        raise ValueError(f"unknown value kind {kind!r}")
    if isinstance(text, bool):
        raise InputError(f"expected {KIND_NAMES[kind]}, found a boolean", key=field)
    if isinstance(text, (int, float)):
        try:
            value = float(text)
        except OverflowError:  # an integer beyond the double range (a TOML integer of 400 digits)
            raise InputError(
                f"expected a finite value ({KIND_NAMES[kind]}), found an integer of {len(str(abs(text))):,} digits",
                key=field,
            ) from None
        _check_finite(value, field, kind, excerpt(text))
        _check_underflow(value, repr(text), field, repr(text))
        return value
    if not isinstance(text, str):
        raise InputError(f"expected {KIND_NAMES[kind]}, found {type(text).__name__}", key=field)
    if len(text) > 2 * MAX_NUMBER_DIGITS:
        raise InputError(f"expected {KIND_NAMES[kind]}, found {excerpt(text, 20)}", key=field)
    m = _VALUE_RE.match(text)
    if not m:
        lowered = text.strip().lower()
        if lowered in {"nan", "inf", "+inf", "-inf", "infinity"}:
            raise InputError(f"expected a finite number, found {text.strip()!r}", key=field)
        raise InputError(f"expected {KIND_NAMES[kind]}, found {excerpt(text)}", key=field)
    rest = m.group("rest").replace(" ", "")
    multiplier, unit_kind = _split_prefix_unit(rest, kind, field, text)
    _check_number_text(m.group("num"), text, key=field, where=None)
    value = _scaled(m.group("num"), multiplier)
    if unit_kind == "percent" and kind == "ratio":
        value /= 100.0
    _check_finite(value, field, kind, text)
    _check_underflow(value, m.group("num"), field, text)
    return value


def parse_fraction(text: str | float | int, *, field: str = "value", allow_one: bool = True) -> float:
    """Read a percentage field: ``"5 %"`` or a fraction (``0.05``); returns the fraction.

    A bare number (no ``%``) above 1 is refused naming ``field`` and both readings (``5`` is
    500 % as a fraction or 5 % as a percentage), because taking either silently moves the
    value by a factor of 100. ``allow_one=False`` refuses a bare 1 as well, for limits where
    100 % means nothing and "1" is most likely 1 %. Fields that use this rule are listed in
    docs/values.md.
    """
    value = parse_value(text, "ratio", field=field)
    if isinstance(text, str) and text.strip().endswith("%"):
        return value
    if abs(value) > 1 or (abs(value) == 1 and not allow_one):
        shown = text.strip() if isinstance(text, str) else f"{value:g}"
        raise InputError(
            f"{shown} is ambiguous in a percentage field: as a fraction it is {value * 100:g} %, as a percentage "
            f'it is {value:g} % (= {value / 100:g}); write "{value:g} %" or "{value * 100:g} %"',
            key=field,
        )
    return value


def _check_underflow(value: float, number_text: str, field: str, shown: str, where: str | None = None) -> None:
    """A written non-zero number that is zero or subnormal in double (below about 2.2e-308) is
    refused: it would silently become 0 or lose its digits (``1e-320`` as a netlist part value
    divided by zero in the nodal analysis)."""
    if abs(value) < 2.2250738585072014e-308 and Decimal(number_text) != 0:
        raise InputError(
            f"expected a number within double precision, found {excerpt(shown)}: too small (below about 2.2e-308)",
            where=where,
            key=field,
        )


def _check_number_text(number_text: str, shown: str, *, key: str, where: str | None) -> None:
    """Refuse a number too long or with an exponent too large to mean anything (1e999999999):
    it would be read as infinity or zero, or overflow the exact decimal arithmetic."""
    mantissa, _, exp = number_text.lower().lstrip("+-").partition("e")
    digits = exp.lstrip("+-").lstrip("0")
    if len(mantissa) > MAX_NUMBER_DIGITS or len(digits) > 4 or (digits and int(digits) > MAX_EXPONENT):
        raise InputError(
            f"the number {excerpt(shown, 20)} is out of range (at most {MAX_NUMBER_DIGITS} digits and "
            f"an exponent of ±{MAX_EXPONENT}; a finite value is needed)",
            where=where,
            key=key,
        )


def _scaled(number_text: str, multiplier: float) -> float:
    """number × multiplier rounded once (so "2.2" × 1e-9 is exactly the float nearest 2.2e-9)."""
    try:
        return float(Decimal(number_text) * Decimal(repr(multiplier)))
    except InvalidOperation:  # pragma: no cover - the regex admits only valid numbers
        return float(number_text) * multiplier


def _check_finite(value: float, field: str, kind: str, shown: str) -> None:
    if not math.isfinite(value):
        raise InputError(f"expected a finite value ({KIND_NAMES[kind]}), found {shown.strip()!r}", key=field)


def _split_prefix_unit(rest: str, kind: str, field: str, original: str) -> tuple[float, str | None]:
    """Return (multiplier, unit kind or None) for the text after the number."""
    if rest == "":
        return 1.0, None
    candidates: list[tuple[float, str]] = []
    # Unit alone (no prefix), then prefix + unit, then prefix alone.
    if rest in _UNITS:
        u_kind, u_mult = _UNITS[rest]
        candidates.append((u_mult, u_kind))
    elif rest[0] in SI_PREFIXES and rest[1:] in _UNITS:
        u_kind, u_mult = _UNITS[rest[1:]]
        candidates.append((SI_PREFIXES[rest[0]] * u_mult, u_kind))
    elif rest[:3].lower() == "meg":
        raise InputError(
            f"'meg' is SPICE spelling; in loopshift values write M for mega (e.g. 1M), found {original.strip()!r}",
            key=field,
        )
    elif rest == "m" and kind == "second":
        # A plant user may mean minutes; a bare milli prefix on a time is refused, not guessed.
        raise InputError(
            f"'{original.strip()}' is ambiguous for a time: write ms for milliseconds or min for minutes",
            key=field,
        )
    elif rest in SI_PREFIXES and len(rest) == 1:
        return SI_PREFIXES[rest], None
    elif rest.lower() in {"kohm", "mohm"}:
        raise InputError(
            f"write the prefix case-sensitively (k for kilo, M for mega, m for milli), found {original.strip()!r}",
            key=field,
        )
    if not candidates:
        raise InputError(
            f"expected {KIND_NAMES[kind]}; could not read the prefix/unit {rest!r} in {original.strip()!r} "
            "(prefixes: p n u m k M G; M is mega, m is milli)",
            key=field,
        )
    mult, unit_kind = candidates[0]
    allowed = {kind}
    if kind == "ratio":
        allowed = {"percent"}
    if kind == "number":
        allowed = set()
    if unit_kind not in allowed:
        raise InputError(
            f"expected {KIND_NAMES[kind]}, found {original.strip()!r} which is {KIND_NAMES[unit_kind].split(' (')[0]}",
            key=field,
        )
    return mult, unit_kind


_UNIT_SYMBOL = {"ohm": "Ω", "farad": "F", "henry": "H", "hz": "Hz", "second": "s", "volt": "V", "number": ""}
_FORMAT_PREFIXES = [
    (1e12, "T"),
    (1e9, "G"),
    (1e6, "M"),
    (1e3, "k"),
    (1.0, ""),
    (1e-3, "m"),
    (1e-6, "µ"),
    (1e-9, "n"),
    (1e-12, "p"),
    (1e-15, "f"),
]


def format_value(value: float, kind: str = "number", digits: int = 4) -> str:
    """Write ``value`` (SI units) with an SI prefix and unit, e.g. ``2.2e-9, "farad"`` -> ``"2.2 nF"``.

    ``digits`` is the number of significant digits. Zero, NaN and infinities are written plainly.
    """
    unit = _UNIT_SYMBOL.get(kind, "")
    if kind == "percent":
        return f"{value:.{digits}g} %"
    if kind == "ratio":
        return f"{value:.{digits}g}"
    if value == 0 or not math.isfinite(value):
        return f"{value:g} {unit}".strip()
    magnitude = abs(value)
    for scale, prefix in _FORMAT_PREFIXES:  # noqa: B007
        if magnitude >= scale * 0.9999999:
            break
    text = f"{value / scale:.{digits}g}"
    if kind in ("ohm", "number") and not unit:
        return f"{text}{prefix}"
    return f"{text} {prefix}{unit}".rstrip()


_SAMPLES_RE = re.compile(r"^\s*(?P<count>.*?)\s*(?:samples?|smp)\s*$")


def parse_delay(text: str | float | int, *, field: str = "delay") -> tuple[float | None, float | None]:
    """Read a computation delay given in seconds or in samples.

    Returns ``(delay_s, None)`` for a time (``"250 us"``, ``"0.5 ms"``, ``"1 s"``) and
    ``(None, delay_samples)`` for a count of samples (``"1 sample"``, ``"2 samples"``,
    ``"0.5sample"``). A bare non-zero number (``1``, ``"0.02"``) is refused naming ``field`` and
    both readings: a delay is as often counted in samples as timed in seconds, and either guess
    can be wrong by the sample rate. A bare 0 is no delay either way. Negative delays are
    refused naming ``field``.
    """
    bare = not isinstance(text, str) or re.fullmatch(rf"\s*{_NUMBER}\s*", text) is not None
    if bare and not isinstance(text, bool):
        value = parse_value(text, "number", field=field)
        if value != 0:
            shown = text.strip() if isinstance(text, str) else f"{value:g}"
            raise InputError(
                f"{shown} is ambiguous in a delay: {value:g} s or {value:g} sample(s); write "
                f'"{value:g} s" or "{value:g} sample"',
                key=field,
            )
    m = _SAMPLES_RE.match(text) if isinstance(text, str) else None
    if m:
        count = parse_value(m.group("count"), "number", field=field)
        if count < 0:
            raise InputError(f"the delay must be zero or positive, found {text.strip()!r}", key=field)
        return None, count
    try:
        seconds = parse_value(text, "second", field=field)
    except InputError as exc:
        raise InputError(f"{exc.message} (a time such as 200 us, or samples such as 1 sample)", key=field) from None
    if seconds < 0:
        raise InputError(f"the delay must be zero or positive, found {str(text).strip()!r}", key=field)
    return seconds, None


# ---------------------------------------------------------------------------------------
# SPICE dialect
# ---------------------------------------------------------------------------------------
_SPICE_SUFFIX = {
    "t": 1e12,
    "g": 1e9,
    "meg": 1e6,
    "k": 1e3,
    "mil": 25.4e-6,
    "m": 1e-3,
    "u": 1e-6,
    "µ": 1e-6,
    "n": 1e-9,
    "p": 1e-12,
    "f": 1e-15,
}
_SPICE_RE = re.compile(rf"^(?P<num>{_NUMBER})(?P<rest>[a-zA-Zµ]*)$")


def parse_spice_number(text: str, *, where: str = "netlist", field: str = "value") -> float:
    """Read a number in SPICE notation (``10k``, ``2.2n``, ``1meg``, ``4.7uF``, ``1e-9``).

    Suffix letters are case-insensitive: ``M``/``m`` is milli and ``MEG``/``meg`` is mega,
    as every SPICE simulator reads them. Letters after a recognised suffix are ignored (a unit
    such as ``F`` or ``ohm``). A number followed by a suffix and more digits (``4k7``) is an
    error rather than silently 4000.
    """
    token = text.strip()
    if len(token) > 2 * MAX_NUMBER_DIGITS:
        raise InputError(f"expected a SPICE number, found {excerpt(token, 20)}", where=where, key=field)
    m = _SPICE_RE.match(token)
    if not m:
        if re.match(rf"^{_NUMBER}[a-zA-Zµ]+\d", token):
            raise InputError(
                f"the value {token!r} uses a letter as the decimal point, which SPICE reads differently; "
                "write it as 4.7k rather than 4k7",
                where=where,
                key=field,
            )
        raise InputError(f"expected a SPICE number (e.g. 4.7k, 2.2n, 1meg), found {token!r}", where=where, key=field)
    _check_number_text(m.group("num"), token, key=field, where=where)
    rest = m.group("rest").lower()
    multiplier = 1.0
    if rest:
        for suffix in ("meg", "mil", "t", "g", "k", "m", "u", "µ", "n", "p", "f"):
            if rest.startswith(suffix):
                multiplier = _SPICE_SUFFIX[suffix]
                break
    value = _scaled(m.group("num"), multiplier)
    _check_underflow(value, m.group("num"), field, token, where)
    if not math.isfinite(value):
        raise InputError(f"expected a finite number, found {excerpt(token)}", where=where, key=field)
    return value


def format_spice_number(value: float) -> str:
    """Write a value in exponent form that every SPICE reads the same way, e.g. ``4.7e+03``."""
    return f"{value:.9e}"
