"""``loopshift code``: files, refusals, exit codes and JSON (in-process, run_cli fixture)."""

from __future__ import annotations

import json

import pytest

FIFTH = "3*(1+1/(20*s))*(1+s/0.5)/(1+s/5)/((s/0.8)^2+s/0.8/0.7+1)/(1+s/0.3)"


def test_writes_c_files_in_the_recommended_structure(run_cli, tmp_path):
    out = tmp_path / "fw"
    r = run_cli(
        "code",
        FIFTH,
        "--fs",
        "5Hz",
        "--format",
        "float",
        "--output-limits",
        "-10",
        "10",
        "--name",
        "card5",
        "--out",
        str(out),
    )
    assert r.code == 0, r.err
    h = (out / "card5.h").read_text()
    assert "card5_state" in h and "float card5_step(card5_state *st, float x);" in h
    assert "void card5_set_output(card5_state *st, float u);" in h
    assert "Structure: sections" in h or "Structure: delta" in h
    assert "direct1" in r.out and "unstable" in r.out  # why the direct form was not used


def test_failing_structure_writes_nothing_and_exits_1(run_cli, tmp_path):
    out = tmp_path / "fw"
    r = run_cli(
        "code",
        FIFTH,
        "--fs",
        "5Hz",
        "--format",
        "float",
        "--structure",
        "direct1",
        "--output-limits",
        "-10",
        "10",
        "--name",
        "card5",
        "--out",
        str(out),
    )
    assert r.code == 1
    assert "not written" in r.out and "1.0001673" in r.out
    assert not out.exists()


def test_existing_files_need_force(run_cli, tmp_path):
    args = ("code", "(0.2s+1)/(0.02s+1)", "--fs", "1kHz", "--name", "lead", "--out", str(tmp_path))
    assert run_cli(*args).code == 0
    (tmp_path / "lead.c").write_text("mine")
    r = run_cli(*args)
    assert r.code == 2 and "--force" in r.err and len(r.err.strip().splitlines()) == 1
    assert (tmp_path / "lead.c").read_text() == "mine"
    assert run_cli(*args, "--force").code == 0


def test_structured_text_and_json(run_cli, tmp_path):
    r = run_cli(
        "code",
        "2*(1+1/(0.5*s))",
        "--fs",
        "100Hz",
        "--lang",
        "st",
        "--format",
        "double",
        "--structure",
        "sections",
        "--name",
        "pi",
        "--out",
        str(tmp_path),
        "--json",
    )
    assert r.code == 0, r.err
    data = json.loads(r.out)
    assert data["structure"] == "sections" and data["realized"]["sos"][0][3] == 1.0
    assert len(data["realized"]["sos"][0]) == 6
    assert (tmp_path / "pi.st").read_text().startswith("(*")


def test_bad_inputs_are_one_line_errors(run_cli, tmp_path):
    cases = [
        ("--format", "q7"),
        ("--lang", "rust"),
        ("--name", "9lives"),
        ("--structure", "ladder"),
        ("--method", "guess"),
    ]
    for opt, val in cases:
        r = run_cli("code", "(s+1)/(0.1s+1)", "--fs", "1kHz", "--out", str(tmp_path), opt, val)
        assert r.code == 2, (opt, r.err)
        assert len(r.err.strip().splitlines()) == 1 and "Traceback" not in r.err
    r = run_cli("code", "(s+1)/(0.1s+1)", "--fs", "1kHz", "--format", "q15", "--out", str(tmp_path))
    assert r.code == 2 and "--input-range" in r.err
    r = run_cli("code", "(s+1)/(0.1s+1)", "--fs", "1kHz", "--lang", "st", "--format", "q15", "--out", str(tmp_path))
    assert r.code == 2 and "Structured Text" in r.err


def test_pid_block_files(run_cli, tmp_path):
    r = run_cli(
        "code",
        "--pid",
        "kc=2",
        "ti=30s",
        "td=5s",
        "n=10",
        "b=0.5",
        "c=0",
        "--fs",
        "10Hz",
        "--pid-block",
        "--anti-windup",
        "track",
        "--output-limits",
        "0",
        "100",
        "--name",
        "tic",
        "--out",
        str(tmp_path),
    )
    assert r.code == 0, r.err
    h = (tmp_path / "tic.h").read_text()
    assert "double tic_step(tic_state *st, double setpoint, double measurement);" in h
    assert "tic_set_output" in h and "tracking time constant" in h
    r = run_cli("code", "1/((s+1)*(s+2)*(s+3))", "--fs", "10Hz", "--pid-block", "--out", str(tmp_path))
    assert r.code == 2 and "not a PID" in r.err


