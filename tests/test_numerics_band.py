"""NaN is never printed as a result; bands are bounded (issue 9 item 5)."""

from __future__ import annotations

import math

import pytest


def test_circuit_band_of_sixty_decades_is_refused(run_cli):
    """Issue 9 regression: `circuit --band 1e-30Hz 1e30Hz` printed NaN and exited 0. Now one line
    naming the limit (12 decades, docs/reliability.md), exit 2. Common practice."""
    r = run_cli("circuit", "2*(1+1/(0.01*s))", "--band", "1e-30Hz", "1e30Hz")
    assert r.code == 2 and r.out == ""
    assert len(r.err.strip().splitlines()) == 1 and "12 decades" in r.err and "--band" in r.err


@pytest.mark.parametrize("band", [("1e15Hz", "1e20Hz"), ("1e-20Hz", "1e-15Hz")])
def test_circuit_band_far_from_the_corners_gives_finite_figures_or_is_refused(run_cli, band):
    """A narrow band far from the corners (where the old Monte Carlo arithmetic overflowed; the
    tolerance engine scales each frequency, so it no longer does): never a NaN on screen or in
    JSON. Either refused in one line naming --band and the figure, or finite figures with the
    Monte Carlo's 99th percentile inside the worst-case corners (an independent computation from
    the sensitivities; common practice: a percentile of draws inside the tolerance box cannot
    exceed its worst corner)."""
    r = run_cli("circuit", "2*(1+1/(0.01*s))", "--band", *band, "--json")
    assert "nan" not in r.out.lower() and "NaN" not in r.out and "Infinity" not in r.out
    if r.code == 2:
        assert "--band" in r.err and "not a finite number" in r.err
        assert len([line for line in r.err.strip().splitlines() if line.startswith("error")]) == 1
        return
    assert r.code == 0, r.err
    import json

    tol = json.loads(r.out)["errors"]["tolerance"]
    mc = tol["monte_carlo"]["figures"]["tolerances"]["max_gain_error_db"]
    assert 0.05 < mc <= tol["worst_case"]["spread"]["gain_db"] + 1e-3


def test_digital_band_width_limit(run_cli):
    """The same --band reader and limit for `digital` (common practice)."""
    r = run_cli("digital", "2*(1+1/(0.01*s))", "--fs", "1kHz", "--band", "1e-12Hz", "100Hz")
    assert r.code == 2 and "12 decades" in r.err


def test_case_band_width_limit(tmp_path):
    """A case file's criteria.band is held to the same limit, naming file:line and the key."""
    from convert.case import parse_case
    from convert.errors import InputError

    text = (
        '[source]\nexpression = "2*(1 + 1/(30*s))"\n[target.digital]\nfs = "100 Hz"\n'
        '[criteria]\nband = ["1e-30 Hz", "1 Hz"]\nmax_gain_error_db = 1\n'
    )
    with pytest.raises(InputError, match="decades") as info:
        parse_case(text, tmp_path / "wide.toml")
    assert "criteria.band" in str(info.value) and "wide.toml:6" in str(info.value)


def test_tables_never_show_nan():
    """A NaN figure reads "not computed" in every table (it read "−∞" before: NaN > 0 is False)."""
    from convert.report.tables import fixed, num

    assert fixed(math.nan, "dB") == "not computed" and num(math.nan) == "not computed"
    assert fixed(math.inf) == "∞" and num(-math.inf) == "−∞"
