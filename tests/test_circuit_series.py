"""IEC 60063 series and log-space rounding, checked against the `eseries` package (IEC 60063
tables). eseries rounds at the linear midpoint; we round at the geometric midpoint, so the
checks compare neighbours exactly and the nearest value only where the two rules agree, and
pin the values between the two midpoints separately."""

from __future__ import annotations

import math

import eseries
import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from convert.circuit import series as es
from convert.errors import InputError

NAMES = ["E3", "E6", "E12", "E24", "E48", "E96", "E192"]
FUZZ = int(__import__("os").environ.get("LOOPSHIFT_FUZZ_EXAMPLES", "50"))


@pytest.mark.parametrize("name", NAMES)
def test_tables_match_eseries(name):
    """Source: eseries package, IEC 60063 tables (erange over one decade)."""
    ref = np.array(list(eseries.erange(getattr(eseries, name), 1.0, 9.999)))
    assert np.allclose(es.get_series(name), ref, rtol=0, atol=1e-12)


@pytest.mark.parametrize("name", NAMES)
def test_values_in_range_match_eseries(name):
    """Source: eseries erange from 100 pF to 10 µF (closed range)."""
    ref = np.array(list(eseries.erange(getattr(eseries, name), 100e-12, 10e-6)))
    ours = es.values_in_range(name, 100e-12, 10e-6)
    assert ours.size == ref.size and np.allclose(ours, ref, rtol=1e-12)


@settings(max_examples=FUZZ, deadline=None)
@given(x=st.floats(min_value=1.0, max_value=1e7), name=st.sampled_from(NAMES))
def test_neighbours_match_eseries(x, name):
    """Source: eseries find_less_than_or_equal / find_greater_than_or_equal."""
    series_key = getattr(eseries, name)
    near = [eseries.find_less_than_or_equal(series_key, x), eseries.find_greater_than_or_equal(series_key, x)]
    assume(all(v == x or abs(x / v - 1) > 1e-12 for v in near))  # ours snaps float noise (1e-12) to the value
    lo, hi = es.neighbours(x, name)
    assert math.isclose(float(lo), eseries.find_less_than_or_equal(series_key, x), rel_tol=1e-12)
    assert math.isclose(float(hi), eseries.find_greater_than_or_equal(series_key, x), rel_tol=1e-12)


@settings(max_examples=FUZZ, deadline=None)
@given(x=st.floats(min_value=1.0, max_value=1e7), name=st.sampled_from(NAMES))
def test_nearest_agrees_with_eseries_outside_the_midpoint_gap(x, name):
    """Source: eseries find_nearest (linear midpoint). Outside the gap between the geometric and
    the arithmetic midpoint both rules pick the same value; inside it ours picks by log distance."""
    lo, hi = (float(v) for v in es.neighbours(x, name))
    ours = float(es.round_to_series(x, name))
    if lo == hi:
        assert ours == lo
        return
    geo, lin = math.sqrt(lo * hi), (lo + hi) / 2
    if x < geo * (1 - 1e-12) or x > lin * (1 + 1e-12):
        assert math.isclose(ours, eseries.find_nearest(getattr(eseries, name), x), rel_tol=1e-12)
    else:
        assert ours == (hi if x > geo else lo)


def test_log_midpoint_rule_pinned():
    """Common practice (IEC 60063 is geometric): between 4.7k and 5.6k the geometric midpoint is
    5.1303k; 5.14k is above it (-> 5.6k) though below the linear midpoint 5.15k (eseries -> 4.7k)."""
    assert float(es.round_to_series(5140.0, "E12")) == 5600.0
    assert eseries.find_nearest(eseries.E12, 5140.0) == 4700.0
    assert float(es.round_to_series(5120.0, "E12")) == 4700.0


def test_directions_and_exact_values():
    assert float(es.round_to_series(4800, "E12", "down")) == 4700
    assert float(es.round_to_series(4800, "E12", "up")) == 5600
    assert float(es.round_to_series(4700, "E12", "up")) == 4700
    assert es.in_series(4.7e-9, "E12") and not es.in_series(4.8e-9, "E12")
    assert float(es.round_to_series(1e-7, "E12")) == 1e-7  # exact float, no 1.0000000000000001e-07


@pytest.mark.parametrize("bad", [0.0, -1.0, float("nan"), float("inf")])
def test_bad_values_refused(bad):
    with pytest.raises(InputError, match="positive finite"):
        es.round_to_series(bad, "E12")


def test_unknown_series_and_bad_range():
    with pytest.raises(InputError, match="unknown E-series"):
        es.get_series("E13")
    with pytest.raises(InputError, match="above its maximum"):
        es.values_in_range("E12", 1e6, 1e3)