def test_signal_scaling_rescales_the_gain_and_checks_direction(run_cli, tmp_path):
    """Hand calculation: a card working in volts (transmitter 1–5 V across 250 Ω) read by a
    12-bit converter (0–4095 counts) and driving a 0–10 V output from a 12-bit DAC: the
    firmware gain is 2 × (4 V / 4095) × (4095 / 10 V) = 0.8. An inverted input map (4095 at 1 V)
    flips the firmware sign and says so."""
    r = run_cli(
        "code",
        "--pid",
        "kc=2",
        "ti=30s",
        "--fs",
        "10Hz",
        "--pid-block",
        "--input-scale",
        "1V",
        "5V",
        "0",
        "4095",
        "--output-scale",
        "0V",
        "10V",
        "0",
        "4095",
        "--json",
    )
    data = json.loads(r.out)
    assert data["scaled_gains"]["kp"] == pytest.approx(0.8) and data["scaled_gains"]["action"] == "reverse"
    r = run_cli(
        "code",
        "--pid",
        "kc=2",
        "ti=30s",
        "--fs",
        "10Hz",
        "--pid-block",
        "--input-scale",
        "4mA",
        "20mA",
        "4095",
        "0",
        "--output-scale",
        "0V",
        "10V",
        "0",
        "4095",
        "--json",
    )
    data = json.loads(r.out)
    assert data["scaled_gains"]["action"] == "direct" and "inverted" in data["scaling"]
    assert data["scaled_gains"]["kp"] == pytest.approx(2 * 16e-3 / 4095 * 409.5)
    r = run_cli("code", "2*(1+1/(30*s))", "--fs", "10Hz", "--input-scale", "1V", "1V", "0", "4095", "--json")
    assert r.code == 2 and "--input-scale" in r.err


def test_card_clamps_become_the_output_limits(run_cli, tmp_path):
    """A card with a clamp: its clamp limits are offered as the output limits (stated in the
    output and in the generated header); --output-limits overrides them."""
    from pathlib import Path

    card = Path(__file__).parent / "netlists" / "clamped_pi.cir"
    r = run_cli(
        "code", "--card", str(card), "--fs", "100Hz", "--format", "float", "--name", "cpi", "--out", str(tmp_path)
    )
    assert r.code == 0, r.err
    assert "from the card's clamps" in r.out
    assert "Output limits: -0.65 .. 5.35" in (tmp_path / "cpi.h").read_text()
    r = run_cli(
        "code",
        "--card",
        str(card),
        "--fs",
        "100Hz",
        "--format",
        "float",
        "--name",
        "cpi2",
        "--output-limits",
        "-1",
        "1",
        "--out",
        str(tmp_path),
    )
    assert "Output limits: -1 .. 1" in (tmp_path / "cpi2.h").read_text()


def test_digital_prints_the_structure_and_its_verdict(run_cli):
    """`loopshift digital` names the structure and judges it: float32 direct form of our
    fifth-order card controller is unstable, the delta form is not (and its quantization error
    over the default band is small: the band stops a hair below fs/2, where a zero at z = -1
    makes relative errors meaningless)."""
    base = (
        "digital",
        FIFTH,
        "--fs",
        "5Hz",
        "--method",
        "tustin",
        "--word-format",
        "float32",
        "--output-limits",
        "-10",
        "10",
    )
    r = run_cli(*base)
    assert r.code == 0 and "structure: direct1" in r.out and "FAILS: unstable" in r.out
    r = run_cli(*base, "--structure", "delta")
    assert "structure: delta" in r.out and "ok: stable" in r.out
    line = next(x for x in r.out.splitlines() if "quantization alone" in x)
    assert float(line.split("alone ")[1].split(" dB")[0]) < 0.1
    r = run_cli(*base, "--structure", "ladder")
    assert r.code == 2 and "--structure" in r.err


