"""Values with SI prefixes and units (convert.values)."""

from __future__ import annotations

import math
import os

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from convert.errors import InputError
from convert.values import format_spice_number, format_value, parse_spice_number, parse_value

EXAMPLES = int(os.environ.get("LOOPSHIFT_FUZZ_EXAMPLES", "50"))


@pytest.mark.parametrize(
    "text, kind, expected",
    [
        ("4.7k", "ohm", 4.7e3),
        ("4.7 kΩ", "ohm", 4.7e3),
        ("2.2 nF", "farad", 2.2e-9),
        ("100n", "farad", 100e-9),
        ("250 ms", "second", 0.25),
        ("0.5 s", "second", 0.5),
        ("2 min", "second", 120.0),
        ("1 kHz", "hz", 1e3),
        ("10 Hz", "hz", 10.0),
        ("1e-3", "number", 1e-3),
        ("1M", "ohm", 1e6),
        ("1m", "ohm", 1e-3),
        ("10 µs", "second", 10e-6),
        ("10us", "second", 10e-6),
        ("150 %", "percent", 150.0),
        ("50%", "ratio", 0.5),
        ("12 V", "volt", 12.0),
        ("10 mH", "henry", 10e-3),
    ],
)
def test_prefixes_and_units(text, kind, expected):
    """SI prefixes (BIPM, The International System of Units, 9th ed., 2019, Table 7: k = 1e3,
    M = 1e6, m = 1e-3, µ = 1e-6, n = 1e-9) and 1 min = 60 s (same brochure, Table 8). The value
    is the float nearest the decimal, as Python's float() of the written decimal gives it."""
    assert parse_value(text, kind, field="x") == expected


def test_mega_and_milli_differ():
    """M is mega and m is milli in loopshift values (BIPM SI Brochure, 9th ed., Table 7)."""
    assert parse_value("1M", "ohm") / parse_value("1m", "ohm") == pytest.approx(1e9)


@pytest.mark.parametrize(
    "text, kind, fragment",
    [
        ("2.2 nF", "hz", "a capacitance"),
        ("1 kHz", "farad", "a frequency"),
        ("30 s", "hz", "a time"),
        ("1meg", "ohm", "SPICE"),
        ("nan", "number", "finite"),
        ("inf", "second", "finite"),
        ("1e999", "number", "finite"),
        ("abc", "number", "expected"),
        ("4.7 xF", "farad", "prefix/unit"),
        ("5m", "second", "ambiguous"),
        ("", "number", "expected"),
    ],
)
def test_bad_values_name_the_field(text, kind, fragment):
    """Every bad value is one InputError line that names the field (common practice)."""
    with pytest.raises(InputError) as info:
        parse_value(text, kind, field="ti")
    line = str(info.value)
    assert "\n" not in line
    assert line.startswith("ti: ")
    assert fragment in line


def test_booleans_and_non_finite_numbers_refused():
    """A bool is not a number and NaN is not a value (common practice)."""
    with pytest.raises(InputError):
        parse_value(True, "number", field="kc")
    with pytest.raises(InputError):
        parse_value(float("nan"), "number", field="kc")
    assert parse_value(3, "number") == 3.0


@given(
    st.floats(min_value=1e-14, max_value=1e14, allow_nan=False, allow_infinity=False),
    st.sampled_from(["ohm", "farad", "hz", "second", "volt", "henry", "number", "percent", "ratio"]),
)
@settings(max_examples=EXAMPLES, deadline=None)
def test_format_then_parse_round_trip(value, kind):
    """format_value writes what parse_value reads back (to the digits written). Property test."""
    text = format_value(value, kind, digits=15)
    assert parse_value(text, kind) == pytest.approx(value, rel=1e-13)


# ----------------------------------------------------------------------------- SPICE dialect
@pytest.mark.parametrize(
    "text, expected",
    [
        ("10k", 1e4),
        ("2.2n", 2.2e-9),
        ("1meg", 1e6),
        ("1MEG", 1e6),
        ("1M", 1e-3),
        ("1m", 1e-3),
        ("10uF", 10e-6),
        ("4.7kohm", 4.7e3),
        ("1e-9", 1e-9),
        ("1mil", 25.4e-6),
    ],
)
def test_spice_suffixes(text, expected):
    """SPICE scale factors: T G MEG K MIL M U N P F, case-insensitive, letters after the
    suffix ignored (ngspice User's Manual, section 2.3 "Conventions", from memory; the M/MEG rule
    is also checked against ngspice itself in test_spice_m_is_milli_in_ngspice)."""
    assert parse_spice_number(text) == pytest.approx(expected, rel=1e-15)


def test_spice_4k7_refused():
    """'4k7' is read as 4000 by SPICE (letters after the suffix are ignored); we refuse it
    rather than silently differ from the drawing (common practice)."""
    with pytest.raises(InputError, match="decimal point"):
        parse_spice_number("4k7", where="card.cir:3", field="R1")


@given(st.floats(min_value=-1e15, max_value=1e15, allow_nan=False, allow_infinity=False))
@settings(max_examples=EXAMPLES, deadline=None)
def test_spice_format_round_trip(value):
    """format_spice_number writes exponent form that parse_spice_number reads back. Property test."""
    assert parse_spice_number(format_spice_number(value)) == pytest.approx(value, rel=1e-9, abs=1e-300)


def test_spice_m_is_milli_in_ngspice():
    """ngspice (independent simulator) reads '1M' as 1 milliohm and '1meg' as 1 megaohm, as
    parse_spice_number does: a divider 1k over R2 gives R2/(1k + R2) at its output."""
    from tests.spice import ac_sweep

    for r2_text in ("1M", "1meg"):
        netlist = f"* divider\nV1 in 0 DC 0 AC 1\nR1 in out 1k\nR2 out 0 {r2_text}\n"
        _, v = ac_sweep(netlist, "out", 1.0, 10.0, 2)
        r2 = parse_spice_number(r2_text)
        expected = r2 / (1e3 + r2)
        assert abs(v[0]) == pytest.approx(expected, rel=1e-6)
    assert not math.isclose(parse_spice_number("1M"), parse_spice_number("1meg"))


def test_json_helper_handles_numpy_scalars():
    """to_jsonable turns numpy scalars, bools, complex numbers and non-finite floats into JSON
    values (json module of the standard library as the reference)."""
    import json

    import numpy as np

    from convert.jsonable import to_jsonable

    data = {
        "b": np.bool_(True),
        "x": np.float64(1.5),
        "n": np.int64(3),
        "z": 1 + 2j,
        "nan": float("nan"),
        "arr": np.array([1.0, 2.0]),
    }
    assert json.loads(json.dumps(to_jsonable(data))) == {
        "b": True,
        "x": 1.5,
        "n": 3,
        "z": {"re": 1.0, "im": 2.0},
        "nan": None,
        "arr": [1.0, 2.0],
    }
