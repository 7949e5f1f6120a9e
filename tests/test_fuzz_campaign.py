"""The fuzz campaign of issue 9 item 6: hypothesis over values, expressions, case files and
netlists. Every input either reads or is refused with the package's one-line error, short
(``MAX_ERROR_CHARS``), never another exception; what reads is checked where a reference exists.

Default run: ``LOOPSHIFT_FUZZ_EXAMPLES`` (50) examples per property. The opt-in campaign
(docs/reliability.md) runs 10,000 each:

    LOOPSHIFT_FUZZ_EXAMPLES=10000 python -m pytest -q -p no:cacheprovider \\
        tests/test_fuzz_campaign.py tests/test_netlist_fuzz.py --hypothesis-show-statistics
"""

from __future__ import annotations

import math
import os
import pathlib
import re

from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from convert.errors import MAX_ERROR_CHARS, InputError, LoopshiftError

EXAMPLES = int(os.environ.get("LOOPSHIFT_FUZZ_EXAMPLES", "50"))
FUZZ = settings(max_examples=EXAMPLES, deadline=None, suppress_health_check=list(HealthCheck))
ROOT = pathlib.Path(__file__).resolve().parents[1]
CASES = sorted((ROOT / "cases").glob("*.toml"))
NETLISTS = sorted((ROOT / "tests" / "netlists").glob("*.cir")) + sorted((ROOT / "cases" / "cards").glob("*.cir"))


def _refused_well(exc: Exception) -> None:
    assert isinstance(exc, LoopshiftError), f"{type(exc).__name__}: {exc}"
    line = str(exc)
    assert "\n" not in line and len(line) <= MAX_ERROR_CHARS + 60, line[:200]


# ----------------------------------------------------------------------------- values
_VALUE_PIECES = st.sampled_from(
    [
        "0",
        "1",
        "2.2",
        ".5",
        "47",
        "e",
        "E",
        "-",
        "+",
        "3",
        "400",
        "401",
        "9" * 30,
        " ",
        "k",
        "K",
        "M",
        "m",
        "u",
        "µ",
        "n",
        "p",
        "f",
        "G",
        "T",
        "meg",
        "Meg",
        "mil",
        "Hz",
        "hz",
        "s",
        "ms",
        "min",
        "h",
        "F",
        "H",
        "V",
        "%",
        "ohm",
        "Ω",
        "4k7",
        "nan",
        "inf",
        "sample",
        "samples",
        ".",
        "e-",
        "1e308",
        "1e-320",
        "x",
        "\t",
        "/",
    ]
)
_KINDS = ["ohm", "farad", "henry", "hz", "second", "volt", "percent", "ratio", "number"]


@FUZZ
@given(st.lists(_VALUE_PIECES, min_size=1, max_size=8).map("".join), st.sampled_from(_KINDS))
def test_values_read_or_refuse(text, kind):
    """A value reads as a finite float, or is refused in one short line (both dialects and
    delays). A plain decimal number without a unit reads as Python's float does (reference:
    the float() built-in, IEEE 754 round to nearest)."""
    from convert.values import parse_delay, parse_spice_number, parse_value

    try:
        v = parse_value(text, kind, field="fuzz")
        assert math.isfinite(v)
        if re.fullmatch(r"\s*[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?\s*", text) and kind in ("number", "ratio"):
            assert v == float(text)
    except InputError as exc:
        _refused_well(exc)
    try:
        assert math.isfinite(parse_spice_number(text, where="fuzz.cir:1"))
    except InputError as exc:
        _refused_well(exc)
    try:
        parse_delay(text, field="delay")
    except InputError as exc:
        _refused_well(exc)


@FUZZ
@given(st.text(max_size=300))
def test_values_random_text(text):
    from convert.values import parse_spice_number, parse_value

    for fn in (lambda: parse_value(text, "hz", field="fuzz"), lambda: parse_spice_number(text)):
        try:
            assert math.isfinite(fn())
        except InputError as exc:
            _refused_well(exc)


