"""The verdict: per criterion, skipped without a plant, overall fail on any failure."""

from __future__ import annotations

from convert.compare.verdict import judge


def test_pass_fail_and_not_set():
    v = judge({"max_gain_error_db": 1.0, "max_phase_error_deg": 5.0, "max_step_deviation": None},
              {"a": {"max_gain_error_db": 0.4, "max_phase_error_deg": 6.0, "max_step_deviation": 0.5}}, has_plant=True)
    status = {j.criterion: j.status for j in v.judgements}
    assert status["max_gain_error_db"] == "pass"
    assert status["max_phase_error_deg"] == "fail"
    assert status["max_step_deviation"] == "not set"
    assert v.overall == "fail"
    assert [j.value for j in v.failures] == [6.0]


def test_limit_is_inclusive_and_sign_is_ignored():
    v = judge({"max_phase_margin_change_deg": 3.0}, {"a": {"max_phase_margin_change_deg": -3.0}}, has_plant=True)
    assert v.overall == "pass"


def test_loop_criteria_skipped_without_plant():
    v = judge({"max_phase_margin_change_deg": 3.0, "max_gain_error_db": 1.0},
              {"a": {"max_gain_error_db": 0.1}}, has_plant=False)
    status = {j.criterion: j.status for j in v.judgements}
    assert status["max_phase_margin_change_deg"] == "skipped"
    assert v.overall == "pass" and v.skipped


def test_every_realization_must_pass():
    v = judge({"max_gain_error_db": 1.0}, {"a": {"max_gain_error_db": 0.1}, "b": {"max_gain_error_db": 2.0}},
              has_plant=False)
    assert v.overall == "fail" and v.failures[0].realization == "b"
