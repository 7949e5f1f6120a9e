"""Number formats of the report's tables (common practice for a filed report: no exponent
notation, a floor for negligible figures, fractions as percentages)."""

from __future__ import annotations

from convert.report.tables import _against_limit, _measured, fixed


def test_fixed_keeps_three_significant_digits_without_exponent():
    assert fixed(1.2634, "°") == "1.26 °"
    assert fixed(0.0295, "dB") == "0.0295 dB"
    assert fixed(44.43, "°") == "44.4 °"
    assert fixed(1234.6) == "1235"
    assert fixed(-0.145, "°") == "−0.145 °"


def test_fixed_writes_negligible_figures_as_below_the_floor():
    assert fixed(5.02e-07, "dB") == "< 0.001 dB"
    assert fixed(-3e-6, "dB") == "< 0.001 dB"
    assert fixed(0.0, "dB") == "0 dB"
    assert fixed(None) == "—"


def test_fractions_are_percentages_and_failures_say_by_how_much():
    assert _measured(0.0877, "of step") == "8.77 % of step"
    assert _against_limit(9.76, 3.0, "fail") == "over by 225% (3.3× the limit)"
    assert _against_limit(0.3, 1.0, "pass") == "30% of the limit used"
    assert _against_limit(None, 1.0, "skipped") == ""


def test_a_figure_and_a_small_limit_are_told_apart():
    """A figure judged against a limit below 0.001 (an integrator-stall error against an input
    resolution of R/2^15) was written "< 0.001" on both sides of a FAIL, hiding both numbers
    (found by trying a case built to fail). Now each is written to a hundredth of the limit, in
    plain decimals (the report has no exponent notation), and limits of 0.001 and up keep the
    usual floor. Common practice: a verdict table shows the number it judged."""
    from convert.report.tables import _measured

    assert _measured(0.000458, "input units", 0.000305) == "0.000458 input units"
    assert _measured(0.000305, "input units", 0.000305) == "0.000305 input units"
    assert _measured(3.4e-9, "input units", 3.47e-7) == "0.00000000340 input units"
    assert _measured(3e-10, "input units", 3.47e-7) == "< 0.000000001 input units"
    assert _measured(2e-4, "dB", 1.0) == "< 0.001 dB"
    assert _measured(0.0004, "of step", 0.05) == "0.0400 % of step"
