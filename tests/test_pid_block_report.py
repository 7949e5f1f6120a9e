"""The firmware PID block as a case's digital structure (``structure = "pid_block"``): the loop
simulation runs the block's own model (anti-windup and setpoint weights included), the
word-format row and checks come from the block's stored constants, its code is handed out only
when the checks pass, and bad keys are refused in one line."""

from __future__ import annotations

import numpy as np
import pytest

from convert.case import parse_case
from convert.compare.evaluate import evaluate_case
from convert.errors import InputError

# Our own invented loop: a dryer's air temperature, PID with setpoint weights, a tight output range.
DRYER = """
[case]
title = "Dryer air temperature PID as a firmware block"

[source]
pid = {{ kc = 2.5, ti = "8 s", td = "1 s", n = 10, b = 0.5, c = 0 }}

[target.digital]
fs = "10 Hz"
structure = "pid_block"
word_format = "{fmt}"
output_limits = [-1.2, 1.2]
{extra}

[plant]
model = "1.5/((6s + 1)(0.8s + 1))"

[signals]
setpoint_step = 1.0
disturbance_step = 0.5
duration = "60 s"

[criteria]
band = ["2 mHz", "0.5 Hz"]
max_gain_error_db = 3
max_phase_error_deg = 30
"""


def _no_loop(text: str) -> str:
    """The case without its plant (the firmware checks alone: no loop simulation at 20 kHz)."""
    head, rest = text.split("[plant]")
    return head + "[criteria]" + rest.split("[criteria]")[1]


def _case(tmp_path, fmt="float64", extra=""):
    return parse_case(DRYER.format(fmt=fmt, extra=extra), tmp_path / "dryer.toml")


def _independent_loop(block, plant_num, plant_den, fs, r, dist, n):
    """Reference: the plant discretized exactly under a zero-order hold (scipy.signal.cont2discrete,
    method "zoh") and the block's model stepped once per sample on (setpoint, sampled measurement);
    the disturbance adds to the plant input. Returns the measurement at the sampling instants."""
    from scipy.signal import cont2discrete, tf2ss

    a, b, c, d = tf2ss(plant_num, plant_den)
    ad, bd, cd, dd, _ = cont2discrete((a, b, c, d), 1.0 / fs, method="zoh")
    x = np.zeros((ad.shape[0], 1))
    m = block.model()
    ys = []
    for _ in range(n):
        y = float((cd @ x)[0, 0])
        ys.append(y)
        u = m.step(r, y)
        x = ad @ x + bd * (u + dist)
    return np.array(ys)


@pytest.mark.parametrize("fmt,extra", [("float64", 'anti_windup = "track"'), ("q15", "input_range = [-2, 2]")])
def test_loop_simulation_runs_the_blocks_model(tmp_path, fmt, extra):
    """The report's setpoint-step simulation of the PID-block realization saturates (limits
    ±1.2 against a step of 1 with kc = 2.5) and equals, at every sampling instant, an independent
    loop (scipy's exact ZOH plant, the block model stepped on setpoint and measurement) to 1e-9:
    the simulation runs the block itself — anti-windup, setpoint weight b = 0.5, c = 0, the Q15
    words — not a linear stand-in."""
    res = evaluate_case(_case(tmp_path, fmt, extra))
    (r,) = res.realizations
    assert r.name == "PID block @ 10 Hz" and r.details["structure"].startswith("pid_block (positional")
    from convert.digital.pidblock import PidBlock
    from convert.pid import PidSettings

    k = dict(kp=2.5, ki=2.5 / 8, kd=2.5, tf=0.1, b=0.5, c=0.0)
    blk = PidBlock.from_settings(
        PidSettings(**k),
        10.0,
        limits=(-1.2, 1.2),
        anti_windup="track" if fmt == "float64" else "clamp",
        word_format=fmt,
        input_range=2.0 if fmt == "q15" else None,
    )
    step = r.step
    every = int(round(0.1 / step.sub_step_s))
    n = (step.t.size - 1) // every + 1
    ref = _independent_loop(blk, [1.5], np.polymul([6, 1], [0.8, 1]), 10.0, 1.0, 0.0, n)
    got = step.y[::every][:n]
    assert np.max(np.abs(got - ref)) < 1e-9
    assert np.max(np.abs(step.u)) == pytest.approx(1.2, rel=2**-14)  # the limits were reached (Q15: the top word)
    assert not any("does not carry the source's setpoint path" in w for w in r.warnings)