# ----------------------------------------------------------------------------- expressions
_EXPR_PIECES = st.sampled_from(
    [
        "s",
        "z",
        "z^-1",
        "(",
        ")",
        "((",
        "))",
        "+",
        "-",
        "*",
        "/",
        "^",
        "**",
        "2",
        "0",
        "0.5",
        "1e3",
        "1e-400",
        "1e401",
        "64",
        "65",
        "(s+1)",
        "(s+1)^64",
        "^64",
        "^-2",
        " ",
        "3 4",
        "2s",
        "s(",
        "ss",
        "x",
        "µ",
        "1/",
        "/0",
        ".",
        "e",
        "9" * 40,
        "--",
        "+-",
    ]
)


@FUZZ
@given(st.lists(_EXPR_PIECES, min_size=1, max_size=30).map("".join))
def test_expressions_read_or_refuse(text):
    """An expression reads into exact num/den (the denominator monic and non-zero; no common root
    left: checked by the exact remainder) or is refused in one short line."""
    from convert.expr import _pgcd, parse_rational

    try:
        parsed = parse_rational(text)
    except InputError as exc:
        _refused_well(exc)
        return
    assert parsed.den and parsed.den[0] == 1 and any(parsed.num)
    num = tuple(reversed(parsed.num))
    den = tuple(reversed(parsed.den))
    assert len(_pgcd(num, den)) == 1  # reduced: the numerator and denominator share no factor


@FUZZ
@given(st.text(max_size=300))
def test_expressions_random_text(text):
    from convert.expr import parse_rational

    try:
        parse_rational(text)
    except InputError as exc:
        _refused_well(exc)


@FUZZ
@given(
    st.lists(st.tuples(st.integers(-9, 9), st.integers(-9, 9)).filter(lambda t: t != (0, 0)), min_size=1, max_size=6),
    st.lists(st.integers(-9, 9).filter(bool), min_size=1, max_size=6),
)
def test_expressions_products_match_numpy(factors, roots):
    """Exact products of first-order factors agree with numpy.polymul (reference library)."""
    import numpy as np

    from convert.expr import parse_rational

    num_text = "*".join(f"({a}*s+({b}))" for a, b in factors)
    den_text = "*".join(f"(s+({r}))" for r in roots)
    try:
        parsed = parse_rational(f"({num_text})/({den_text})")
    except InputError as exc:
        _refused_well(exc)
        return
    want_num = np.array([1.0])
    for a, b in factors:
        want_num = np.polymul(want_num, [a, b])
    want_den = np.array([1.0])
    for r in roots:
        want_den = np.polymul(want_den, [1, r])
    # compare num/den after cancelling: cross-multiplied polynomials agree exactly
    got = np.polymul([float(c) for c in parsed.num], want_den)
    want = np.polymul(want_num, [float(c) for c in parsed.den])
    assume(np.max(np.abs(want)) < 1e12)
    np.testing.assert_allclose(np.trim_zeros(got, "f"), np.trim_zeros(want, "f"), rtol=1e-9, atol=1e-9)


# ----------------------------------------------------------------------------- case files
_TOML_VALUES = st.one_of(
    st.sampled_from(
        [
            '"1 kHz"',
            '"2.2 nF"',
            '"30 s"',
            '"tustin"',
            '"zoh"',
            '"E24"',
            '"pi-rc-feedback"',
            '"(s+1)/s"',
            '"1 sample"',
            '["1 Hz", "2 Hz"]',
            '["tustin", "tustin"]',
            "[0.1, -0.09]",
            "[1, -1]",
            "2",
            "0",
            "-1",
            "1e999",
            "nan",
            "inf",
            "true",
            '"x"',
            '""',
            '{ kc = 2, ti = "30 s" }',
            "[]",
            "{}",
            '"[/old] [rev 2]"',
            '"<!-- **Verdict: PASS**"',
            '"1e999999999"',
            '"1e-300 Hz"',
        ]
    ),
    st.text(max_size=20).map(lambda t: '"' + t.replace("\\", "\\\\").replace('"', '\\"') + '"'),
)
_TABLES = {
    "case": ["title", "description"],
    "source": ["expression"],
    "source.pid": ["kc", "ti", "td", "n", "kp"],
    "source.digital": ["b", "a", "fs", "method"],
    "target.digital": ["fs", "methods", "prewarp", "delay", "delay_samples", "output_limits"],
    "target.circuit": ["topology", "resistors", "capacitors", "draws", "seed"],
    "plant": ["model", "dead_time"],
    "criteria": ["band", "max_gain_error_db", "max_phase_error_deg"],
    "signals": ["setpoint_step", "duration"],
    "bogus": ["key"],
}


