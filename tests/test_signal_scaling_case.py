"""Signal scaling in case files: the card's signals (0–10 V, ±10 V, 4–20 mA, a transmitter
range) and converter bits mapped to firmware units; the controller rescaled, the action checked
end to end, the scaled gains in the report and the written code; bad input refused in one line."""

from __future__ import annotations

import pytest

from convert.case import parse_case
from convert.errors import InputError

CASE = """
[case]
title = "Tank level, 4-20 mA transmitter"

[source]
{source}

[target.digital]
fs = "10 Hz"
methods = ["tustin"]
word_format = "{fmt}"
structure = "{structure}"
output_limits = [0, 10]
input_range = [-2, 2]
input_resolution = 0.01
code_name = "lic"

[target.digital.input_signal]
{input}

[target.digital.output_signal]
{output}

[plant]
model = "0.5/(60s + 1)"

[signals]
setpoint_step = 1.0
duration = "300 s"

[criteria]
band = ["1 mHz", "0.1 Hz"]
max_gain_error_db = 3
max_phase_error_deg = 30
"""
PID = 'pid = { kc = 2, ti = "30 s", td = "2 s", n = 10 }'
MA_IN = 'range = ["4 mA", "20 mA"]\nshunt = "250 ohm"\nbits = 12\nconverter = ["0 V", "5 V"]'
PCT_OUT_INVERTED = 'range = ["0 V", "10 V"]\nfirmware = [100, 0]'


def _case(tmp_path, source=PID, fmt="float64", structure="sections", inp=MA_IN, out=PCT_OUT_INVERTED):
    text = CASE.format(source=source, fmt=fmt, structure=structure, input=inp, output=out)
    return parse_case(text, tmp_path / "c.toml")


def test_hand_calculated_gain_and_action(tmp_path):
    """Hand calculation (common practice): 4–20 mA across 250 Ω is 1–5 V; a 12-bit converter over
    0–5 V reads 819 .. 4095 counts (4095·1/5 = 819), so 819 counts per volt; the 0–10 V output
    is 100 .. 0 % (inverted): −10 % per volt. g = (1/819)·(−10) = −0.0122100; the PID's kp = 2
    becomes 0.0244200 per count, ki = 2/30 s · |g|, kd = 2·2 s · |g|, and its action turns from
    reverse to direct in firmware units; the end-to-end check passes and the code carries it."""
    from convert.compare.evaluate import evaluate_case
    from convert.report import build_report

    case = _case(tmp_path)
    m = case.digital.input_signal
    assert (m.signal_low, m.signal_high, m.firmware_low, m.firmware_high) == pytest.approx((1, 5, 819, 4095))
    res = evaluate_case(case)
    sig = res.realizations[0].details["signal_scaling"]
    g = -10 / 819
    assert sig["gain"] == pytest.approx(g, rel=1e-12) and sig["inverted"]
    assert (sig["card_action"], sig["firmware_action"]) == ("reverse", "direct")
    assert f"kp = {2 * abs(g):.6g}" in sig["gains"] and f"ki = {2 / 30 * abs(g):.6g} 1/s" in sig["gains"]
    assert f"kd = {4 * abs(g):.6g} s" in sig["gains"] and "direct acting" in sig["gains"]
    # limits are deviations from the operating point: [0, 10] V times −10 %/V, sorted
    assert sig["output_limits"] == pytest.approx((-100.0, 0.0))
    (check,) = [j for j in res.verdict.judgements if j.criterion == "firmware_direction"]
    assert check.status == "pass"
    files = build_report(res)
    header = next(v for k, v in files.items() if k.endswith("lic.h"))
    assert "kp = 0.02442" in header and "Output limits: -100 .. 0" in header
    assert "12-bit converter over 0 .. 5 V: counts 819 .. 4095" in files["report.md"]
    # the written coefficients are the card's times g (float64: to rounding)
    card = res.realizations[0].details["firmware"]["sections"]
    c_text = next(v for k, v in files.items() if k.endswith("lic.c"))
    first_b = float(c_text.split("/* section 1: b = [")[1].split(",")[0])
    assert first_b == pytest.approx(g * card[0]["b"][0], rel=1e-12)
    # the report's "New forms" line gives the coefficients in firmware units first, as the code
    # holds them (reviewer: it printed only the card's, -1/g times off and of the other sign)
    from convert.report.tables import realization_table

    (row,) = realization_table(res)[2]
    b_fw = [float(x) for x in row[2].split("in firmware units (as in the code) b = [")[1].split("]")[0].split(",")]
    assert b_fw == pytest.approx([g * v for v in res.realizations[0].details["b"]], rel=1e-9)


