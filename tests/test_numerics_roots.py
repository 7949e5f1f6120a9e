"""Repeated roots, integrators decided relative to the controller, and inputs that underflow or
overflow (issue 9 item 5). Reference: mpmath.polyroots at high precision (a general-purpose
arbitrary-precision library), on the same double-precision coefficients."""

from __future__ import annotations

import mpmath
import numpy as np
import pytest

from convert.controller import Controller, from_expression
from convert.polyroots import find_roots


def _mp_roots(coefficients, dps=30):
    """Every root of the polynomial with exactly these (double) coefficients, to ``dps`` digits
    (Durand-Kerner in mpmath, started from numpy's roots; it converges where the roots of the
    rounded coefficients are distinct, however close)."""
    init = [mpmath.mpc(complex(x)) for x in np.roots(coefficients)]
    with mpmath.workdps(dps):
        found = mpmath.polyroots(
            [mpmath.mpf(float(c)) for c in coefficients], maxsteps=400, extraprec=200, roots_init=init
        )
    return [complex(r) for r in found]


@pytest.mark.parametrize(
    "text, root, mult",
    [
        ("(s+0.3)^20", -0.3, 20),
        ("(s+1.1)^7*(s+3)", -1.1, 7),
        ("(s+0.002)^5", -0.002, 5),
        ("(s^2+0.2*s+0.37)^3", -0.1 + 0.6j, 3),
    ],
)
def test_repeated_root_against_mpmath(text, root, mult):
    """A repeated root whose power has rounded coefficients: the double-precision polynomial has a
    tight cluster of distinct roots, which mpmath.polyroots resolves at 30 digits. Ours: one root of
    that multiplicity whose centre is the cluster's mean within the stated accuracy, and the
    stated accuracy is far below the cluster's spread that numpy.roots shows."""
    c = from_expression(text)
    (g,) = [r for r in c.zero_roots() if abs(r.value - root) < 1e-6 * abs(root)]
    assert g.multiplicity == mult
    ref = [r for r in _mp_roots(c.num) if abs(r - root) < 0.5 * abs(root)]
    assert len(ref) == mult
    assert abs(g.value - complex(np.mean(ref))) <= max(g.error, 1e-15 * abs(root))
    assert g.error < 1e-12 * abs(root)
    assert len(c.zeros()) == len(c.num) - 1  # zeros() repeats the root: the degree is kept


def test_twentieth_power_of_s_plus_1_is_one_root():
    """Issue 9 regression: "(s+1)^20" listed twenty zeros between −0.73 and −1.40. Its coefficients
    are binomials, exact in double, so the exact answer is −1 twenty times (binomial theorem);
    checked at 50 digits with mpmath: every Taylor coefficient of p(−1 + w) below w^20 vanishes
    (repeated synthetic division by (s + 1), exact for these integers)."""
    c = from_expression("(s+1)^20")
    (g,) = c.zero_roots()
    assert g.multiplicity == 20 and abs(g.value + 1) <= g.error <= 1e-13
    with mpmath.workdps(50):
        q = [mpmath.mpf(v) for v in c.num]
        taylor = []
        for _ in range(21):
            out = [q[0]]
            for v in q[1:]:
                out.append(v - out[-1])  # synthetic division by (s + 1)
            taylor.append(out[-1])
            q = out[:-1]
    assert all(t == 0 for t in taylor[:20]) and taylor[20] == 1


def test_distinct_roots_keep_their_own_accuracy():
    """Wilkinson's polynomial (roots 1..20; J. H. Wilkinson, Rounding Errors in Algebraic Processes,
    1963, from memory): distinct roots stay distinct, and each stated accuracy covers the distance
    to mpmath.polyroots of the same double coefficients."""
    p = np.poly(np.arange(1, 21))
    found = find_roots(p)
    ref = _mp_roots(p)
    assert sum(r.multiplicity for r in found) == 20 and all(r.multiplicity == 1 for r in found)
    for r in found:
        nearest = min(ref, key=lambda x: abs(x - r.value))
        assert abs(nearest - r.value) <= 3 * r.error, (r, nearest)


def test_json_and_table_state_multiplicity_and_accuracy(run_cli):
    """The show command prints the multiplicity and the accuracy (issue 9 item 5); common practice."""
    import json

    r = run_cli("show", "(s+1)^20/(s+3)^2", "--json")
    data = json.loads(r.out)
    assert [(z["re"], z["multiplicity"]) for z in data["zero_roots"]] == [(pytest.approx(-1.0, abs=1e-12), 20)]
    assert data["pole_roots"][0]["multiplicity"] == 2 and data["pole_roots"][0]["accuracy"] < 1e-12
    text = run_cli("show", "(s+1)^20").out
    assert "-1.39" not in text and "20" in text and "accuracy" in text


def test_sixty_fourth_power_is_one_root():
    """ "(s+1)^64": coefficients up to C(64,32) ≈ 1.8e18 are rounded in double; one root of
    multiplicity 64 at −1 (the 64 roots of the rounded coefficients average −64/64 = −1 exactly:
    Vieta's formula, common practice)."""
    c = from_expression("(s+1)^64")
    (g,) = c.zero_roots()
    assert g.multiplicity == 64 and abs(g.value + 1) <= max(g.error, 1e-14)


# --------------------------------------------------------------------------- integrating
def test_tiny_pole_below_tiny_zero_is_not_integrating():
    """Issue 9 regression: "(s+1e-13)/(s+1e-14)" was called integrating (absolute threshold); its
    DC gain is 10 (num(0)/den(0), exact arithmetic)."""
    c = from_expression("(s+1e-13)/(s+1e-14)")
    assert c.integrator_count() == 0 and not c.is_integrating
    assert c.dc_gain() == pytest.approx(10.0, rel=1e-12)
    assert sorted(c.corner_frequencies_hz()["poles"]) == pytest.approx([1e-14 / (2 * np.pi)])


