"""The third reviewer's findings on the merged firmware work (case files in
tests/cases/review3), each checked against a computation outside the tool."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from convert.case import load_case
from convert.compare.evaluate import evaluate_case
from convert.errors import LoopshiftError

CASES = Path(__file__).parent / "cases" / "review3"


def _judged(res, key):
    return {j.realization: j for j in res.verdict.judgements if j.criterion == key}


def test_fixed_point_direct_form_loop_is_judged_in_controller_units():
    """14/(0.5s + 1) by Tustin at 1 Hz, one sample of delay, Q31 direct form I with input range
    ±20: the loop checks used the stored words' coefficients (scaled by the input range and the
    output full scale) as the controller. python-control: the firmware's controller (the design's
    Tustin b/a, 1 sample of delay) with the plant sampled by ZOH and its 2 s dead time has a
    closed-loop pole outside |z| = 1, so the verdict FAILS on stability, and the realized
    controller's DC gain is the design's 14."""
    import control

    res = evaluate_case(load_case(CASES / "unstab4.toml"))
    r = res.realizations[0]
    assert r.controller.dc_gain() == pytest.approx(14.0, rel=1e-6)
    c = control.sample_system(control.tf([14], [0.5, 1]), 1.0, method="tustin")
    p = control.sample_system(control.tf([0.8], [150, 35, 1]), 1.0, method="zoh")
    z = control.tf([1, 0], [1], 1.0)
    poles = control.feedback(c * p / z**3, 1).poles()  # 1 sample computation delay + 2 s dead time
    assert max(abs(poles)) > 1
    (st,) = [j for j in res.verdict.judgements if j.criterion == "closed_loop_stable" and j.realization == r.name]
    assert st.status == "fail" and res.verdict.overall == "fail"


def test_pid_block_setpoint_beyond_the_input_range_fails():
    """Q15 PID block with input range ±5 and the case's own setpoint step of 10: the setpoint
    word saturates at 5 (arithmetic), so the loop settles at 5; the always-on reach check fails
    with 10 against 5."""
    res = evaluate_case(load_case(CASES / "pid_ir5b.toml"))
    (j,) = _judged(res, "firmware_input_reach").values()
    assert j.status == "fail" and j.value == pytest.approx(10.0) and j.limit == pytest.approx(5.0)
    assert res.verdict.overall == "fail"


def test_current_signal_without_a_shunt_is_refused_for_any_source():
    """4-20 mA into a controller that works in volts needs a shunt (250 ohm turns it into 1-5 V);
    read as amperes the gain was 250 times too small and passed."""
    with pytest.raises(LoopshiftError, match="shunt"):
        load_case(CASES / "s_noshunt.toml")


def test_output_limits_must_hold_the_operating_point():
    """Limits are deviations from the operating point: [10, 70] leaves out 0, so the loop could
    never sit at its operating point (the reviewer's block stayed pinned at +10)."""
    with pytest.raises(LoopshiftError, match="leave out 0"):
        load_case(CASES / "pidol.toml")


def test_improper_pid_with_a_plant_names_the_derivative_filter():
    """An ideal PID (no n, no tf) and a digital target without derivative_filter was an internal
    error; it is a one-line error naming target.digital.derivative_filter."""
    with pytest.raises(LoopshiftError) as info:
        evaluate_case(load_case(CASES / "pidnon_lin2.toml"))
    assert info.value.key == "target.digital.derivative_filter"


def test_failing_response_check_shows_the_figure_that_fails():
    """Q15 direct form II transposed PI: the phase error (8.5 deg) fails its 5 deg limit while the
    gain (0.12 dB) is within 0.5 dB; the check shows the phase, not the gain."""
    res = evaluate_case(load_case(CASES / "lin_q15.toml"))
    (j,) = _judged(res, "firmware_response").values()
    assert j.status == "fail" and j.unit == "deg" and j.value > j.limit == pytest.approx(5.0)
    assert np.isfinite(j.value)


@pytest.mark.parametrize("fmt", ["q15", "q31"])
@pytest.mark.parametrize("form", ["positional", "velocity"])
def test_fixed_point_pid_block_run_equals_its_steps(fmt, form):
    """The block model's run() (input words made for all samples at once) gives the same output
    words as stepping it sample by sample through its documented step(), saturation of the input
    words included (measurement noise of 6 against an input range of 16: some samples clip)."""
    from convert.digital.pidblock import PidBlock
    from convert.pid import pid_from_words

    s = pid_from_words(["kc=1.8", "ti=12s", "td=0.8s", "n=8"], where="test")
    rng = np.random.default_rng(3)
    r, y = np.full(3000, 5.0), rng.normal(0, 6, 3000)
    assert np.any(np.abs(y) > 16)
    block = PidBlock.from_settings(s, 20.0, word_format=fmt, limits=(-100, 100), input_range=16.0, form=form)
    fast = block.model().run(r, y)
    slow = block.model()
    assert np.array_equal(fast, [slow.step(float(a), float(b)) for a, b in zip(r, y)])


def test_coarse_derivative_word_is_told_in_the_report_and_terminal(run_cli, tmp_path):
    """Q15 PID block, input range ±100, output level 70, kd = kc·td = 8 s, Tf = td/n = 0.4 s at
    20 Hz: the derivative word's full scale is the output level times 2^g_d covering the
    peak-gain bound of a full-range input jump (kd/(Tf+T)·200 = 8/0.45·200 = 3556 by hand), so
    g_d = 6 (70·64 = 4480 ≥ 3556) and one LSB is 4480/32768 = 0.1367 output units (arithmetic).
    The note said so only in results.json; report.md and the terminal now say it too."""
    out = tmp_path / "r"
    r = run_cli("report", str(CASES / "pidq15.toml"), "--out", str(out))
    assert r.code in (0, 1), r.err
    lsb = 70 * 2**6 / 2**15
    text = f"derivative word's LSB is {lsb:.4g} output units"
    assert text in (out / "report.md").read_text()
    assert text in " ".join(r.out.split())  # the terminal wraps lines