def test_pid_block_fixed_point_and_structured_text(run_cli, tmp_path):
    """As a user: a steam-header pressure PID (our own) as a Q15 block with inputs within 0–16 bar
    and a 0–100 % output, then as a Structured Text velocity block; the float32 block at the same
    output level fails its stall check (half an ulp of 100 over ki·T = 0.0075: 5.1e-4 > 16/2^15)
    and writes nothing (exit 1); Q15 without an input range is refused in one line."""
    common = ["--pid", "kc=1.8", "ti=12s", "td=0.8s", "n=8", "b=0.7", "c=0", "--fs", "20Hz", "--pid-block"]
    lim = ["--output-limits", "0", "100"]
    r = run_cli(
        "code", *common, *lim, "--format", "q15", "--input-range", "0", "16", "--name", "hdr", "--out", str(tmp_path)
    )
    assert r.code == 0, r.err
    assert "int16_t hdr_step(hdr_state *st, int16_t setpoint, int16_t measurement);" in (tmp_path / "hdr.h").read_text()
    assert "structure used: PID block (positional) in q15" in r.out
    r = run_cli("code", *common, *lim, "--lang", "st", "--velocity", "--name", "hdst", "--out", str(tmp_path))
    assert r.code == 0, r.err
    assert "FUNCTION_BLOCK hdst" in (tmp_path / "hdst.st").read_text()
    r = run_cli(
        "code",
        *common,
        *lim,
        "--format",
        "float",
        "--input-range",
        "0",
        "16",
        "--name",
        "f32",
        "--out",
        str(tmp_path),
        "--json",
    )
    data = json.loads(r.out)
    assert r.code == 1 and not data["ok"] and not (tmp_path / "f32.c").exists()
    assert (
        2.0**-18 / 0.0075 <= data["analysis"]["stall_error"] <= 1.06 * 2.0**-18 / 0.0075
    )  # half an ulp of 100 / (ki T)
    r = run_cli("code", *common, *lim, "--format", "q15", "--out", str(tmp_path))
    assert r.code == 2 and "--input-range" in r.err and len(r.err.strip().splitlines()) == 1


# ----------------------------------------------------------------------------- options that do not apply
@pytest.mark.parametrize(
    "extra, option",
    [
        (["--method", "zoh", "--prewarp", "10Hz"], "--prewarp"),
        (["--velocity"], "--velocity"),
        (["--anti-windup", "track"], "--anti-windup"),
        (["--pid-block", "--method", "zoh"], "--method"),
        (["--pid-block", "--structure", "sections"], "--structure"),
        (["--pid-block", "--derivative-filter", "10"], "--derivative-filter"),
        (["--pid-block", "--tracking-time", "3s"], "--tracking-time"),
    ],
)
def test_an_option_the_code_would_ignore_is_refused(run_cli, tmp_path, extra, option):
    """Before: `code ... --method zoh --prewarp 10Hz` wrote ZOH code and dropped the prewarp in
    silence (the digital command refuses it). Every option the chosen kind of code would ignore
    is now a one-line error naming it, exit 2, and nothing is written (common practice: a
    setting the user typed is never dropped without a word)."""
    out = tmp_path / "fw"
    r = run_cli("code", "--pid", "kc=2", "ti=30s", "--fs", "10Hz", "--name", "lvl", "--out", str(out), *extra)
    assert r.code == 2
    assert option in r.err and "Traceback" not in r.err
    assert len(r.err.strip().splitlines()) == 1
    assert not out.exists()


def test_linear_code_of_an_integrating_controller_warns_of_no_anti_windup(run_cli, tmp_path):
    """The linear structures clamp nothing inside: the header of an integrating controller's code
    says so and points to the PID block (reviewer finding: the state wound to the integrator's
    full scale and the output stayed at its limit for 20 s after the error changed sign)."""
    out = tmp_path / "fw"
    r = run_cli(
        "code", "2*(1+1/(0.5s))", "--fs", "100Hz", "--output-limits", "0", "100", "--name", "heat", "--out", str(out)
    )
    assert r.code == 0, r.err
    header = (out / "heat.h").read_text()
    assert "No anti-windup" in header and "--pid-block" in header
    r = run_cli("code", "(0.5s+1)/(0.05s+1)", "--fs", "100Hz", "--name", "lead", "--out", str(out))
    assert r.code == 0, r.err
    assert "No anti-windup" not in (out / "lead.h").read_text()  # nothing integrates, nothing winds up
