"""PID forms (convert.pid): published relations, round trips, units, action, 2-DOF weights."""

from __future__ import annotations

import math
import os

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from convert.controller import from_expression
from convert.errors import InputError, UnrealizableError
from convert.pid import (
    PID_KEYS,
    PidSettings,
    lag,
    lead,
    pid_from_controller,
    pid_from_mapping,
    pid_from_words,
    why_not_pid,
)

EXAMPLES = int(os.environ.get("LOOPSHIFT_FUZZ_EXAMPLES", "50"))

gain = st.floats(min_value=0.01, max_value=100.0)
time = st.floats(min_value=0.01, max_value=1000.0)
ratio_n = st.floats(min_value=2.0, max_value=50.0)
F = np.logspace(-4, 3, 40)


def _close(a, b, rel=1e-9):
    return a == pytest.approx(b, rel=rel, abs=1e-12)


def _control_response(sys, f=F):
    return np.array([complex(sys(1j * 2 * np.pi * fi)) for fi in f])


# ------------------------------------------------------------------ published relations
@given(gain, time, time)
@settings(max_examples=EXAMPLES, deadline=None)
def test_series_to_ideal_published_relations(k_s, ti_s, td_s):
    """Series -> ideal, unfiltered: Kc = K'(Ti'+Td')/Ti', Ti = Ti'+Td', Td = Ti'Td'/(Ti'+Td').
    Source: Åström & Hägglund, PID Controllers: Theory, Design, and Tuning, 2nd ed., 1995,
    section 3.4 (from memory)."""
    ideal = PidSettings.from_series(k_s, ti_s, td_s).ideal()
    assert _close(ideal.kc, k_s * (ti_s + td_s) / ti_s)
    assert _close(ideal.ti_s, ti_s + td_s)
    assert _close(ideal.td_s, ti_s * td_s / (ti_s + td_s))


@given(gain, time, st.floats(min_value=0.0, max_value=0.25))
@settings(max_examples=EXAMPLES, deadline=None)
def test_ideal_to_series_published_inverse(kc, ti, td_fraction):
    """Ideal -> series for Ti ≥ 4Td: K' = Kc/2·(1+√(1−4Td/Ti)), Ti' = Ti/2·(1+√(1−4Td/Ti)),
    Td' = Ti/2·(1−√(1−4Td/Ti)). Source: Åström & Hägglund, PID Controllers: Theory, Design, and
    Tuning, 2nd ed., 1995, section 3.4 (from memory)."""
    td = td_fraction * ti
    series = PidSettings.from_ideal(kc, ti, td).series()
    root = math.sqrt(max(0.0, 1 - 4 * td / ti))
    assert _close(series.kc, kc / 2 * (1 + root), rel=1e-7)
    assert _close(series.ti_s, ti / 2 * (1 + root), rel=1e-7)
    assert series.td_s == pytest.approx(ti / 2 * (1 - root), rel=1e-6, abs=1e-9 * ti)


@given(gain, time, st.floats(min_value=0.2501, max_value=10.0))
@settings(max_examples=EXAMPLES, deadline=None)
def test_series_refused_when_ti_below_4td(kc, ti, td_fraction):
    """Ti < 4·Td gives complex zeros, so no real series set exists (Åström & Hägglund, PID
    Controllers, 2nd ed., 1995, section 3.4, from memory)."""
    settings_ = PidSettings.from_ideal(kc, ti, td_fraction * ti)
    with pytest.raises(
        UnrealizableError, match=r"the series form cannot represent this set \(Ti < 4·Td gives complex zeros\)"
    ):
        settings_.series()
    assert "unavailable" in settings_.table()["series"]


