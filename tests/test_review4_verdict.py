"""The fourth reviewer's wrong-PASS findings (case files in tests/cases/review4), each checked
against a computation outside the tool."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from convert.case import load_case
from convert.compare.evaluate import evaluate_case

CASES = Path(__file__).parent / "cases" / "review4"


def _judged(res, key):
    return {j.realization: j for j in res.verdict.judgements if j.criterion == key}


def test_infinite_source_gain_margin_against_a_finite_one_fails():
    """PI 1.5(1 + 1/(0.2s)) on 10/(0.5s + 1): the analog loop's phase never reaches -180°, so its
    gain margin is infinite; the 50 Hz firmware with a sample of delay has a finite one. python-
    control on the sampled loop (Tustin C(z), ZOH plant, z^-1) finds it: 4.1 dB. Before: the
    gain-margin criterion was "skipped" and the verdict PASSED; an infinite-to-finite change is
    unbounded and fails."""
    import control

    c = control.sample_system(control.tf([1.5 * 0.2, 1.5], [0.2, 0]), 0.02, method="tustin")
    p = control.sample_system(control.tf([10], [0.5, 1]), 0.02, method="zoh")
    z = control.tf([1, 0], [1], 0.02)
    gm = control.stability_margins(c * p / z)[0]
    assert math.isfinite(gm) and 20 * math.log10(gm) < 6  # the finite margin the firmware has
    p_an = control.tf([10], [0.5, 1]) * control.tf([1.5 * 0.2, 1.5], [0.2, 0])
    assert not math.isfinite(control.stability_margins(p_an)[0])  # the source's is infinite
    res = evaluate_case(load_case(CASES / "c23_gm_inf.toml"))
    (j,) = _judged(res, "max_gain_margin_change_db").values()
    assert j.status == "fail" and j.value == math.inf and j.note.startswith("unbounded")
    assert res.verdict.overall == "fail"


def test_a_set_step_criterion_not_simulated_keeps_the_verdict_from_passing():
    """A 1 kHz task on a loop that settles in hours: the step simulation is refused as too long,
    so the step and disturbance criteria the case sets are not checked. Before: PASS on the gain
    error alone; now UNCHECKED with both named (README: exit 0 only when every criterion passes)."""
    res = evaluate_case(load_case(CASES / "c29_made_step_skipped.toml"))
    step = _judged(res, "max_step_deviation")
    assert all(j.status == "skipped" for j in step.values())
    assert res.verdict.overall == "unchecked"
    assert "step-response deviation" in res.verdict.unchecked_reason
    assert "disturbance-response deviation" in res.verdict.unchecked_reason


def test_a_zero_mirrored_into_the_right_half_plane_fails_the_action_check():
    """Given firmware whose zero sits mirrored in the right half-plane: same gain as the source
    everywhere, phase -2·atan(0.05ω) against it (hand: (1 - 0.05s)/(1 + 0.05s) is all-pass), i.e.
    -153° at 20 Hz, the band's top. Before: the action was read at the band's bottom only (3.6°)
    and the gain-only case PASSED; the check now covers the band."""
    res = evaluate_case(load_case(CASES / "c7_given_mirror.toml"))
    (j,) = _judged(res, "same_sign").values()
    hand = math.degrees(2 * math.atan(0.05 * 2 * math.pi * 20))
    assert hand > 90
    assert j.status == "fail" and j.value > 90
    # independent: scipy.signal.freqz of the given b/a against the source by hand, unwrapped from
    # 0.1 Hz; the phase turns monotonically, so the largest is at the band's top
    from scipy.signal import freqz

    f = np.geomspace(0.1, 20, 400)
    _, h = freqz([-5.066666667, 5.6], [1, -0.333333333], worN=f, fs=200)
    w = 2j * np.pi * f
    src = 0.8 * (0.05 * w + 1) / (0.005 * w + 1)
    ref = np.degrees(np.unwrap(np.angle(h / src)))
    assert j.value == pytest.approx(abs(ref[-1]), abs=0.01)
    assert res.verdict.overall == "fail"


def test_an_unstable_loop_has_no_margins_to_judge():
    """An unstable plant and a 4 Hz firmware: the closed loop is unstable (numpy eigenvalues of the
    sampled loop in the stability tests); its margin changes are not judged as if it worked (the
    reviewer saw "phase margin change 57.9 deg FAIL"), its stability row fails the verdict."""
    res = evaluate_case(load_case(CASES / "c4_unstable_plant.toml"))
    stab = _judged(res, "closed_loop_stable")
    unstable = [n for n, j in stab.items() if j.status == "fail" and n != "source"]
    assert unstable
    for n in unstable:
        for key in ("max_phase_margin_change_deg", "max_gain_margin_change_db"):
            j = _judged(res, key)[n]
            assert j.status == "skipped" and "unstable" in j.note
    assert res.verdict.overall == "fail"
    assert np.isfinite([j.value for j in _judged(res, "max_phase_margin_change_deg").values() if j.value]).all()


def test_given_velocity_block_with_limits_runs_in_velocity_form():
    """A DCS velocity PI (kc 4, Ti 30 s, 2 Hz, limits ±10) against its analog card on
    0.5/((60s+1)(5s+1)) with 4 s dead time, a setpoint step of 4 that saturates the output.
    Before: the given velocity block was simulated with the positional (winding) law and passed at
    0.38 %. Independent simulation here (plant exact at 10 ms by the matrix exponential, dead time
    as a 400-sample line, the block's own b/a as increments added to its clamped output, the
    analog PI integrating at 10 ms): the velocity block leaves the card by about 22.6 % of the
    step; the tool now says the same and fails."""
    from scipy.linalg import expm
    from scipy.signal import tf2ss

    res = evaluate_case(load_case(CASES / "c17_velocity_sat.toml"))
    vel = next(r for r in res.realizations if r.name.endswith("vel"))
    b, a = vel.details["b"], vel.details["a"]
    assert len(b) == 2 and a == pytest.approx([1.0, -1.0])  # a PI: du = b0·e[k] + b1·e[k-1]
    dt, T, lim, r = 0.01, 0.5, 10.0, 4.0
    A, B, C, _ = tf2ss([0.5], np.polymul([60, 1], [5, 1]))
    n = A.shape[0]
    M = np.zeros((n + 1, n + 1))
    M[:n, :n], M[:n, n:] = A * dt, B * dt
    E = expm(M)
    Ad, Bd = E[:n, :n], E[:n, n:]
    steps, delay, every = int(round(vel.step.t[-1] / dt)), 400, int(round(T / dt))

    def run(velocity: bool) -> np.ndarray:
        x, line, y = np.zeros((n, 1)), np.zeros(delay), np.zeros(steps)
        integral = u = e_old = 0.0
        for k in range(steps):
            y[k] = (C @ x).item()
            e = r - y[k]
            if not velocity:
                integral += 4 / 30 * e * dt
                u = min(max(4 * e + integral, -lim), lim)
            elif k % every == 0:
                u = min(max(u + b[0] * e + b[1] * e_old, -lim), lim)
                e_old = e
            line = np.roll(line, 1)
            line[0] = u
            x = Ad @ x + Bd * line[-1]
        return y

    independent = np.max(np.abs(run(True) - run(False))) / r
    (j,) = [j for j in res.verdict.judgements if j.criterion == "max_step_deviation" and j.realization == vel.name]
    assert independent > 0.2
    assert j.value == pytest.approx(independent, abs=0.005)
    assert j.status == "fail" and res.verdict.overall == "fail"


def test_a_computation_delay_of_minutes_is_refused_in_one_line(run_cli, tmp_path):
    """`delay = "5 min"` at 10 Hz is 3,000 samples (arithmetic): no firmware computes that long,
    and the run hung (or grew past 2.7 GB at 10 s). Refused in one line naming the key, with the
    way out (the plant's dead time); the same on the command line."""
    from convert.errors import InputError

    with pytest.raises(InputError) as err:
        load_case(CASES / "c30_delay_big.toml")
    assert "3000 samples" in err.value.message and "dead time" in err.value.message
    assert "target.digital.delay" in str(err.value)
    r = run_cli("report", str(CASES / "c30_delay_big.toml"), "--out", str(tmp_path / "r"))
    assert r.code == 2 and len(r.err.strip().splitlines()) == 1
    r = run_cli("digital", "2*(1+1/(3s))", "--fs", "10Hz", "--delay", "5min")
    assert r.code == 2 and "--delay" in r.err and "3000 samples" in r.err
    r = run_cli("digital", "2*(1+1/(3s))", "--fs", "10Hz", "--delay", "32samples")
    assert r.code == 0, r.err  # a few periods of computation and fieldbus stay allowed


def test_a_circuit_output_clipped_by_its_rail_is_simulated_clipped():
    """PI card 4(1 + 1/(2s)) on ±12 V op-amps, a 5 V setpoint step that asks about 22 V of it.
    Before: the loop simulation ignored the case's rail and passed at 0.11 %. Independent model
    (the reviewer's, here at 1 ms): the inverting PI stage with the tool's parts, saturated at the
    rail (its capacitor then charges through R1 + R2), against the analog source: about 26 % of
    the step. The tool now clips at the rail, warns, and fails."""
    res = evaluate_case(load_case(CASES / "c31_rail_step.toml"))
    (r,) = res.realizations
    p = r.details["parts"]
    r1, r2, c1 = p["R1"], p["R2"], p["C1"]
    dt, rail, ref = 1e-3, 12.0, 5.0
    n, line = int(r.step.t[-1] / dt), int(round(0.2 / dt))

    def run(card: bool) -> np.ndarray:
        y, vc, integral, buf, out = 0.0, 0.0, 0.0, [0.0] * line, np.zeros(n)
        for k in range(n):
            e = ref - y
            if card:
                i = e / r1
                vo = -(i * r2 + vc)
                if abs(vo) > rail:
                    vo = math.copysign(rail, vo)
                    i = (e - vo - vc) / (r1 + r2)
                vc += i / c1 * dt
                u = -vo
            else:
                u = 4 * e + integral
                integral += 4 / 2 * e * dt
            buf.append(u)
            y += dt * (buf.pop(0) - y) / 3.0
            out[k] = y
        return out

    independent = np.max(np.abs(run(True) - run(False))) / ref
    (j,) = [j for j in res.verdict.judgements if j.criterion == "max_step_deviation"]
    assert independent > 0.2
    assert j.value == pytest.approx(independent, abs=0.01)
    assert j.status == "fail" and any("rail" in w for w in r.warnings)


def test_a_clamp_across_the_integrator_that_acts_leaves_the_step_unjudged():
    """A PI card (R1 20k, R2 100k, C1 10 µF) with back-to-back 4.7 V zeners across its feedback,
    a setpoint step that drives it into them. Independent model (the reviewer's, at 1 ms here):
    the card with the zeners conducting (the output held, the capacitor charged through R2 alone)
    peaks well below the output-clamp-with-winding-integrator model the loop simulation uses
    (3.18 against 4.02 by the reviewer at 0.1 ms). So the simulated step does not show the card, and
    a firmware without anti-windup "matched" it and PASSED; the step criterion is now not judged,
    and the verdict is UNCHECKED with the reason."""
    dt, n, line, ref, v = 1e-3, 4107, 100, 3.0, 5.35
    r1, r2, c1 = 20e3, 100e3, 10e-6

    def run(card: bool) -> np.ndarray:
        y, vc, integral, buf, out = 0.0, 0.0, 0.0, [0.0] * line, np.zeros(n)
        for k in range(n):
            e = ref - y
            if card:
                i = e / r1
                vo = -(i * r2 + vc)
                if abs(vo) > v:
                    vo = math.copysign(v, vo)
                    i = (0 - vo - vc) / r2
                vc += i / c1 * dt
                u = -vo
            else:
                u = min(max(5 * e + integral, -v), v)
                integral += 5 * e * dt
            buf.append(u)
            y += dt * (buf.pop(0) - y) / 2.0
            out[k] = y
        return out

    assert run(False).max() - run(True).max() > 0.5  # the two models of the card part ways
    res = evaluate_case(load_case(CASES / "c32_clamped_card.toml"))
    (j,) = [j for j in res.verdict.judgements if j.criterion == "max_step_deviation"]
    assert j.status == "skipped" and "across an integrator" in j.note
    assert res.verdict.overall == "unchecked" and "step-response deviation" in res.verdict.unchecked_reason


def test_given_pid_block_filter_row_is_against_the_source_law(tmp_path):
    """A DCS PID block with the same settings and the same derivative filter (N = 8) as the
    source card: its derivative-filter row was 0.668 dB / 17.7° (filtered against unfiltered, by
    hand the same), blaming a filter the source has too; it is now ~0. With an ideal source (no
    N), the row is the filter's own effect again, checked by hand: |1 + 1/(Ti s) + Td s/(1 + Td s/N)|
    against |1 + 1/(Ti s) + Td s| over the band."""
    from convert.case import parse_case

    res = evaluate_case(load_case(CASES / "c8_given_pid.toml"))
    row = next(b for b in res.realizations[0].budget if b.key == "derivative_filter")
    assert abs(row.max_gain_error_db) < 1e-6 and abs(row.max_phase_error_deg) < 1e-4
    text = (CASES / "c8_given_pid.toml").read_text().replace('td = "1.5 s"\nn = 8\n', 'td = "1.5 s"\n', 1)
    assert text.count("n = 8") == 1  # only the block keeps its filter
    plant = text[text.index("[plant]") : text.index("[criteria]")]
    text = text.replace(plant, "")  # an ideal source cannot be simulated in a loop: no plant here
    res = evaluate_case(parse_case(text, tmp_path / "ideal.toml"))
    row = next(b for b in res.realizations[0].budget if b.key == "derivative_filter")
    f = np.geomspace(1e-3, 0.3, 20001)
    s = 2j * np.pi * f
    filt = 1 + 1 / (8 * s) + 1.5 * s / (1 + 1.5 * s / 8)
    bare = 1 + 1 / (8 * s) + 1.5 * s
    gain = np.max(np.abs(20 * np.log10(np.abs(filt / bare))))
    phase = np.max(np.abs(np.degrees(np.angle(filt / bare))))
    assert row.max_gain_error_db == pytest.approx(gain, rel=1e-3)
    assert row.max_phase_error_deg == pytest.approx(phase, rel=1e-3)


def test_output_limits_far_beyond_the_output_signal_are_warned():
    """output_limits [-40, 60] (card volts, deviations) on a 0-10 V output mapped to 100..0 %: by
    hand -10 %/V, so the firmware clamp is -600 .. 400 %, ten times the signal's 100 % range, a
    clamp that never acts. Before: scaled in silence into the code; now a warning says so."""
    res = evaluate_case(load_case(CASES / "c14_scaling.toml"))
    warnings = " ".join(w for r in res.realizations for w in r.warnings)
    assert "-600 .. 400 in firmware units, 10 times the output signal's whole range" in warnings


def test_a_circuit_that_oscillates_with_its_op_amps_fails():
    """A 20 kHz resonant term (Q 25) built as a Tow-Thomas cascade on 1 MHz op-amps: with ideal
    op-amps the circuit is stable, and "controller stable on its own" passed. Outside reference:
    ngspice transient of the written netlist (its single-pole op-amp subcircuit) after a 10 mV
    step grows like e^{σt}; σ from the envelope between 0.5-1 ms and 2.5-3 ms matches the
    circuit's right-half-plane pole the new always-on check reports, and the check fails."""
    from tests.spice import require_ngspice, transient

    require_ngspice()
    res = evaluate_case(load_case(CASES / "c24_resonant.toml"))
    (r,) = res.realizations
    (j,) = [j for j in res.verdict.judgements if j.criterion == "controller_stable_opamps"]
    assert j.status == "fail" and j.value > 0
    text = r.files["circuit.cir"]
    deck = "\n".join(
        "VIN in 0 DC 0 PULSE(0 0.01 0 1n 1n 1 2)" if line.startswith("VIN ") else line
        for line in text.splitlines()
        if not line.lower().startswith(".ac") and line.lower() != ".end"
    )
    t, v = transient(deck, 3e-3, 0.5e-6)
    early = np.max(np.abs(v[(t > 0.5e-3) & (t < 1e-3)]))
    late = np.max(np.abs(v[(t > 2.5e-3) & (t < 3e-3)]))
    sigma = math.log(late / early) / 2e-3
    assert late > 10 * early
    assert j.value == pytest.approx(sigma, rel=0.15)
    # and with ideal op-amps the same design is stable: the check is about the op-amps
    assert all(p.real < 0 for p in r.controller.poles())


def test_card_with_its_own_op_amp_subcircuit_reads():
    """A PI + D-on-measurement card with a user op-amp subcircuit (gain 2e5, a pole from 1 kΩ and
    31.8 µF, a buffer) was refused: its fit disagreed with the direct solve by 2.1e-6, over the
    1e-6 allowed, because the op-amp poles at MHz sit beside time constants of seconds. The same op-amp
    at another impedance level read fine. Allowed now up to 1e-5 (1e-4 dB). Outside reference:
    ngspice AC of the netlist from the measurement input to the output equals −C(s) of the read
    card within 1e-5 over the band."""
    from tests.spice import ac_sweep, require_ngspice

    from convert.circuit.card import analyze_card
    from convert.circuit.netlist import read_netlist

    require_ngspice()
    text = (CASES / "cards" / "pid_meas_d.cir").read_text()
    card = analyze_card(read_netlist(text, "pid_meas_d.cir"), setpoint="VSP", measurement="VPV", band_hz=(0.01, 5))
    c = card.full_controller or card.controller
    deck = "\n".join(
        line
        for line in text.replace("VSP sp 0 DC 0 AC 1", "VSP sp 0 DC 0 AC 0")
        .replace("VPV pv 0 DC 0 AC 0", "VPV pv 0 DC 0 AC 1")
        .splitlines()
        if line.strip().lower() != ".end"
    )
    f, v = ac_sweep(deck, "out", 0.01, 5, 20)
    assert np.max(np.abs(v / -c.frequency_response(f) - 1)) < 1e-5
    other = (CASES / "cards" / "pid_meas_d_docsub.cir").read_text()
    card2 = analyze_card(read_netlist(other, "docsub.cir"), setpoint="VSP", measurement="VPV", band_hz=(0.01, 5))
    c2 = card2.full_controller or card2.controller
    assert np.max(np.abs(c2.frequency_response(f) / c.frequency_response(f) - 1)) < 1e-5


def test_given_float32_direct2t_is_checked_as_direct2t():
    """Given float32 coefficients the firmware runs in direct form II transposed were checked as
    direct form I (a warning said so). They are now analysed in the structure given. Independent:
    numpy float32 arithmetic of the direct2t recursion (y = b0·e + s; s = b1·e + y) held at the
    output level 50 with an error of 1.0, below the tool's stall figure, does not move in 4,096
    samples, where the exact recursion would ramp by 2e-6 a sample."""
    res = evaluate_case(load_case(CASES / "c19_given_f32_d2t.toml"))
    (r,) = res.realizations
    fw = r.details["firmware"]
    assert fw["structure"] == "direct2t"
    assert not any("rounding inside the sections is not modelled" in w for w in r.warnings)
    b0, b1, e = np.float32(1.200001), np.float32(-1.199999), np.float32(1.0)
    y = np.float32(50.0)
    s = np.float32(y - b0 * e)
    first = np.float32(b0 * e + s)
    for _ in range(4096):
        y = np.float32(b0 * e + s)
        s = np.float32(b1 * e + y)
    assert y == first  # stalled
    assert fw["stall_error"] > 1.0
    (j,) = [j for j in res.verdict.judgements if j.criterion == "firmware_stall"]
    assert j.status == "fail"


def test_clamp_limits_carry_through_a_single_pole_op_amp_inverter():
    """Zeners across the PI stage's feedback (BV 6.2 V, a forward drop of 0.65 V: 6.85 V by
    arithmetic), then a unity inverter to the output. With ideal op-amps the limits were carried
    to the output (−6.85 … 6.85 V); with single-pole op-amps (OPAMP1P) they were not, and a report
    simulated the card unclamped. The inverter's DC gain with A0 = 2e5 is −1/(1 + 2/A0): the
    limits move by 1e-5 V, far inside the clamp's knee."""
    from convert.circuit.card import analyze_card
    from convert.circuit.netlist import read_netlist

    text = (CASES / "cards" / "pid_meas_d_1p.cir").read_text()
    card = analyze_card(read_netlist(text, "1p.cir"), setpoint="VSP", measurement="VPV", band_hz=(0.01, 5))
    assert card.output_limits == pytest.approx((-6.85, 6.85), abs=1e-9)
