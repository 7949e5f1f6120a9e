"""Error-budget rows: what each row measures, checked against closed forms."""

from __future__ import annotations

import numpy as np
import pytest

from convert.compare import budget as bud
from convert.compare.frequency import hold_and_delay_factor, log_grid
from convert.controller import from_expression


def test_hold_and_delay_row_matches_the_closed_form():
    """Common practice: a ZOH plus a computation delay t_d add a phase lag of ω(T/2 + t_d) and a
    gain of sinc(fT); over a band the largest phase error is at its top."""
    c = from_expression("(s + 2)/(s + 20)")
    f = log_grid(0.01, 5.0, 50)
    t, d = 1e-2, 3e-3
    ref = c.frequency_response(f)
    row = bud.error_row("hold_and_delay", f, ref, ref * hold_and_delay_factor(f, t, d), note="x")
    assert row.max_phase_error_deg == pytest.approx(np.degrees(2 * np.pi * 5.0 * (t / 2 + d)), rel=1e-9)
    assert row.max_gain_error_db == pytest.approx(-20 * np.log10(np.sinc(5.0 * t)), rel=1e-9)
    assert row.max_phase_error_at_hz == pytest.approx(5.0)


def test_identical_responses_give_zero_row():
    f = log_grid(0.1, 10, 20)
    r = from_expression("1/(s+1)").frequency_response(f)
    row = bud.error_row("discretization", f, r, r, note="x")
    assert row.max_gain_error_db < 1e-12 and row.max_phase_error_deg < 1e-12 and row.applicable


def test_monte_carlo_row_reports_the_percentile_of_per_draw_maxima():
    """numpy.percentile is the reference for the percentile of the per-draw maxima."""
    f = log_grid(0.1, 10, 20)
    ref = np.ones(f.size, dtype=complex)
    gains = np.linspace(0.0, 1.0, 101)  # dB per draw
    cand = (10 ** (gains / 20))[:, None] * ref[None, :]
    row = bud.error_row("tolerances", f, ref, cand, note="x", percentile=99.0)
    assert row.max_gain_error_db == pytest.approx(np.percentile(gains, 99.0), rel=1e-9)
    assert row.percentile == 99.0


def test_assemble_keeps_every_row_and_marks_the_rest_not_applicable():
    rows = {"total": bud.not_applicable("total", "demo")}
    out = bud.assemble(rows, bud.DIGITAL_ROWS, "digital")
    assert [r.key for r in out] == [k for k, _ in bud.ROWS]
    by = {r.key: r for r in out}
    assert not by["series_rounding"].applicable
    assert "digital target" in by["series_rounding"].note
    assert "not switched on" in by["word_format"].note


def test_monte_carlo_row_says_how_many_draws_lack_a_margin():
    """A draw whose loop has no gain margin (no phase crossing) cannot enter that percentile; the
    row says how many were left out, and the percentile is numpy's over the draws that have it."""
    f = log_grid(0.1, 10, 20)
    ref = np.ones(f.size, dtype=complex)
    gains = np.linspace(0.0, 1.0, 101)
    cand = (10 ** (gains / 20))[:, None] * ref[None, :]
    gm = np.where(np.arange(101) % 10 == 0, np.nan, gains * 2)

    def margins(r):
        n = r.shape[0]
        if n == 1:
            return {"phase_margin_deg": np.zeros(1), "gain_margin_db": np.zeros(1), "sensitivity_peak_db": np.zeros(1)}
        return {"phase_margin_deg": gains.copy(), "gain_margin_db": gm, "sensitivity_peak_db": gains.copy()}

    spec = bud.LoopSpec(f, margins)
    row = bud.error_row(
        "tolerances", f, ref, cand, note="x", percentile=99.0, loop=spec, loop_reference=ref, loop_candidate=cand
    )
    assert "11 draws have no gain margin" in row.note
    assert "phase margin" not in row.note
    assert abs(row.delta_gain_margin_db) == pytest.approx(np.percentile(gm[np.isfinite(gm)], 99), abs=0.011)