# ------------------------------------------------------------------ against python-control
@given(
    gain,
    time,
    st.one_of(st.just(0.0), st.floats(min_value=1e-3, max_value=0.2)),
    ratio_n,
    st.sampled_from(["reverse", "direct"]),
)
@settings(max_examples=EXAMPLES, deadline=None)
def test_forms_equal_python_control_built_transfer_functions(kc, ti, td_fraction, n, action):
    """The ideal and series forms, built term by term with python-control's tf arithmetic from
    their textbook formulas (ideal: Kc(1 + 1/(Ti s) + Td s/(Td/N s + 1)); series: K'(1 + 1/(Ti' s))
    (1 + Td' s)/(Td'/N' s + 1)), have the same frequency response as to_controller() (reference
    library; the forms as given in Åström & Hägglund, 2nd ed., 1995, section 3.4, from memory)."""
    import control

    td = td_fraction * ti
    sign = 1 if action == "reverse" else -1
    s = control.tf("s")
    pid = PidSettings.from_ideal(kc, ti, td, n=n if td > 0 else None, action=action)
    ours = pid.to_controller().frequency_response(F, via="zpk")

    ideal_tf = kc * (1 + 1 / (ti * s))
    if td > 0:
        ideal_tf = ideal_tf + kc * td * s / (td / n * s + 1)
    np.testing.assert_allclose(ours, sign * _control_response(ideal_tf), rtol=1e-7)

    try:
        ser = pid.series()
    except UnrealizableError:
        assume(False)
    series_tf = ser.kc * (1 + 1 / (ser.ti_s * s))
    if ser.td_s > 0:
        series_tf = series_tf * (1 + ser.td_s * s)
        if ser.tf_s > 0:
            series_tf = series_tf / (ser.tf_s * s + 1)
    np.testing.assert_allclose(ours, sign * _control_response(series_tf), rtol=1e-6)
    if ser.n is not None:
        assert _close(ser.tf_s, ser.td_s / ser.n)


# ------------------------------------------------------------------ round trips
@given(
    gain,
    st.one_of(st.just(0.0), gain),
    st.one_of(st.just(0.0), gain),
    st.one_of(st.just(0.0), st.floats(min_value=0.001, max_value=10.0)),
    st.sampled_from(["reverse", "direct"]),
)
@settings(max_examples=EXAMPLES, deadline=None)
def test_round_trips_between_forms(kp, ki, kd, tf, action):
    """parallel -> ideal -> parallel, parallel -> series -> parallel (where it exists) and
    parallel -> controller -> parallel all return the set (property test)."""
    p = PidSettings(kp, ki, kd, tf, action=action)
    for back in [p.ideal().to_settings(), pid_from_controller(p.to_controller())]:
        assert back.action == p.action
        for name in ("kp", "ki", "kd", "tf"):
            assert getattr(back, name) == pytest.approx(getattr(p, name), rel=1e-7, abs=1e-12)
    try:
        series = p.series()
    except UnrealizableError:
        return
    back = series.to_settings()
    for name in ("kp", "ki", "kd", "tf"):
        assert getattr(back, name) == pytest.approx(getattr(p, name), rel=1e-6, abs=1e-9)


def test_series_pd_with_filter():
    """Series PD K'(1 + Td' s)/(Td'/N s + 1) equals kp + kd s/(tf s + 1) with kp = K',
    kd = K'(Td' − Tf), tf = Td'/N (partial fractions, common practice)."""
    p = PidSettings.from_series(2.0, None, 4.0, n=8)
    assert (p.kp, p.ki) == (2.0, 0.0)
    assert p.tf == 0.5 and p.kd == pytest.approx(2.0 * (4.0 - 0.5))
    assert p.series().td_s == pytest.approx(4.0) and p.series().n == pytest.approx(8.0)


# ------------------------------------------------------------------ action and 2-DOF
def test_direct_action_negates_the_controller():
    """Direct action: output rises with the measurement, so C(s) is negated (common practice:
    reverse-acting controllers have positive gain on setpoint − measurement)."""
    rev = pid_from_words(["kc=2", "ti=30s", "td=5s", "n=10"])
    direct = pid_from_words(["kc=2", "ti=30s", "td=5s", "n=10", "action=direct"])
    np.testing.assert_allclose(direct.to_controller().frequency_response(F), -rev.to_controller().frequency_response(F))
    back = pid_from_controller(direct.to_controller())
    assert back.action == "direct" and back.kp == pytest.approx(2.0)
    assert direct.series().action == "direct" and direct.ideal().action == "direct"
    assert direct.table()["action"] == "direct"


def test_setpoint_weights_against_python_control():
    """The setpoint path is kp·b + ki/s + kd·c·s/(tf·s + 1) (two-degree-of-freedom PID,
    Åström & Hägglund, 2nd ed., 1995, section 3.4, from memory), checked with python-control;
    c = 0 removes the derivative from the setpoint path (derivative on measurement)."""
    import control

    s = control.tf("s")
    p = PidSettings(2.0, 0.1, 5.0, 0.5, b=0.4, c=0.0)
    expected = 2.0 * 0.4 + 0.1 / s
    np.testing.assert_allclose(p.setpoint_controller().frequency_response(F), _control_response(expected), rtol=1e-9)
    p1 = PidSettings(2.0, 0.1, 5.0, 0.5, b=1.0, c=1.0)
    np.testing.assert_allclose(p1.setpoint_controller().frequency_response(F), p1.to_controller().frequency_response(F))
    assert p.table()["derivative_on"] == "measurement"


