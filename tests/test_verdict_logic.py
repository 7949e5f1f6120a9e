"""The verdict: per criterion, skipped without a plant, overall fail on any failure."""

from __future__ import annotations

from convert.compare.verdict import judge


def test_pass_fail_and_not_set():
    v = judge(
        {"max_gain_error_db": 1.0, "max_phase_error_deg": 5.0, "max_step_deviation": None},
        {"a": {"max_gain_error_db": 0.4, "max_phase_error_deg": 6.0, "max_step_deviation": 0.5}},
        has_plant=True,
    )
    status = {j.criterion: j.status for j in v.judgements}
    assert status["max_gain_error_db"] == "pass"
    assert status["max_phase_error_deg"] == "fail"
    assert status["max_step_deviation"] == "not set"
    assert v.overall == "fail"
    assert [j.value for j in v.failures] == [6.0]


def test_limit_is_inclusive_and_sign_is_ignored():
    v = judge({"max_phase_margin_change_deg": 3.0}, {"a": {"max_phase_margin_change_deg": -3.0}}, has_plant=True)
    assert v.overall == "pass"


def test_loop_criteria_skipped_without_plant_keep_the_verdict_from_passing():
    """A loop criterion the case sets, with no plant to check it on, is skipped and listed; the
    verdict is UNCHECKED, not PASS (common practice: a sign-off covers what was asked for; before,
    the other criteria passing made it a PASS). A criterion that is not set changes nothing."""
    v = judge(
        {"max_phase_margin_change_deg": 3.0, "max_gain_error_db": 1.0},
        {"a": {"max_gain_error_db": 0.1}},
        has_plant=False,
    )
    status = {j.criterion: j.status for j in v.judgements}
    assert status["max_phase_margin_change_deg"] == "skipped"
    assert v.overall == "unchecked" and v.skipped
    assert "phase margin change (no plant in the case)" in v.unchecked_reason
    v = judge({"max_gain_error_db": 1.0}, {"a": {"max_gain_error_db": 0.1}}, has_plant=False)
    assert v.overall == "pass" and not v.skipped


def test_a_set_criterion_whose_figure_is_missing_is_not_a_pass():
    """A step deviation that was not simulated (figure None, e.g. a simulation too long to run)
    next to a passing gain error: UNCHECKED, with the reason."""
    v = judge(
        {"max_step_deviation": 0.03, "max_gain_error_db": 0.5},
        {"a": {"max_gain_error_db": 0.1, "max_step_deviation_note": "time simulation skipped: too long"}},
        has_plant=True,
    )
    assert v.overall == "unchecked" and "step-response deviation (time simulation skipped" in v.unchecked_reason


def test_every_realization_must_pass():
    v = judge(
        {"max_gain_error_db": 1.0}, {"a": {"max_gain_error_db": 0.1}, "b": {"max_gain_error_db": 2.0}}, has_plant=False
    )
    assert v.overall == "fail" and v.failures[0].realization == "b"


def test_nothing_checked_is_not_pass():
    """Issue 9 regression: a case whose every criterion was skipped got PASS. With only loop
    criteria and no plant nothing is checked: the verdict is "unchecked" and says what was
    skipped and why (common practice: a sign-off needs at least one check that ran)."""
    v = judge(
        {"max_phase_margin_change_deg": 3.0, "max_step_deviation": 0.05},
        {"tustin": {"max_phase_margin_change_deg": None}},
        has_plant=False,
    )
    assert v.overall == "unchecked"
    assert "tustin" in v.unchecked_reason and "no plant in the case" in v.unchecked_reason
    assert v.as_dict()["verdict"] == "unchecked"


def test_one_realization_unchecked_spoils_a_pass():
    """A realization with nothing checked keeps the whole verdict from PASS even when another
    realization passed (common practice)."""
    v = judge(
        {"max_gain_error_db": 1.0}, {"a": {"max_gain_error_db": 0.1}, "b": {"max_gain_error_db": None}}, has_plant=False
    )
    assert v.overall == "unchecked" and v.unchecked_reason.startswith("no criterion was checked for b:")


def test_no_realization_is_unchecked():
    """No new form at all: nothing was compared, so not a pass (common practice)."""
    v = judge({"max_gain_error_db": 1.0}, {}, has_plant=False)
    assert v.overall == "unchecked" and "no new form" in v.unchecked_reason


def test_nan_figure_is_skipped_not_judged():
    """A figure that is NaN (could not be computed) is neither pass nor fail, and it is never shown
    as a value (issue 9: NaN never printed as a result)."""
    v = judge({"max_gain_error_db": 1.0}, {"a": {"max_gain_error_db": float("nan")}}, has_plant=False)
    (j,) = [j for j in v.judgements if j.criterion == "max_gain_error_db"]
    assert j.status == "skipped" and j.value is None and "not a finite number" in j.note
    assert v.overall == "unchecked"


CASE_ALL_SKIPPED = """
[case]
title = "Only loop criteria, no plant"
[source]
expression = "2*(1 + 1/(30*s))"
[target.digital]
fs = "100 Hz"
methods = ["tustin"]
[criteria]
band = ["1 mHz", "1 Hz"]
max_phase_margin_change_deg = 3
"""


def test_report_with_every_criterion_skipped_exits_1(tmp_path, run_cli):
    """Issue 9 regression, the exact scenario: a case whose every criterion is skipped (loop
    criteria, no plant) printed PASS and exited 0. Now UNCHECKED, the reason printed, exit 1
    (docs/report.md, README). Common practice."""
    import json

    case = tmp_path / "skipped.toml"
    case.write_text(CASE_ALL_SKIPPED)
    r = run_cli("report", str(case), "--out", str(tmp_path / "rep"))
    assert r.code == 1, r.err
    assert "UNCHECKED" in r.out and "PASS" not in r.out
    assert "no plant in the case" in r.out
    data = json.loads((tmp_path / "rep" / "results.json").read_text())
    assert data["verdict"] == "unchecked" and "no plant in the case" in data["unchecked_reason"]
    md = (tmp_path / "rep" / "report.md").read_text()
    assert "**Verdict: UNCHECKED**" in md and "no criterion was checked" in md
