"""Plant log evidence: replay through analog and digital forms, residual figures, saturation and
gaps stated, PID parameters fitted; references python-control forced_response and
scipy.signal.lfilter."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from convert.errors import InputError
from convert.evidence.log import log_evidence
from convert.given import read_spec


def _write(path: Path, t, e, u, header="time (s),error,output"):
    with open(path, "w") as fh:
        fh.write(header + "\n")
        for row in zip(t, e, u):
            fh.write(",".join(f"{x:.17g}" for x in row) + "\n")
    return path


def _input(t, seed=2):
    rng = np.random.default_rng(seed)
    return np.cumsum(rng.standard_normal(t.size)) * 0.05 + np.sin(0.3 * t)


def test_analog_replay_matches_forced_response_even_and_uneven(tmp_path):
    """python-control forced_response (reference library; linear input between samples) of a PI
    with a filter pole: the replay through a CSV read in small chunks leaves a residual of at
    most 1e-9 of the output's range, and reports the logged offset (3.0) exactly. Uneven rows:
    a random subset of a fine even grid, the reference run on the fine grid with the input
    linear between the kept rows."""
    import control

    s = control.tf("s")
    sys_ = 2 * (1 + 1 / (3 * s)) / (0.1 * s + 1)
    t = np.arange(0, 60, 0.01)
    e = _input(t)
    u = control.forced_response(sys_, t, e).outputs + 3.0
    spec = read_spec("2*(1 + 1/(3s))/(0.1s+1)", "A")
    ev = log_evidence(_write(tmp_path / "even.csv", t, e, u), [("A", spec)], chunk_rows=777)
    f = ev.replays[0].figures
    assert f["offset"] == pytest.approx(3.0, abs=1e-9)
    assert f["rms_rel"] <= 1e-9 and f["peak_rel"] <= 1e-9
    assert not ev.uneven
    fine = np.arange(0, 60, 0.001)
    rng = np.random.default_rng(4)
    keep = np.sort(np.r_[0, rng.choice(np.arange(1, fine.size), 9000, replace=False)])
    tt = fine[keep]
    ee = _input(tt, seed=5)
    ref = control.forced_response(sys_, fine, np.interp(fine, tt, ee)).outputs[keep]
    ev = log_evidence(_write(tmp_path / "uneven.csv", tt, ee, ref), [("A", spec)], chunk_rows=1000)
    f = ev.replays[0].figures
    assert ev.uneven
    assert abs(f["offset_rel"]) <= 1e-9 and f["rms_rel"] <= 1e-9 and f["peak_rel"] <= 1e-9


def test_digital_replay_matches_lfilter_with_its_word_format(tmp_path):
    """scipy.signal.lfilter (reference library) of firmware coefficients on a log at the
    firmware's rate: the replay of the float64 form matches to 1e-9 of range; a log made with
    float32-rounded coefficients matches the form stored as float32 and not the float64 one."""
    from scipy.signal import lfilter

    b, a = [0.6, -0.59], [1.0, -0.99]
    t = np.arange(0, 50, 0.01)
    e = _input(t)
    u = lfilter(b, a, e)
    spec = read_spec("digital: b=0.6,-0.59 a=1,-0.99 fs=100Hz", "A")
    ev = log_evidence(_write(tmp_path / "d.csv", t, e, u), [("A", spec)], chunk_rows=600)
    assert ev.replays[0].figures["peak_rel"] <= 1e-9
    b32 = np.asarray(b, np.float32).astype(float)
    a32 = np.asarray(a, np.float32).astype(float)
    u32 = lfilter(b32, a32, e)
    f32 = read_spec("digital: b=0.6,-0.59 a=1,-0.99 fs=100Hz word=float32", "B")
    ev = log_evidence(_write(tmp_path / "d32.csv", t, e, u32), [("A", spec), ("B", f32)])
    assert ev.replays[1].figures["peak_rel"] <= 1e-12
    assert ev.replays[0].figures["peak_rel"] > 1e3 * max(ev.replays[1].figures["peak_rel"], 1e-15)


def test_digital_form_runs_at_its_own_rate_with_hold_and_delay(tmp_path):
    """A log at 100 Hz of firmware running at 10 Hz with one sample of delay: reference built with
    scipy.signal.lfilter on every tenth row, held for ten rows (zero-order hold) and shifted by
    one firmware period."""
    from scipy.signal import lfilter

    t = np.arange(0, 40, 0.01)
    e = _input(t)
    y = lfilter([1.05, -0.95], [1.0, -1.0], e[::10])
    held = np.repeat(y, 10)[: t.size]
    u = np.r_[np.zeros(10), held[:-10]]
    spec = read_spec("digital: b=1.05,-0.95 a=1,-1 fs=10Hz delay=1sample", "A")
    ev = log_evidence(_write(tmp_path / "slow.csv", t, e, u), [("A", spec)], chunk_rows=333)
    assert ev.replays[0].figures["peak_rel"] <= 1e-9


def test_pid_parameters_fitted_from_clean_and_noisy_logs(tmp_path):
    """python-control forced_response (reference library) of a filtered PID (kp 1.2, ki 0.08/s,
    kd 2 s, tf 0.25 s): clean log -> each parameter within 1 %; with white noise of 0.02 on the
    output (stated) -> each true value inside the fitted 95 % interval. The fit starts from
    other settings of the same structure (kc 1, ti 20 s, td 1 s, tf 0.25 s)."""
    import control

    s = control.tf("s")
    true = 1.2 + 0.08 / s + 2 * s / (0.25 * s + 1)
    t = np.arange(0, 300, 0.05)
    e = _input(t, seed=8) + 0.5 * np.sign(np.sin(0.7 * t))
    u = control.forced_response(true, t, e).outputs
    start = read_spec("pid: kp=1 ki=0.05/s kd=1s tf=0.25s", "A")
    ev = log_evidence(_write(tmp_path / "clean.csv", t, e, u), [("A", start)], fit=start)
    for name, value in (("kp", 1.2), ("ki", 0.08), ("kd", 2.0)):
        assert ev.fit.values[name] == pytest.approx(value, rel=0.01)
    rng = np.random.default_rng(11)
    ev = log_evidence(
        _write(tmp_path / "noisy.csv", t, e, u + 0.02 * rng.standard_normal(t.size)), [("A", start)], fit=start
    )
    for name, value in (("kp", 1.2), ("ki", 0.08), ("kd", 2.0)):
        assert abs(ev.fit.values[name] - value) <= ev.fit.ci95[name], (name, ev.fit.values, ev.fit.ci95)


def test_pid_block_fitted_from_an_lfilter_log(tmp_path):
    """A PID block (backward-euler, 20 Hz) simulated with scipy.signal.lfilter (reference
    library) from its b/a: the fit of its kp, ki within 1 %."""
    from scipy.signal import lfilter

    from convert.given import pid_block_b_a
    from convert.pid import pid_from_words

    b, a = pid_block_b_a(pid_from_words(["kp=0.8", "ki=0.3/s"]), 20.0, "backward-euler")
    t = np.arange(0, 100, 0.05)
    e = _input(t, seed=3)
    u = lfilter(b, a, e)
    start = read_spec("pid: kp=1 ki=0.1/s fs=20Hz", "A")
    ev = log_evidence(_write(tmp_path / "blk.csv", t, e, u), [("A", start)], fit=start)
    assert ev.fit.values["kp"] == pytest.approx(0.8, rel=0.01)
    assert ev.fit.values["ki"] == pytest.approx(0.3, rel=0.01)


def test_saturation_gaps_and_missing_rows_are_stated(tmp_path):
    """A clamped stretch (output at the limit), a gap of 2 s and a row with NaN are counted and
    left out; the rest still replays exactly (forced_response reference)."""
    import control

    s = control.tf("s")
    t = np.r_[np.arange(0, 20, 0.01), np.arange(22, 40, 0.01)]
    e = _input(t)
    fine = np.arange(0, 40, 0.01)
    u = np.interp(t, fine, control.forced_response(4 / (s + 2), fine, np.interp(fine, t, e)).outputs)
    hi = np.percentile(u, 90)
    clipped = np.minimum(u, hi)
    clipped[500] = np.nan
    spec = read_spec("4/(s+2)", "A")
    ev = log_evidence(_write(tmp_path / "sat.csv", t, e, clipped), [("A", spec)], output_limits=(-100.0, hi))
    assert ev.saturated_rows == int(np.sum(u >= hi)) - (1 if u[500] >= hi else 0)
    assert ev.gap_count == 1 and ev.gaps[0] == pytest.approx((t[1999], 22.0))
    assert ev.missing_rows == 1
    assert ev.replays[0].figures["peak_rel"] < 1e-3  # interpolation across the gap: the gap itself is a guess


def test_memory_stays_bounded_as_the_log_grows(tmp_path):
    """Streaming: the peak memory of a 10,000-row and a 40,000-row replay differ by far less
    than the data (tracemalloc; chunks of 1024 rows)."""
    import tracemalloc

    spec = read_spec("2*(1 + 1/(3s))/(0.1s+1)", "A")
    peaks = []
    for n in (10_000, 40_000):
        t = np.arange(n) * 0.01
        path = _write(tmp_path / f"m{n}.csv", t, np.sin(t), np.cos(t))
        tracemalloc.start()
        log_evidence(path, [("A", spec)], chunk_rows=1024)
        peaks.append(tracemalloc.get_traced_memory()[1])
        tracemalloc.stop()
    data_growth = (40_000 - 10_000) * 3 * 8
    assert peaks[1] - peaks[0] < 0.25 * data_growth, peaks


@pytest.mark.parametrize(
    "text,where,words",
    [
        ("time (s),error,output\n0,1,2\n0.1,1,2\n0.05,1,2\n", "x.csv:4", "time must rise row by row"),
        ("time (s),error\n0,1\n", "x.csv:1", "no output column"),
        ("time (s),output\n0,1\n", "x.csv:1", "needs the controller's input"),
        ("time (s);error;output\n0;1;2\n0,5;1;2\n", "x.csv:3", "decimal comma"),
        ("time (s),error,output\n0,1,2\n0,5,1,2\n", "x.csv:3", "a decimal comma in a comma-separated file"),
        ("time (kHz),error,output\n0,1,2\n", "x.csv:1", "not a unit of time"),
    ],
)
def test_bad_logs_name_file_row_and_column(tmp_path, text, where, words):
    p = tmp_path / "x.csv"
    p.write_text(text)
    with pytest.raises(InputError) as err:
        log_evidence(p, [("A", read_spec("2/s", "A"))])
    assert err.value.where == where and words in err.value.message


def test_cli_log_json_and_verdict(run_cli, tmp_path):
    """`compare A B --log` with a residual limit: exit 0 when both replay within it; the JSON
    carries each form's figures; setpoint/measurement columns form the error."""
    import control

    s = control.tf("s")
    t = np.arange(0, 100, 0.1)
    sp = np.where(t > 10, 1.0, 0.0)
    pv = 0.3 * np.sin(0.2 * t)
    u = control.forced_response(2 * (1 + 1 / (30 * s)), t, sp - pv).outputs
    path = tmp_path / "spmv.csv"
    with open(path, "w") as fh:
        fh.write("time (s),setpoint,measurement,output (%)\n")
        for row in zip(t, sp, pv, u):
            fh.write(",".join(f"{x:.17g}" for x in row) + "\n")
    res = run_cli(
        "compare",
        "pid: kc=2 ti=30s",
        "pid: kc=2 ti=30s fs=10Hz",
        "--log",
        str(path),
        "--max-residual-rms",
        "2%",
        "--json",
    )
    assert res.code == 0, res.err
    data = json.loads(res.out)
    assert data["input"] == "setpoint − measurement"
    assert data["replays"][0]["rms_rel"] < 1e-9
    assert 0 < data["replays"][1]["rms_rel"] < 0.02
    res = run_cli(
        "compare", "pid: kc=2 ti=30s", "pid: kc=2 ti=30s fs=10Hz", "--log", str(path), "--max-residual-rms", "0.001%"
    )
    assert res.code == 1 and "verdict: FAIL" in res.out
    res = run_cli("compare", "pid: kc=2 ti=30s", "--log", str(path))
    assert res.code == 0 and "nothing judged" in res.out