# ------------------------------------------------------------------ units
@pytest.mark.parametrize(
    "words, field, expected",
    [
        (["pb=50%"], "kp", 2.0),  # Kc = 100/PB
        (["pb=200"], "kp", 0.5),
        (["kc=2", "ti=0.5min"], "ki", 2.0 / 30.0),  # minutes per repeat
        (["kc=2", "reset=2/min"], "ki", 2.0 / 30.0),  # repeats per minute: Ti = 1/reset
        (["kc=2", "reset=2"], "ki", 2.0 / 30.0),  # bare reset rate is per minute
        (["kc=2", "reset=2 repeats/min"], "ki", 2.0 / 30.0),
        (["kc=2", "reset=0.05/s"], "ki", 0.1),
        (["kc=2", "td=0.1min"], "kd", 12.0),
        (["kc=2", "td=5"], "kd", 10.0),  # bare times are seconds
        (["kp=1", "ki=6/min"], "ki", 0.1),
        (["kp=1", "ki=0.1"], "ki", 0.1),
        (["kp=1", "kd=2s", "n=10"], "tf", 0.2),  # parallel n: tf = kd/(kp·n)
        (["kc=2", "td=5s", "tf=250ms"], "tf", 0.25),
        (["kc=2", "td=5s", "n=10"], "tf", 0.5),  # ideal: tf = Td/N
    ],
)
def test_plant_units(words, field, expected):
    """Plant units: proportional band PB% with Kc = 100/PB, integral time in minutes per repeat,
    reset rate in repeats per minute (Ti = 1/reset), derivative time in minutes (common practice
    in process control; 1 min = 60 s per BIPM SI Brochure, 9th ed., Table 8)."""
    assert getattr(pid_from_words(words), field) == pytest.approx(expected, rel=1e-12)


def test_series_filter_uses_series_td():
    """In the series form N applies to the series Td': tf = Td'/N' (the convention documented in
    docs/pid.md; the D factor is (1 + Td' s)/(Td'/N' s + 1))."""
    p = pid_from_words(["form=series", "kc=1", "ti=20s", "td=4s", "n=8"])
    assert p.tf == pytest.approx(0.5)
    assert p.series().n == pytest.approx(8.0)
    assert p.ideal().n == pytest.approx(p.ideal().td_s / 0.5)


# ------------------------------------------------------------------ bad words
@pytest.mark.parametrize(
    "words, key, fragment",
    [
        (["kc=2", "ti=-30s"], "ti", "positive"),
        (["kc=2", "ti=nan"], "ti", "finite"),
        (["kc=2", "td=inf"], "td", "finite"),
        (["kc=2", "ti=30 Hz"], "ti", "a time"),
        (["kx=2"], "kx", "did you mean kp"),
        (["kc=2", "tii=3"], "tii", "did you mean ti"),
        (["kc=2", "kp=3"], "kp", "one form"),
        (["ti=30s"], "kc", "missing the gain"),
        (["kc=2", "pb=50%"], "pb", "not both"),
        (["kc=2", "ti=30s", "reset=2/min"], "reset", "not both"),
        (["kc=2", "td=5s", "n=10", "tf=1s"], "tf", "not both"),
        (["kc=2", "n=10"], "n", "needs a derivative"),
        (["kc=-2"], "kc", "action=direct"),
        (["kp=-1", "ki=1"], "kp", "action=direct"),
        (["kc=2", "action=sideways"], "action", "reverse or direct"),
        (["kc=2", "form=seris"], "form", "did you mean series"),
        (["kc=2", "kc=3"], "kc", "given twice"),
        (["kc="], "kc", "no value"),
        (["kp=0"], "kp", "at least one non-zero gain"),
        (["kc=2", "td=-1s"], "td", "zero or positive"),
        (["kc=2", "b=-0.5"], "b", "zero or positive"),
        (["form=series", "kc=2", "ti=30s", "td=5s", "n=0.5"], "n", "faster"),
    ],
)
def test_bad_words_give_one_line_naming_the_key(words, key, fragment):
    """Each bad --pid set is one InputError line: where (--pid), the key, what was wrong."""
    with pytest.raises(InputError) as info:
        pid_from_words(words, where="--pid")
    line = str(info.value)
    assert "\n" not in line
    assert line.startswith(f"--pid: {key}: ")
    assert fragment in line