def test_show_does_not_call_it_integrating(run_cli):
    """Issue 9 regression, the exact input through the CLI."""
    import json

    data = json.loads(run_cli("show", "(s+1e-13)/(s+1e-14)", "--json").out)
    assert data["integrating"] is False and data["dc_gain"] == pytest.approx(10.0)
    text = run_cli("show", "(s+1e-13)/(s+1e-14)").out
    assert "integrator" not in text and "differentiator" not in text


def test_digital_pole_near_one_is_judged_relative_to_the_zero():
    """The digital side: (z − (1−1e-13))/(z − (1−1e-14)) at 1 kHz is not integrating; its DC gain
    is 1e-13/1e-14 = 10 up to the representation of 1 − 1e-14 in double (about 1 %)."""
    c = from_expression("(z-(1-1e-13))/(z-(1-1e-14))", fs_hz=1000.0)
    assert c.integrator_count() == 0
    assert c.dc_gain() == pytest.approx(10.0, rel=0.02)


@pytest.mark.parametrize(
    "text, fs",
    [
        ("(s+1)/s", None),
        ("(s+1)*(s+2)/(s^2*(s+5))", None),
        ("(z-0.5)/(z-1)", 100.0),
        ("(z-0.5)/((z-1)*(z-0.9))", 100.0),
    ],
)
def test_true_integrators_still_counted(text, fs):
    """Exact poles at s = 0 / z = 1 remain integrators (common practice)."""
    c = from_expression(text, fs_hz=fs)
    assert c.integrator_count() == text.count("s^2") * 2 + (text.count("/s") or text.count("(z-1)"))
    assert c.dc_gain() is None


def test_rounding_level_pole_at_one_is_an_integrator():
    """A digital PI computed in floating point: its pole at z = 1 off by one rounding unit is the
    integrator (common practice: a sum of coefficients cancels to the rounding level)."""
    c = Controller.digital([2.1, -1.9], [1.0, -(1.0 - 2.0**-52)], 1e-3)
    assert c.integrator_count() == 1


# --------------------------------------------------------------------------- under/overflow
@pytest.mark.parametrize("text", ["1e-400 + s", "s + 1e-330", "(s+1)/(1e-320*s+1)", "(1e-300*s+1)*(1e-300*s+1)"])
def test_underflowing_coefficient_is_refused(run_cli, text):
    """Issue 9 regression: "1e-400 + s" became s (the constant underflowed silently). A non-zero
    coefficient that is zero or subnormal in double is refused (IEEE 754 double: smallest normal
    2.2e-308; common practice)."""
    r = run_cli("show", text)
    assert r.code == 2 and "Traceback" not in r.err
    assert len(r.err.strip().splitlines()) == 1 and ("too small" in r.err or "too large" in r.err)


@pytest.mark.parametrize("text", ["1e400*s + 1", "(s+1e200)*(s+1e200)", "(1e-300*s + 1e10)/(1e-300*s+1)"])
def test_overflowing_coefficient_is_refused(run_cli, text):
    """A coefficient beyond about 1.8e308 — given, or made by normalising den to monic — is refused
    with one line (common practice)."""
    r = run_cli("show", text)
    assert r.code == 2 and "Traceback" not in r.err
    assert len(r.err.strip().splitlines()) == 1 and ("too large" in r.err or "overflow" in r.err)


def test_controller_refuses_subnormal_and_overflowing_coefficients():
    """The Controller itself (API path): subnormal coefficients and a monic normalisation that
    overflows are InputErrors (common practice)."""
    from convert.errors import InputError

    with pytest.raises(InputError, match="too small"):
        Controller.analog([1.0, 1e-310], [1.0, 1.0])
    with pytest.raises(InputError, match="too large"):
        Controller.analog([1e10, 1.0], [1e-300, 1.0])


@pytest.mark.parametrize("text", ["1e-400", "3e-320 Hz", "1e-310"])
def test_value_that_underflows_is_refused(text):
    """A written value that is non-zero but zero or subnormal in double is refused rather than
    silently read as 0 (IEEE 754 double, smallest normal 2.2e-308; common practice)."""
    from convert.errors import InputError
    from convert.values import parse_value

    with pytest.raises(InputError, match="too small"):
        parse_value(text, "hz" if "Hz" in text else "number", field="x")
    assert parse_value("0", "number") == 0.0 and parse_value("2.3e-308", "number") == 2.3e-308


def test_deflation_and_trimming_are_numpys_arithmetic():
    """Reference: numpy.polydiv (its quotient by x − point) and numpy.trim_zeros, bit for bit, on
    random coefficients (exact zeros at both ends included) and the points the controller divides
    out (0, 1, −1) plus one that is not special."""
    from convert.polyroots import _trim_back, _trim_front, _value_at, deflate

    rng = np.random.default_rng(7)
    for n in range(2, 12):
        for _ in range(20):
            p = rng.normal(size=n) * 10.0 ** rng.integers(-8, 8, size=n)
            for point in (0.0, 1.0, -1.0, 0.37):
                q, _ = np.polydiv(p, [1.0, -point])
                np.testing.assert_array_equal(deflate(p, point), q)
                assert _value_at(p, point) == np.polyval(p, point)
            padded = np.concatenate([np.zeros(rng.integers(0, 3)), p, np.zeros(rng.integers(0, 3))])
            np.testing.assert_array_equal(_trim_front(padded), np.trim_zeros(padded, "f"))
            np.testing.assert_array_equal(_trim_back(padded), np.trim_zeros(padded, "b"))
    assert _trim_front(np.zeros(3)).size == 0 and _trim_back(np.zeros(3)).size == 0