def test_higher_order_and_complex_modes_replay_exactly(tmp_path):
    """A fifth-order controller with a complex pole pair and an integrator (beyond the one-filter
    path, so each mode runs alone) and a second-order one with a complex pair (the one-filter
    path): both replay within 1e-9 of range of python-control forced_response (reference library)."""
    import control

    s = control.tf("s")
    high = 3 * (s + 0.5) * (s + 2) / (s * (s + 1) * (s**2 + 0.8 * s + 4) * (0.05 * s + 1))
    low = (s + 1) / (s**2 + 0.6 * s + 9)
    t = np.arange(0, 40, 0.01)
    e = _input(t, seed=9)
    for name, sys_, spec in (
        ("high", high, "3*(s+0.5)*(s+2)/(s*(s+1)*(s^2+0.8s+4)*(0.05s+1))"),
        ("low", low, "(s+1)/(s^2+0.6s+9)"),
    ):
        u = control.forced_response(sys_, t, e).outputs
        ev = log_evidence(_write(tmp_path / f"{name}.csv", t, e, u), [("A", read_spec(spec, "A"))], chunk_rows=900)
        f = ev.replays[0].figures
        assert abs(f["offset_rel"]) <= 1e-9 and f["peak_rel"] <= 1e-9, (name, f)