def test_word_format_row_and_code_from_the_block(tmp_path):
    """float32: the word-format row is the float32-stored constants' linear equivalent against the
    exact one (its gain error equals numpy's float32 rounding of the constants evaluated
    independently), and the code (C and Structured Text) is handed out."""
    res = evaluate_case(_case(tmp_path, "float32", 'code_languages = ["c", "st"]\ncode_name = "dryer"'))
    (r,) = res.realizations
    row = next(x for x in r.budget if x.key == "word_format")
    t = 0.1
    k = {"kp": 2.5, "bi": 2.5 / 8 * t, "bd": 2.5 / (0.1 + t), "ad": 0.1 / (0.1 + t)}
    f = np.logspace(np.log10(2e-3), np.log10(0.5), 400)
    z1 = np.exp(-2j * np.pi * f * t)

    def resp(c):
        return c["kp"] + c["bi"] * z1 / (1 - z1) + c["bd"] * (1 - z1) / (1 - c["ad"] * z1)

    k32 = {n: float(np.float32(v)) for n, v in k.items()}
    want = np.max(np.abs(20 * np.log10(np.abs(resp(k32) / resp(k)))))
    assert row.max_gain_error_db == pytest.approx(want, rel=0.2, abs=1e-9)
    assert 0 < row.max_gain_error_db < 1e-4
    names = sorted(n.split("/")[-1] for n in r.files)
    assert names == ["dryer.c", "dryer.h", "dryer.st"]
    assert "FUNCTION_BLOCK dryer" in next(v for n, v in r.files.items() if n.endswith(".st"))


def test_a_stalling_q15_block_fails_with_its_number_and_gets_no_code(tmp_path):
    """Q15 PI at 20 kHz: ki·T = 2.5/8/20000, so the integral increment of one input LSB is about
    0.2 integral LSB (hand: bi·(S/S_I)·2^16 with S = 2, S_I = 1.2·2^3) and rounds to zero; the
    stall check FAILS with its figure above the resolution (one input LSB) and no code is written.
    With ±200 as the input range the PID's derivative cannot be held by Q15 words at all: the
    realization is refused, and that FAILS too."""
    text = DRYER.format(fmt="q15", extra="input_range = [-2, 2]").replace('fs = "10 Hz"', 'fs = "20 kHz"')
    text = _no_loop(text.replace('td = "1 s", n = 10, ', ""))
    res = evaluate_case(parse_case(text, tmp_path / "c.toml"))
    (r,) = res.realizations
    stall = next(j for j in res.verdict.judgements if j.criterion == "firmware_stall")
    assert stall.status == "fail" and stall.value > stall.limit == pytest.approx(2 / 2**15)
    assert res.verdict.overall == "fail" and r.files == {}
    text = DRYER.format(fmt="q15", extra="input_range = [-200, 200]").replace('fs = "10 Hz"', 'fs = "20 kHz"')
    res = evaluate_case(parse_case(_no_loop(text), tmp_path / "c.toml"))
    built = next(j for j in res.verdict.judgements if j.criterion == "firmware_realizable")
    assert built.status == "fail" and "2^12 times the output level" in built.note
    assert res.verdict.overall == "fail" and res.realizations[0].files == {}


@pytest.mark.parametrize(
    "extra,key",
    [
        ('pid_form = "sideways"', "pid_form"),
        ('anti_windup = "clamp"\ntracking_time = "3 s"', "tracking_time"),
        ('methods = ["tustin"]', "methods"),
        ("setpoint_weights = [0.5]", "setpoint_weights"),
    ],
)
def test_bad_block_keys_are_refused(tmp_path, extra, key):
    with pytest.raises(InputError) as exc:
        _case(tmp_path, extra=extra)
    assert key in exc.value.key and "dryer.toml:" in str(exc.value.where)


def test_block_keys_need_the_block_and_a_pid_source(tmp_path):
    text = DRYER.format(fmt="float64", extra="").replace('structure = "pid_block"', 'pid_form = "velocity"')
    with pytest.raises(InputError, match="pid_block"):
        parse_case(text, tmp_path / "c.toml")
    text = DRYER.format(fmt="float64", extra="").replace(
        'pid = { kc = 2.5, ti = "8 s", td = "1 s", n = 10, b = 0.5, c = 0 }',
        'expression = "(s+1)/((s+3)*(s+5))"',
    )
    with pytest.raises(InputError, match="needs a source that is a PID"):
        evaluate_case(parse_case(text, tmp_path / "c.toml"))


def test_cli_report_writes_the_blocks_code(run_cli, tmp_path):
    """As a user: loopshift report on a PID-block case writes the block's C into the report folder."""
    path = tmp_path / "dryer.toml"
    path.write_text(DRYER.format(fmt="q31", extra='input_range = [-2, 2]\ncode_name = "dryer"'))
    r = run_cli("report", str(path), "--out", str(tmp_path / "rep"))
    assert r.code in (0, 1), r.err
    hs = list((tmp_path / "rep").rglob("dryer.h"))
    assert (
        len(hs) == 1
        and "int32_t dryer_step(dryer_state *st, int32_t setpoint, int32_t measurement);" in hs[0].read_text()
    )
