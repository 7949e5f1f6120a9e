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