def test_word_without_equals():
    """A word without '=' is named in the error (common practice)."""
    with pytest.raises(InputError, match="expected KEY=VALUE"):
        pid_from_words(["kc2"])


def test_mapping_takes_numbers_and_text():
    """Case files give the same keys with numbers (default units) or text with units."""
    p = pid_from_mapping({"kc": 2, "ti": "0.5 min", "td": 5, "n": 10, "c": 0}, where="case.toml: source.pid")
    assert (p.kp, p.ki, p.kd, p.tf, p.c) == (2.0, pytest.approx(2 / 30), 10.0, 0.5, 0.0)
    with pytest.raises(InputError, match=r"^case.toml: source.pid: tii: unknown key"):
        pid_from_mapping({"kc": 2, "tii": 3}, where="case.toml: source.pid")
    assert set(PID_KEYS) >= {"kc", "pb", "ti", "reset", "td", "n", "tf", "b", "c", "action", "form"}


# ------------------------------------------------------------------ from a controller
@pytest.mark.parametrize(
    "text, kind",
    [
        ("3", "P"),
        ("2*(1 + 1/(30*s))", "PI"),
        ("(s+1)/(0.1*s+1)", "PD"),
        ("s + 2", "PD"),
        ("(s+1)^2/s", "PID"),
        ("(22*s^2 + 4.06667*s + 0.133333) / (s^2 + 2*s)", "PID"),
        ("-(s+1)^2/s", "PID"),
    ],
)
def test_pid_read_back_from_expressions(text, kind):
    """P, PI, PD, PID with and without filter are recognised; the recovered set reproduces the
    controller (frequency responses agree)."""
    c = from_expression(text)
    p = pid_from_controller(c)
    assert p is not None and p.kind == kind
    np.testing.assert_allclose(p.to_controller().frequency_response(F), c.frequency_response(F), rtol=1e-9)


@pytest.mark.parametrize(
    "text, fragment",
    [
        ("1/s^2", "2 integrators"),
        ("(s+1)/(10*s+1)", "negative"),
        ("(s+1)/(s-1)", "stable"),
        ("(s+1)/(s^2+3s+1)", "poles"),
        ("s^2+1", "degree"),
        ("1/(s*(s+1))", "mixed signs"),
    ],
)
def test_non_pid_controllers_explained(text, fragment):
    """Controllers outside the PID family give None and a reason."""
    c = from_expression(text)
    assert pid_from_controller(c) is None
    assert fragment in why_not_pid(c)


def test_digital_controller_is_not_read_as_pid():
    """PID forms are read from analog controllers only (common practice here)."""
    c = from_expression("(0.2 - 0.18 z^-1)/(1 - z^-1)", fs_hz=100.0)
    assert pid_from_controller(c) is None and "digital" in why_not_pid(c)


# ------------------------------------------------------------------ lead and lag
@given(st.floats(min_value=0.01, max_value=100.0), st.floats(min_value=1.5, max_value=100.0))
@settings(max_examples=EXAMPLES, deadline=None)
def test_lead_peak_phase(zero_hz, alpha):
    """A lead with pole/zero ratio α has its largest phase lead at √(fz·fp) with
    sin(φmax) = (α − 1)/(α + 1) (closed form, common practice in loop shaping)."""
    c = lead(1.0, zero_hz, zero_hz * alpha)
    f_mid = zero_hz * math.sqrt(alpha)
    phase = np.angle(c.frequency_response([f_mid]))[0]
    assert math.sin(phase) == pytest.approx((alpha - 1) / (alpha + 1), rel=1e-9)
    assert c.dc_gain() == pytest.approx(1.0)


def test_lead_and_lag_refuse_wrong_order():
    """A lead has its zero below its pole and a lag the opposite."""
    with pytest.raises(InputError):
        lead(1.0, 10.0, 1.0)
    with pytest.raises(InputError):
        lag(1.0, 1.0, 10.0)
    assert lag(2.0, 10.0, 1.0).dc_gain() == pytest.approx(2.0)
