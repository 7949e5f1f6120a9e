"""The transfer-function grammar (convert.expr) and controllers read from expressions."""

from __future__ import annotations

import os
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from convert.controller import from_expression
from convert.errors import InputError
from convert.expr import format_polynomial, parse_rational

EXAMPLES = int(os.environ.get("LOOPSHIFT_FUZZ_EXAMPLES", "50"))

fractions = st.fractions(min_value=-1000, max_value=1000, max_denominator=1000)
polys = st.lists(fractions, min_size=1, max_size=7).filter(lambda c: any(c))


def _trim(coefs):
    coefs = list(coefs)
    while coefs and coefs[0] == 0:
        coefs.pop(0)
    return tuple(coefs)


def _pmul(a, b):
    out = [Fraction(0)] * (len(a) + len(b) - 1)
    for i, x in enumerate(a):
        for j, y in enumerate(b):
            out[i + j] += x * y
    return _trim(out)


@given(polys, st.sampled_from(["s", "z"]))
@settings(max_examples=EXAMPLES, deadline=None)
def test_polynomial_printed_and_parsed_back_exactly(coefs, var):
    """A random polynomial written by format_polynomial reads back to the same exact
    coefficients (property test, exact rational arithmetic)."""
    text = format_polynomial(coefs, var)
    parsed = parse_rational(text)
    assert parsed.den == (1,)
    assert parsed.num == _trim(coefs)
    if len(_trim(coefs)) > 1:
        assert parsed.variable == var


@given(polys, polys)
@settings(max_examples=EXAMPLES, deadline=None)
def test_quotient_parsed_back_exactly(num, den):
    """(num)/(den) reads back to a reduced fraction equal to num/den: parsed.num·den ==
    parsed.den·num exactly (property test)."""
    text = f"({format_polynomial(num)}) / ({format_polynomial(den)})"
    parsed = parse_rational(text)
    assert parsed.den[0] == 1
    assert _pmul(parsed.num, _trim(den)) == _pmul(parsed.den, _trim(num))


@given(
    st.lists(
        st.floats(min_value=-1e6, max_value=1e6, allow_nan=False, allow_infinity=False, allow_subnormal=False),
        min_size=1,
        max_size=6,
    ).filter(lambda c: c[0] != 0)
)
@settings(max_examples=EXAMPLES, deadline=None)
def test_float_coefficients_survive_repr(coefs):
    """Floats written with repr (digits=None) come back as the identical floats (property test).
    Subnormal floats are refused on reading (issue 9; tests/test_numerics_roots.py), so not drawn."""
    text = format_polynomial(coefs, "s", digits=None)
    controller = from_expression(text)
    expected = [c for c in coefs]
    while expected and expected[0] == 0:
        expected.pop(0)
    assert controller.num == tuple(expected)


@pytest.mark.parametrize(
    "text, num, den",
    [
        ("0.02s", (Fraction(1, 50), 0), (1,)),
        ("2(s+1)", (2, 2), (1,)),
        ("s(s+1)", (1, 1, 0), (1,)),
        ("2*(1 + 1/(30*s))", (2, Fraction(1, 15)), (1, 0)),
        ("(s+1)/(s^2+3s+2)", (1,), (1, 2)),
        ("1e-3 s + 2.5E2", (Fraction(1, 1000), 250), (1,)),
        ("-s^2", (-1, 0, 0), (1,)),
        ("s**2 / 4", (Fraction(1, 4), 0, 0), (1,)),
        ("(s+1)^-1", (1,), (1, 1)),
        ("2/-s", (-2,), (1, 0)),
        ("10^3", (1000,), (1,)),
        ("(0.2 - 0.18 z^-1)/(1 - z^-1)", (Fraction(1, 5), Fraction(-9, 50)), (1, -1)),
    ],
)
def test_worked_examples(text, num, den):
    """Hand-expanded algebra (common practice): each text's exact reduced coefficients."""
    parsed = parse_rational(text)
    assert parsed.num == tuple(Fraction(x) for x in num)
    assert parsed.den == tuple(Fraction(x) for x in den)


def test_cancellation_is_reported():
    """(s+1)/((s+1)(s+2)) cancels the common factor s+1 exactly (common practice)."""
    parsed = parse_rational("(s+1)/((s+1)*(s+2))")
    assert parsed.cancelled == (1, 1)
    assert parsed.den == (1, 2)


def test_z_inverse_matches_scipy_freqz():
    """An expression in z^-1 means the firmware b/a convention: its response equals
    scipy.signal.freqz(b, a) (reference library)."""
    from scipy.signal import freqz

    fs = 100.0
    b, a = [0.2, -0.18, 0.01], [1.0, -1.2, 0.3]
    c = from_expression("(0.2 - 0.18 z^-1 + 0.01 z^-2)/(1 - 1.2 z^-1 + 0.3 z^-2)", fs_hz=fs)
    f = np.linspace(0.1, 49.0, 20)
    _, h = freqz(b, a, worN=f, fs=fs)
    np.testing.assert_allclose(c.frequency_response(f), h, rtol=1e-12)
    np.testing.assert_allclose(c.b, b, rtol=1e-15)
    np.testing.assert_allclose(c.a, a, rtol=1e-15)


@pytest.mark.parametrize(
    "text, column, fragment",
    [
        ("2*(s+1", 7, "expected ')'"),
        ("s +* 2", 4, "found '*'"),
        ("2 $ s", 3, "unexpected character"),
        ("x+1", 1, "unknown name 'x'"),
        ("1/(s-s)", 2, "division by zero"),
        ("1/0", 2, "division by zero"),
        ("s + z", 5, "not both"),
        ("0", 1, "identically zero"),
        ("s^1.5", 3, "whole-number power"),
        ("3 4", 3, "expected an operator"),
        ("", 1, "found nothing"),
        ("ss+1", 1, "unknown name 'ss'"),
        ("(s+1))", 6, "expected an operator"),
        ("0^-1", 2, "zero raised"),
        ("s^99", 3, "too large"),
        ("1e5000*s", 1, "out of range"),
    ],
)
def test_errors_point_at_the_column(text, column, fragment):
    """Every malformed expression is one line naming the column (common practice)."""
    with pytest.raises(InputError) as info:
        parse_rational(text)
    line = str(info.value)
    assert "\n" not in line
    assert line.startswith(f"expression column {column}:")
    assert fragment in line


def test_z_needs_a_sample_rate():
    """A z expression without --fs is refused (common practice: the sample period matters)."""
    with pytest.raises(InputError, match="sample rate"):
        from_expression("1/(1 - z^-1)")


def test_float_overflow_is_an_input_error():
    """Coefficients beyond the float range are refused, not turned into inf (common practice)."""
    with pytest.raises(InputError, match="too large"):
        from_expression("1e300*1e300*s + 1")
