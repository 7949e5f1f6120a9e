"""Firmware analyses that said "ok" or PASS for code that does not do what the design does (the
second reviewer's findings, case files in tests/cases/review2). Each check recomputes the claim
outside the tool: integer arithmetic written here from the stored words, numpy.roots, IEEE 754
spacing."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from convert.case import load_case
from convert.compare.evaluate import evaluate_case
from convert.controller import from_expression
from convert.digital import discretize
from convert.digital.quantized import DEAD_BAND_LIMIT, analyze
from convert.compare.frequency import log_grid

CASES = Path(__file__).parent / "cases" / "review2"


def _judged(res, key):
    return {j.realization: j for j in res.verdict.judgements if j.criterion == key}


def _q15_sections(expr, fs, rng, level):
    real = discretize(from_expression(expr), fs, "tustin")
    band = log_grid(1e-3, 0.45 * fs, 20)
    return analyze(real.roots, "sections", "q15", band, input_range=rng, output_level=level)


def test_lag_pole_dead_band_fails_and_holds_in_plain_integer_arithmetic():
    """10(2s + 1)/(20s + 1) by Tustin at 3 kHz in Q15 sections: the stored denominator words
    sum to d = 1 (the pole 1 − 1/60000 rounds next to z = 1), so any constant output word y with
    |d·y| ≤ 2^(shift−1) is kept with zero input. Recomputed here: a plain integer recursion
    y ← (−Σ a_k·y + 2^(shift−1)) >> shift from y = 0.4 of full scale stays there for 10,000
    samples (the design decays to e^(−0.5) of it). The analysis fails on the dead band and on the
    response (DC gain lost), never "ok"."""
    x = _q15_sections("10*(2s+1)/(20s+1)", 3000.0, 1.0, 10.0)
    lag = x.summary()["sections_int"][-1]
    a, shift = [int(v) for v in lag["a"]], int(lag["shift"])
    assert abs(sum(a)) <= 2  # 2^shift + a1: the stored 1 − p
    y = int(0.4 * 2**15)
    for _ in range(10_000):
        y = (-sum(ak * y for ak in a[1:]) + (1 << (shift - 1))) >> shift
    assert y == int(0.4 * 2**15)
    assert not x.ok and x.dead_band > DEAD_BAND_LIMIT
    assert any(f.startswith("dead band:") for f in x.failures)
    assert any(f.startswith("response:") for f in x.failures)


def test_lead_lag_whose_rounded_zero_lands_on_one_fails_on_its_response():
    """5(0.02s + 1)(0.5s + 1)/((0.002s + 1)(5s + 1)) at 5 kHz in Q15 sections: the rounded
    numerator words of the slow section sum to 0, a zero exactly at z = 1 (numpy.roots), so the
    stored controller has no DC gain where the design has 5. The analysis fails on the response."""
    x = _q15_sections("5*(0.02s+1)*(0.5s+1)/((0.002s+1)*(5s+1))", 5000.0, 2.0, 10.0)
    sums = [sum(int(v) for v in s["b"]) for s in x.summary()["sections_int"]]
    assert 0 in sums
    b = next(s["b"] for s in x.summary()["sections_int"] if sum(int(v) for v in s["b"]) == 0)
    assert np.min(np.abs(np.roots([float(v) for v in b]) - 1)) < 1e-9
    assert not x.ok and any(f.startswith("response:") for f in x.failures)


def test_lead_lag_report_fails_and_writes_no_code(tmp_path):
    """The reviewer's report case: the verdict FAILS on the word format's own check, the lost
    crossover is an unbounded phase-margin change (the source loop has one, the Q15 loop none),
    and no code is handed out for the failing realization."""
    res = evaluate_case(load_case(CASES / "ll_q15.toml"))
    assert res.verdict.overall == "fail"
    (resp,) = _judged(res, "firmware_response").values()
    assert resp.status == "fail"
    (pm,) = _judged(res, "max_phase_margin_change_deg").values()
    assert pm.status == "fail" and pm.note.startswith("unbounded")
    r = res.realizations[0]
    assert not r.details.get("code_files")


def test_float32_stall_undecided_without_an_output_level_and_decided_with_one(tmp_path):
    """PI kc = 4, ti = 600 s at 100 Hz in float32 direct form I: the integral's increment per
    sample is kc·T/ti·e, and float32 keeps it only above half a spacing of the held output (IEEE
    754 round to nearest). At U = 100: e = spacing(100)/2 / (4·0.01/600) = 0.0572 (numpy.float32),
    above the stated resolution 0.01, so the stall check fails; with no output level the figure
    would rest on a level nobody chose, so the verdict is UNCHECKED, not PASS."""
    res = evaluate_case(load_case(CASES / "oven_f32.toml"))
    assert res.verdict.overall == "unchecked"
    (st,) = _judged(res, "firmware_stall").values()
    assert st.status == "skipped" and "output limits" in st.note
    text = (
        (CASES / "oven_f32.toml")
        .read_text()
        .replace("input_resolution = 0.01", "input_resolution = 0.01\noutput_limits = [0, 100]")
    )
    (tmp_path / "o.toml").write_text(text)
    res = evaluate_case(load_case(tmp_path / "o.toml"))
    (st,) = _judged(res, "firmware_stall").values()
    want = float(np.spacing(np.float32(100.0))) / 2 / (4 * 0.01 / 600)
    assert st.status == "fail" and st.value == pytest.approx(want, rel=0.1)
    assert res.verdict.overall == "fail"