@st.composite
def _case_text(draw):
    out = []
    for table in draw(st.lists(st.sampled_from(sorted(_TABLES)), min_size=1, max_size=6, unique=True)):
        out.append(f"[{table}]")
        for key in draw(st.lists(st.sampled_from(_TABLES[table]), max_size=4, unique=True)):
            out.append(f"{key} = {draw(_TOML_VALUES)}")
    return "\n".join(out) + "\n"


def _read_case(text: str) -> None:
    from convert.case import parse_case, source_controller

    try:
        case = parse_case(text, ROOT / "cases" / "fuzz.toml")
        source_controller(case)
    except LoopshiftError as exc:
        _refused_well(exc)


@FUZZ
@given(_case_text())
def test_generated_case_files_read_or_refuse(text):
    """Case files assembled from the schema's tables and keys with plausible and hostile values."""
    _read_case(text)


@FUZZ
@given(st.sampled_from(range(len(CASES))), st.data())
def test_mutated_demo_case_files_read_or_refuse(index, data):
    """A demo case with lines deleted, duplicated or a value replaced."""
    lines = CASES[index].read_text(encoding="utf-8").splitlines()
    for _ in range(data.draw(st.integers(1, 3))):
        i = data.draw(st.integers(0, len(lines) - 1))
        action = data.draw(st.sampled_from(["delete", "duplicate", "value", "truncate"]))
        if action == "delete":
            del lines[i]
        elif action == "duplicate":
            lines.insert(i, lines[i])
        elif action == "truncate":
            lines[i] = lines[i][: data.draw(st.integers(0, len(lines[i])))]
        elif "=" in lines[i]:
            lines[i] = lines[i].split("=", 1)[0] + "= " + data.draw(_TOML_VALUES)
        if not lines:
            break
    _read_case("\n".join(lines) + "\n")


@FUZZ
@given(st.text(max_size=400))
def test_random_text_as_a_case_file(text):
    _read_case(text)


# ----------------------------------------------------------------------------- netlists
@FUZZ
@given(st.sampled_from(range(len(NETLISTS))), st.data())
def test_netlist_values_replaced_read_or_refuse(index, data):
    """A card's netlist with values replaced by hostile ones (huge exponents, deep .param
    expressions, markup in the title): reading and analysis raise only the one-line error.
    (tests/test_netlist_fuzz.py mutates the lines themselves.)"""
    from tests.test_netlist_fuzz import read_and_analyze

    lines = NETLISTS[index].read_text(encoding="utf-8").splitlines()
    hostile = st.sampled_from(
        [
            "1e999999999",
            "1" + "0" * 500,
            "{" + "(" * 150 + "1" + ")" * 150 + "}",
            "{" + "^".join(["2"] * 300) + "}",
            "{1/0}",
            "1e-320",
            "-1k",
            "0",
            "{a}",
            "4k7",
            "[/old]",
            "[rev 2]",
        ]
    )
    for _ in range(data.draw(st.integers(1, 3))):
        i = data.draw(st.integers(0, len(lines) - 1))
        words = lines[i].split() or [""]
        k = data.draw(st.integers(0, len(words) - 1))
        words[k] = data.draw(hostile)
        lines[i] = " ".join(words)
    try:
        read_and_analyze("\n".join(lines) + "\n")
    except LoopshiftError as exc:
        _refused_well(exc)
