"""Plant-log checks that must not pass wrongly (review 5, findings 1 and 2):

* a logged output frozen mid-range, or pinned at a limit the law never reaches, is a mismatch and
  fails; a row is left out as saturated only where the replayed law is itself at or beyond that
  limit; with more than half of the rows left out the log criterion is UNCHECKED, not PASS;
* a PID with setpoint weights b, c is replayed with setpoint and measurement through their own
  paths (an error-only log cannot judge it: UNCHECKED), and ``--fit`` fits b and c with kp, ki, kd.

References: python-control ``forced_response`` (the analog laws, each path on its own input) and
a plain sample-by-sample loop of the firmware PID block written here from its difference equations
(backward Euler: I += ki·T·e, D = (tf·D + kd·Δ(c·r − y))/(tf + T)), independent of the package.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

LIMITS = ("--max-residual-rms", "2%", "--max-residual-peak", "5%")


def _csv(path: Path, header: str, *cols) -> Path:
    with open(path, "w") as fh:
        fh.write(header + "\n")
        for row in zip(*cols):
            fh.write(",".join(f"{x:.10g}" for x in row) + "\n")
    return path


def _pi_log():
    """A PI (kc 2, Ti 20 s) on a stepping, noisy error: python-control forced_response, plus the
    running controller's state 40 at the first row."""
    import control

    t = np.arange(0, 600, 0.1)
    rng = np.random.default_rng(3)
    e = np.repeat(rng.uniform(-1, 1, t.size // 300 + 1), 300)[: t.size] * 2 + 0.02 * rng.standard_normal(t.size)
    u = control.forced_response(control.tf([40.0, 2.0], [20.0, 0.0]), t, e).outputs + 40.0
    return t, e, u


def test_frozen_output_fails_where_it_passed(run_cli, tmp_path):
    """The output frozen from 200 s at its value then (mid-range; the law keeps moving by ±7): the
    held rows are not saturation, the replay fails (it left them out and passed before)."""
    t, e, u = _pi_log()
    frozen = u.copy()
    frozen[2000:] = frozen[2000]
    assert frozen[2000] < u.max() and frozen[2000] > u.min()
    path = _csv(tmp_path / "frozen.csv", "time (s),error,output (%)", t, e, frozen)
    res = run_cli("compare", "pid: kc=2 ti=20s", "--log", str(path), *LIMITS, "--json")
    data = json.loads(res.out)
    assert res.code == 1 and data["verdict"]["overall"] == "fail", res.out
    f = data["replays"][0]
    assert f["saturated"] == 0 and f["rms_rel"] > 0.2
    # the honest log of the same law passes (the check can pass)
    good = _csv(tmp_path / "good.csv", "time (s),error,output (%)", t, e, u)
    res = run_cli("compare", "pid: kc=2 ti=20s", "--log", str(good), *LIMITS)
    assert res.code == 0 and "verdict: PASS" in res.out, res.out


@pytest.mark.parametrize(
    "a,extra",
    [
        ("pid: kc=2 ti=20s", ()),  # no limits: 100 is the log's own top, held while the input moves
        ("pid: kc=2 ti=20s", ("--output-limits", "0", "100")),
        ("pid: kc=2 ti=20s fs=10Hz limits=0,100", ()),  # A's own limits
    ],
)
def test_output_pinned_at_a_limit_the_law_never_reaches_fails(run_cli, tmp_path, a, extra):
    """The output at 100 % from 200 s while the law stays between 21 and 36 %: the rows sit at a
    limit, but the replayed form is nowhere near it, so they count and the log fails."""
    t, e, u = _pi_log()
    assert u[2000:].max() < 50
    pinned = u.copy()
    pinned[2000:] = 100.0
    path = _csv(tmp_path / "pinned.csv", "time (s),error,output (%)", t, e, pinned)
    res = run_cli("compare", a, "--log", str(path), *LIMITS, *extra, "--json")
    data = json.loads(res.out)
    assert res.code == 1 and data["verdict"]["overall"] == "fail", res.out
    assert data["replays"][0]["saturated"] == 0 and data["replays"][0]["at_limit_judged"] >= 3999


@pytest.mark.parametrize("given_limits", [True, False])
def test_real_saturation_is_left_out_and_a_mostly_saturated_log_is_unchecked(run_cli, tmp_path, given_limits):
    """A firmware without anti-windup clipped at `hi` (the law, python-control, goes beyond it):
    with about 15 % of the rows clipped they are left out and the replay passes exactly; with
    about 70 % clipped (more than half of the log) the criterion is UNCHECKED (exit 1), not PASS.
    Without limits the clipped rows are found as the output held at its own top while the input
    moved for two steps or more (a clip of two rows is not told from the law that way: it stays
    in the figures, so the peak there is that clip's depth, under 1 % of the range)."""
    t, e, u = _pi_log()
    for pct, overall in ((85, "pass"), (30, "unchecked")):
        hi = float(np.percentile(u, pct))
        clipped = np.minimum(u, hi)
        path = _csv(tmp_path / f"clip{pct}.csv", "time (s),error,output (%)", t, e, clipped)
        extra = ("--output-limits", "-100", f"{hi:.10g}") if given_limits else ()
        res = run_cli("compare", "pid: kc=2 ti=20s", "--log", str(path), *LIMITS, *extra, "--json")
        data = json.loads(res.out)
        assert data["verdict"]["overall"] == overall, (pct, res.out)
        f = data["replays"][0]
        n_clip = int(np.sum(u > hi))
        assert abs(f["saturated"] - n_clip) <= 0.02 * n_clip
        if overall == "pass":
            assert res.code == 0 and f["unjudged"] is None
            assert f["peak_rel"] < (1e-6 if given_limits else 1e-2) and f["rms_rel"] < (1e-7 if given_limits else 1e-3)
        else:
            assert res.code == 1 and f["left_out_share"] > 0.5 and "left out" in f["unjudged"]
            assert all(j["status"] == "unchecked" for j in data["verdict"]["judgements"])
    res = run_cli("compare", "pid: kc=2 ti=20s", "--log", str(path), *LIMITS, *extra)
    assert res.code == 1 and "verdict: UNCHECKED" in res.out and "PASS" not in res.out


# ----------------------------------------------------------------------------- setpoint weights
KP, KI, KD, TF = 2.0, 0.1, 4.0, 0.2
WEIGHTED = "pid: kp=2 ki=0.1/s kd=4s tf=0.2s b=0.5 c=0"


def _two_dof(b: float, c: float, seed: int = 5):
    """u = kp·(b·r − y) + ki/s·(r − y) + kd·s/(tf·s + 1)·(c·r − y) by python-control
    forced_response, each path on its own input; the controller runs 300 s before the log starts
    (the log begins with a running controller, not from rest). Returns (t, r, y, u) of the log."""
    import control

    t = np.arange(0, 900, 0.1)
    rng = np.random.default_rng(seed)
    r = np.r_[np.full(3000, 50.0), np.repeat(rng.uniform(40, 60, 10), 600)]
    y = 50 + np.cumsum(rng.normal(0, 0.05, t.size))
    sp = control.tf([KP * b * TF + KD * c, KP * b + KI * TF, KI], [TF, 1.0, 0.0])
    fb = control.tf([KP * TF + KD, KP + KI * TF, KI], [TF, 1.0, 0.0])
    u = control.forced_response(sp, t, r).outputs - control.forced_response(fb, t, y).outputs + 30.0
    k = t >= 300
    return t[k] - 300, r[k], y[k], u[k]


def test_weighted_pid_replayed_through_its_own_paths(run_cli, tmp_path):
    """A with b = 0.5, c = 0: the log of the right firmware passes to 2e-3 of the range (the
    derivative's unknown state at the first row, decayed to e^-5 where the settling rows end), the
    log of a firmware that ignores the weights (b = c = 1) fails. Before: the reverse."""
    t, r, y, u = _two_dof(0.5, 0.0)
    ok = _csv(tmp_path / "ok.csv", "time (s),setpoint,measurement,output", t, r, y, u)
    t1, r1, y1, u1 = _two_dof(1.0, 1.0)
    wrong = _csv(tmp_path / "wrong.csv", "time (s),setpoint,measurement,output", t1, r1, y1, u1)
    res = run_cli("compare", WEIGHTED, "--log", str(ok), *LIMITS, "--json")
    data = json.loads(res.out)
    assert res.code == 0 and data["verdict"]["overall"] == "pass", res.out
    assert data["replays"][0]["peak_rel"] < 2e-3 and "own path" in data["replays"][0]["input"]
    res = run_cli("compare", WEIGHTED, "--log", str(wrong), *LIMITS)
    assert res.code == 1 and "verdict: FAIL" in res.out
    # the unweighted PID is the one that fits the unweighted firmware (the check can pass)
    res = run_cli("compare", "pid: kp=2 ki=0.1/s kd=4s tf=0.2s", "--log", str(wrong), *LIMITS)
    assert res.code == 0, res.out


def test_error_only_log_cannot_judge_a_weighted_pid(run_cli, tmp_path):
    """The same right firmware logged as error and output only: the setpoint path cannot be
    replayed, the criterion is UNCHECKED (exit 1) with the reason; --fit refuses (exit 2)."""
    t, r, y, u = _two_dof(0.5, 0.0)
    path = _csv(tmp_path / "err.csv", "time (s),error,output", t, r - y, u)
    res = run_cli("compare", WEIGHTED, "--log", str(path), *LIMITS, "--json")
    data = json.loads(res.out)
    assert res.code == 1 and data["verdict"]["overall"] == "unchecked"
    assert "weighs the setpoint" in data["replays"][0]["unjudged"]
    res = run_cli("compare", WEIGHTED, "--log", str(path), "--fit")
    assert res.code == 2 and "setpoint" in res.err and len(res.err.strip().splitlines()) == 1


@pytest.mark.parametrize("b,c", [(0.5, 0.0), (1.0, 1.0), (0.3, 0.7)])
def test_fit_finds_the_weights_with_the_gains(run_cli, tmp_path, b, c):
    """--fit on setpoint/measurement logs fits kp, ki, kd and b, c (A's weights are only where it
    starts): each within 0.5 % (b, c within 0.005) of the law python-control ran. Before: kp 1.14
    and kd 0.136 against 2 and 4 on the (0.5, 0) log."""
    t, r, y, u = _two_dof(b, c)
    path = _csv(tmp_path / "log.csv", "time (s),setpoint,measurement,output", t, r, y, u)
    res = run_cli("compare", WEIGHTED, "--log", str(path), "--fit", "--json")
    fit = json.loads(res.out)["fit"]
    assert res.code == 0 and set(fit["names"]) == {"kp", "ki", "kd", "b", "c"}
    for name, true in (("kp", KP), ("ki", KI), ("kd", KD)):
        assert fit["values"][name] == pytest.approx(true, rel=5e-3), fit["values"]
    assert fit["values"]["b"] == pytest.approx(b, abs=5e-3) and fit["values"]["c"] == pytest.approx(c, abs=5e-3)


def _block_log(b: float, c: float, fs: float = 10.0):
    """A firmware PID block (backward Euler) run sample by sample here, on setpoint and measurement
    at its own rate: P = kp·(b·r − y); I += ki·T·(r − y); D = (tf·D + kd·Δ(c·r − y))/(tf + T).
    The measurement starts at the setpoint, so the block's state at the first row is known (zero)."""
    t = np.arange(0, 400, 1 / fs)
    rng = np.random.default_rng(9)
    r = np.r_[np.full(500, 50.0), np.repeat(rng.uniform(40, 60, 7), 500)][: t.size]
    y = 50 + np.cumsum(np.r_[0.0, rng.normal(0, 0.05, t.size - 1)])
    T = 1 / fs
    i = d = 0.0
    xd_old = c * r[0] - y[0]
    u = np.empty(t.size)
    for n in range(t.size):
        i += KI * T * (r[n] - y[n])
        xd = c * r[n] - y[n]
        d = (TF * d + KD * (xd - xd_old)) / (TF + T)
        xd_old = xd
        u[n] = KP * (b * r[n] - y[n]) + i + d + 20.0
    return t, r, y, u


def test_weighted_pid_block_against_a_loop_of_its_difference_equations(run_cli, tmp_path):
    """The firmware PID block with b = 0.5, c = 0 (A given as a block at 10 Hz): its replay through
    both paths matches the independent loop to 1e-9 of the range; the same block without weights
    fails on it; --fit of the block recovers kp, ki, kd, b, c."""
    t, r, y, u = _block_log(0.5, 0.0)
    path = _csv(tmp_path / "blk.csv", "time (s),setpoint,measurement,output", t, r, y, u)
    block = WEIGHTED + " fs=10Hz method=backward-euler"
    res = run_cli("compare", block, "--log", str(path), *LIMITS, "--fit", "--json")
    data = json.loads(res.out)
    assert res.code == 0 and data["replays"][0]["peak_rel"] < 1e-9, res.out
    fit = data["fit"]["values"]
    for name, true in (("kp", KP), ("ki", KI), ("kd", KD), ("b", 0.5)):
        assert fit[name] == pytest.approx(true, rel=1e-6), fit
    assert abs(fit["c"]) < 1e-6
    res = run_cli(
        "compare", "pid: kp=2 ki=0.1/s kd=4s tf=0.2s fs=10Hz method=backward-euler", "--log", str(path), *LIMITS
    )
    assert res.code == 1 and "verdict: FAIL" in res.out


CASE = """
[source.pid]
kp = 2
ki = "0.1 /s"
kd = "4 s"
tf = "0.2 s"
b = 0.5
c = 0
[target.digital]
fs = "10 Hz"
structure = "pid_block"
[plant]
model = "0.8/((60s+1)(6s+1))"
dead_time = "3 s"
[criteria]
band = ["1 mHz", "0.2 Hz"]
max_gain_error_db = 1
max_phase_error_deg = 15
[evidence.log]
file = "{file}"
max_residual_rms = "2 %"
max_residual_peak = "5 %"
"""


def test_case_replays_the_source_and_the_pid_block_with_their_weights(tmp_path):
    """In a case (source PID with b = 0.5, c = 0; target a PID block at 10 Hz): the right log
    passes both replays (source exactly, the block within its discretization), the unweighted
    firmware's log fails them, an error-only log makes the verdict "unchecked" naming why."""
    from convert.case import load_case
    from convert.compare.evaluate import evaluate_case

    t, r, y, u = _two_dof(0.5, 0.0)
    _csv(tmp_path / "ok.csv", "time (s),setpoint,measurement,output", t, r, y, u)
    _csv(tmp_path / "err.csv", "time (s),error,output", t, r - y, u)
    t1, r1, y1, u1 = _two_dof(1.0, 1.0)
    _csv(tmp_path / "wrong.csv", "time (s),setpoint,measurement,output", t1, r1, y1, u1)

    def run(name):
        p = tmp_path / f"{name}.toml"
        p.write_text(CASE.format(file=f"{name}.csv"))
        res = evaluate_case(load_case(p))
        return res, {(j.realization, j.criterion): j for j in res.verdict.judgements if j.realization.startswith("log")}

    res, logs = run("ok")
    assert logs[("log: source", "max_residual_peak")].value < 2e-3
    assert all(j.status == "pass" for j in logs.values()) and len(logs) == 4, logs
    assert res.verdict.overall == "pass"
    res, logs = run("wrong")
    assert all(j.status == "fail" for k, j in logs.items() if k[1] == "max_residual_peak")
    assert res.verdict.overall == "fail"
    res, logs = run("err")
    assert all(j.status == "skipped" for j in logs.values())
    assert res.verdict.overall == "unchecked" and "weighs the setpoint" in res.verdict.unchecked_reason


def test_case_replays_a_two_input_circuit_through_its_setpoint_path(tmp_path):
    """A circuit target of the pid-two-input topology (its own setpoint network, parts rounded to
    the series): its replay runs its setpoint path on the setpoint, so the log of the weighted law
    (python-control) passes within the rounding and the unweighted firmware's log fails; an
    error-only log leaves it unjudged."""
    from convert.case import load_case
    from convert.compare.evaluate import evaluate_case

    body = CASE.split("[target.digital]")[0] + (
        '[target.circuit]\ntopology = "pid-two-input"\n'
        '[criteria]\nband = ["1 mHz", "0.2 Hz"]\nmax_gain_error_db = 1\nmax_phase_error_deg = 15\n'
        '[evidence.log]\nfile = "{file}"\nmax_residual_rms = "2 %"\nmax_residual_peak = "5 %"\n'
    )
    t, r, y, u = _two_dof(0.5, 0.0)
    _csv(tmp_path / "ok.csv", "time (s),setpoint,measurement,output", t, r, y, u)
    _csv(tmp_path / "err.csv", "time (s),error,output", t, r - y, u)
    t1, r1, y1, u1 = _two_dof(1.0, 1.0)
    _csv(tmp_path / "wrong.csv", "time (s),setpoint,measurement,output", t1, r1, y1, u1)
    status = {}
    for name in ("ok", "wrong", "err"):
        p = tmp_path / f"{name}.toml"
        p.write_text(body.format(file=f"{name}.csv"))
        res = evaluate_case(load_case(p))
        status[name] = {j.criterion: j for j in res.verdict.judgements if j.realization.startswith("log: circuit")}
    assert status["ok"]["max_residual_peak"].status == "pass" and status["ok"]["max_residual_peak"].value < 0.01
    assert status["wrong"]["max_residual_peak"].status == "fail"
    assert {j.status for j in status["err"].values()} == {"skipped"}