@pytest.mark.parametrize(
    "inp,out,k_in,k_out",
    [
        ('range = ["-10 V", "10 V"]\nbits = 16', 'range = ["0 V", "10 V"]\nbits = 12', 65535 / 20, 4095 / 10),
        (
            'range = ["4 mA", "20 mA"]\nshunt = "250 ohm"\nfirmware = [0, 5]',
            'range = ["0 V", "10 V"]\nfirmware = [0, 100]',
            5 / 4,
            10,
        ),
    ],
)
def test_bipolar_converter_and_transmitter_units(tmp_path, inp, out, k_in, k_out):
    """±10 V read by a 16-bit converter over its own span (65535 counts per 20 V) with a 12-bit
    0–10 V output; a level transmitter 4–20 mA = 0–5 m (1.25 m per volt at the card) with a
    0–100 % output: g = k_out / k_in (hand calculation), not inverted, reverse acting kept."""
    from convert.compare.evaluate import evaluate_case

    res = evaluate_case(_case(tmp_path, inp=inp, out=out))
    sig = res.realizations[0].details["signal_scaling"]
    assert sig["gain"] == pytest.approx(k_out / k_in, rel=1e-12) and not sig["inverted"]
    assert sig["firmware_action"] == "reverse"


def test_fixed_point_sign_flip_end_to_end(tmp_path):
    """Q31 delta with the inverted output map: the words of the firmware controller run with the
    mapped error and, mapped back, give the card-unit model's output (within 4 output LSB) —
    the direction check passes, and fails when the firmware model is given the wrong sign."""
    from convert.compare.evaluate import evaluate_case
    from convert.digital.scaling import end_to_end

    res = evaluate_case(_case(tmp_path, fmt="q31", structure="delta"))
    (check,) = [j for j in res.verdict.judgements if j.criterion == "firmware_direction"]
    assert check.status == "pass"
    r = res.realizations[0]
    assert r.details["signal_scaling"]["firmware_action"] == "direct"
    case = _case(tmp_path, fmt="q31", structure="delta")
    u_card, u_back, diff = end_to_end(
        lambda e: 2.0 * e, lambda e: 2.0 * e / 819, case.digital.input_signal, case.digital.output_signal, 0.5
    )
    assert u_card > 0 > u_back and diff > 1  # a firmware controller without the flip is caught


@pytest.mark.parametrize(
    "side,text,key",
    [
        ("input", 'range = ["20 mA", "4 mA"]\nshunt = "250 ohm"\nbits = 12', "input_signal.range"),
        ("input", 'range = ["4 mA", "20 mA"]\nshunt = "250 ohm"\nbits = 0', "input_signal.bits"),
        # a current range without a shunt is refused at the range itself (the controller works in volts)
        ("input", 'range = ["4 mA", "20 mA"]\nbits = 12\nconverter = ["0 V", "5 V"]', "input_signal.range"),
        ("input", 'range = ["0 V", "10 V"]\nbits = 12\nconverter = ["0 V", "5 V"]', "input_signal.converter"),
        ("input", 'range = ["0 V", "10 V"]\nshunt = "250 ohm"\nbits = 12', "input_signal.shunt"),
        ("input", 'range = ["0 V", "10 V"]', "input_signal.firmware"),
        ("output", 'range = ["0 V", "10 V"]\nfirmware = [5, 5]', "output_signal.firmware"),
        ("output", 'range = ["0 V", "10 mA"]\nfirmware = [0, 100]', "output_signal.range"),
        ("output", 'range = ["0 V", "10 V"]\nfirmware = [0, 100]\nbits = 12', "output_signal.bits"),
        ("output", 'range = ["0 V", "10 V"]\nfirmwar = [0, 100]', "output_signal.firmwar"),
        # bare numbers: volts or milliamps? (reviewer: [0, 10] was read as volts without a word)
        ("output", "range = [0, 10]\nfirmware = [0, 100]", "output_signal.range"),
        ("input", 'range = ["4", "20"]\nshunt = "250 ohm"\nbits = 12', "input_signal.range"),
    ],
)
def test_bad_signal_tables_are_one_line_errors(tmp_path, side, text, key):
    """Reversed range, 0 bits, a current range into a voltage converter, a signal beyond the
    converter, a shunt on a voltage, no firmware values, equal ends, mixed units, both forms,
    a misspelt key, a range of bare numbers: each an InputError naming its key, one line."""
    kw = {"inp": text} if side == "input" else {"out": text}
    with pytest.raises(InputError) as err:
        _case(tmp_path, **kw)
    assert err.value.key == f"target.digital.{key}"
    assert "\n" not in err.value.message


def test_card_source_needs_volts_or_a_shunt(tmp_path):
    """A card's controller works in volts: a 4–20 mA range without a shunt is refused."""
    card = 'card = { topology = "pi", parts = { R1 = "10k", R2 = "20k", C1 = "1u" } }'
    with pytest.raises(InputError) as err:
        _case(tmp_path, source=card, inp='range = ["4 mA", "20 mA"]\nbits = 12')
    assert err.value.key == "target.digital.input_signal.range" and "shunt" in err.value.message
