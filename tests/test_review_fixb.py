"""Regressions for the user review's findings on inputs and messages (lane fixB): each test runs
the exact input the reviewer gave (or the smallest one showing the same fault) and checks the
exit code and the one-line message. Facts of the trade used are marked "common practice"."""

from __future__ import annotations

import numpy as np
import pytest

CARD = "card: topology=pi-rc-feedback R1=100k R2=200k C1=5.5u"


def _one_line_error(res, *words):
    assert res.code == 2, res.out + res.err
    lines = [line for line in res.err.strip().splitlines() if line]
    assert len(lines) == 1, res.err
    assert "Traceback" not in res.err and "internal error" not in res.err
    for w in words:
        assert w in lines[0], lines[0]
    return lines[0]


# SEVERE 3: a percentage option given a bare number above 1 ----------------------------------


@pytest.mark.parametrize("option", ["--max-step-deviation", "--max-disturbance-deviation"])
def test_compare_refuses_a_bare_percentage_above_one(option, run_cli):
    """Reviewer: ``--max-step-deviation 5`` was read as 500 % and the pair passed. A bare number
    above 1 in a percentage field is ambiguous by a factor of 100 (the case-file rule,
    docs/values.md): refused naming the option and both readings."""
    res = run_cli(
        "compare",
        "pid: kc=2 ti=10s",
        "pid: kc=2 ti=10s fs=0.5Hz delay=1sample",
        "--plant",
        "1/(20s+1)",
        option,
        "5",
        "--max-gain-error",
        "3",
        "--max-phase-error",
        "60",
        "--band",
        "1m",
        "0.05",
    )
    line = _one_line_error(res, option, "500 %", "5 %")
    assert "ambiguous" in line


def test_compare_reads_a_percent_and_a_fraction_the_same(run_cli):
    """``5%`` and ``0.05`` are the same limit: the JSON carries 0.05 either way."""
    import json

    outs = []
    for text in ("5%", "0.05"):
        res = run_cli(
            "compare",
            "pid: kc=2 ti=10s",
            "pid: kc=2 ti=10s fs=0.5Hz delay=1sample",
            "--plant",
            "1/(20s+1)",
            "--max-step-deviation",
            text,
            "--band",
            "1m",
            "0.05",
            "--json",
        )
        assert res.code in (0, 1), res.err
        data = json.loads(res.out)
        outs.append([j["limit"] for j in data["judgements"] if j["criterion"] == "max_step_deviation"])
    assert outs[0] == outs[1] and outs[0] and all(x == pytest.approx(0.05) for x in outs[0])


def _ramp_log(tmp_path):
    """A constant error of 1 and the ramp a PI with kc = 2, ti = 10 s answers it with (2 + 0.2 t)."""
    log = tmp_path / "log.csv"
    t = np.arange(0, 20, 0.1)
    log.write_text("time (s),error,output\n" + "".join(f"{x:.2f},1,{2 + 0.2 * x:.4f}\n" for x in t))
    return log


@pytest.mark.parametrize("option", ["--max-residual-rms", "--max-residual-peak"])
def test_compare_log_limits_refuse_a_bare_percentage(option, run_cli, tmp_path):
    """The log replay limits are fractions of the output range: ``2`` is refused as 200 % or 2 %."""
    log = _ramp_log(tmp_path)
    res = run_cli("compare", "pid: kc=2 ti=10s", "--log", str(log), option, "2")
    _one_line_error(res, option, "200 %", "2 %")


def test_card_tolerance_in_a_spec_refuses_a_bare_percentage(run_cli):
    """``tol=R:5`` on a card is 5 % or 500 %: refused naming the key, as ``--tolerance R=5``."""
    res = run_cli("compare", "2*(1+1/s)", CARD + " tol=R:5")
    _one_line_error(res, "tol", "500 %", "5 %")


def test_case_file_residual_limit_refuses_a_bare_percentage(run_cli, tmp_path):
    """Case files follow the same rule for the log evidence limits."""
    _ramp_log(tmp_path)
    case = tmp_path / "c.toml"
    case.write_text(
        '[source.pid]\nkc = 2\nti = "10 s"\n[target.digital]\nfs = "10 Hz"\n'
        '[criteria]\nband = ["10 mHz", "1 Hz"]\nmax_gain_error_db = 1\n'
        '[evidence.log]\nfile = "log.csv"\nmax_residual_rms = 3\n'
    )
    res = run_cli("report", str(case), "--out", str(tmp_path / "out"))
    _one_line_error(res, "max_residual_rms", "300 %", "3 %")
    assert not (tmp_path / "out").exists()


# BUG 8: batch with a given form whose loop is unstable -----------------------------------------

GIVEN_UNSTABLE = """\
[source.pid]
kc = 4
ti = "2 s"
[target.given.fw]
form = "digital"
b = [4.05, -3.95]
a = [1, -1]
fs = "20 Hz"
delay = "12 samples"
[plant]
model = "1/(s+1)"
dead_time = "0.1 s"
[criteria]
band = ["10 mHz", "1 Hz"]
max_gain_error_db = 1
"""


def test_batch_names_an_unstable_given_loop_instead_of_an_internal_error(run_cli, tmp_path):
    """Reviewer's given.toml: twelve samples of delay at 20 Hz (0.6 s) plus 0.1 s dead time
    make the loop with kc = 4 unstable (common practice: the phase lag ω·T at the crossover
    passes 180°). ``report`` said FAIL; ``batch`` crashed formatting the missing figure."""
    folder = tmp_path / "cases"
    folder.mkdir()
    (folder / "given.toml").write_text(GIVEN_UNSTABLE)
    res = run_cli("batch", str(folder), "--out", str(tmp_path / "out"), "--workers", "1")
    assert res.code == 1, res.out + res.err
    assert "internal error" not in res.out + res.err
    assert "fw: closed-loop stability fails" in res.out
    report = run_cli("report", str(folder / "given.toml"), "--out", str(tmp_path / "one"))
    assert report.code == 1


# BUG 9: compare --sweep with nothing judged ----------------------------------------------------


def _sweep(path, f):
    s = 2j * np.pi * f
    h = 2 * (1 + 1 / (1.1 * s))
    path.write_text(
        "frequency (Hz),gain (dB),phase (deg)\n"
        + "".join(f"{ff:.6g},{20 * np.log10(abs(x)):.6g},{np.degrees(np.angle(x)):.6g}\n" for ff, x in zip(f, h))
    )
    return path


def test_sweep_band_wider_than_the_sweep_is_not_judged_without_an_error(run_cli, tmp_path):
    """A band from 1 mHz with a sweep from 10 mHz cannot be judged: the text output says so
    (as --json did), verdict unchecked, no internal error."""
    csv = _sweep(tmp_path / "s.csv", np.logspace(-2, 1, 31))
    res = run_cli(
        "compare", "card: topology=pi-rc-feedback R1=100k R2=200k C1=5.5u", "--sweep", str(csv), "--band", "1m", "100"
    )
    assert res.code == 1, res.out + res.err
    assert "internal error" not in res.out + res.err
    assert "max gain error: no figure (limit 1) NOT JUDGED" in res.out
    assert "verdict: UNCHECKED" in res.out


def test_sweep_with_no_trusted_point_is_not_judged_without_an_error(run_cli, tmp_path):
    """Three points give no noise estimate, so none is trusted (reviewer's short.csv)."""
    csv = _sweep(tmp_path / "short.csv", np.array([0.01, 0.0125893, 0.0158489]))
    res = run_cli("compare", CARD, "--sweep", str(csv))
    assert res.code == 1, res.out + res.err
    assert "internal error" not in res.out + res.err
    assert "NOT JUDGED" in res.out and "verdict: UNCHECKED" in res.out


# BUG 11: tolerances on the reference A ---------------------------------------------------------


def test_compare_refuses_tolerances_on_the_reference_card(run_cli):
    """docs/compare.md: A is taken as written, tolerances belong to B. They were silently
    dropped for a catalog card (a PASS that said nothing about them)."""
    res = run_cli("compare", "card: topology=pi-rc-feedback R1=100k R2=200k C1=5u tol=R:1%", "2*(1+1/s)")
    _one_line_error(res, "A", "tol", "swap A and B")
    swapped = run_cli("compare", "2*(1+1/s)", "card: topology=pi-rc-feedback R1=100k R2=200k C1=5u tol=R:1%")
    assert swapped.code in (0, 1) and "tolerance" in swapped.out.lower()


# lead: loopshift code when no structure is usable ----------------------------------------------


def test_code_with_no_usable_structure_says_so(run_cli, tmp_path):
    """q15 at 50 Hz with ti = 8 s and a 0..10 output: the integrator stalls in every structure
    (each step adds kc·e/(ti·fs), below one q15 step for small errors; common practice). No
    file is written and the reason is printed, exit 1, not an internal error."""
    out = tmp_path / "codeout"
    res = run_cli(
        "code",
        "1.5*(1+1/(8*s))",
        "--fs",
        "50Hz",
        "--method",
        "tustin",
        "--lang",
        "c",
        "--format",
        "q15",
        "--name",
        "heater",
        "--out",
        str(out),
        "--input-range",
        "-10",
        "10",
        "--output-limits",
        "0",
        "10",
    )
    assert res.code == 1, res.out + res.err
    assert "internal error" not in res.out + res.err
    assert "not written: no structure is usable in q15" in res.out
    assert "integrator stall" in res.out
    assert not out.exists()


# ROUGH 13: a bare number as a delay ----------------------------------------------------------

BARE_DELAY = """\
[source]
expression = "2*(1+1/(10s))"
[target.digital]
fs = 10
delay = 1
[plant]
model = "1/(20s+1)"
dead_time = 2
[criteria]
band = [0.001, 0.5]
max_gain_error_db = 1
"""


def test_case_file_bare_delay_is_refused_as_seconds_or_samples(run_cli, tmp_path):
    """Reviewer's bare.toml: ``delay = 1`` at 10 Hz was read as 1 s (ten samples). A
    computation delay is as often counted in samples as timed (common practice), so a bare
    number is refused naming the key and both readings; docs/case-files.md defines only
    "20 ms" and "1 sample"."""
    case = tmp_path / "bare.toml"
    case.write_text(BARE_DELAY)
    res = run_cli("report", str(case), "--out", str(tmp_path / "out"))
    _one_line_error(res, "bare.toml:5", "target.digital.delay", "1 s", "1 sample")
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize(
    "argv",
    [
        ("digital", "2*(1+1/(10s))", "--fs", "10Hz", "--delay", "0.02"),
        ("compare", "2*(1+1/(10s))", "digital: b=2.1,-1.9 a=1,-1 fs=10Hz delay=1"),
    ],
)
def test_command_line_bare_delay_is_refused(argv, run_cli):
    """The same rule for ``--delay`` and a spec's ``delay=``; a bare 0 stays accepted."""
    line = _one_line_error(run_cli(*argv), "ambiguous in a delay", " s or ")
    assert "sample" in line
    zero = [w.replace("0.02", "0") if w == "0.02" else w.replace("delay=1", "delay=0") for w in argv]
    assert run_cli(*zero).code in (0, 1)


# ROUGH 14: an UNCHECKED case advises no rate --------------------------------------------------

ONLY_LOOP_CRITERIA = """\
[source]
expression = "3*(1+1/(4s))"
[target.digital]
fs = "2 Hz"
methods = ["forward-euler"]
[criteria]
band = ["10 mHz", "0.5 Hz"]
max_step_deviation = "5 %"
max_phase_margin_change_deg = 3
"""


def test_unchecked_case_prints_no_lowest_passing_rate(run_cli, tmp_path):
    """Reviewer's onlystep.toml: loop criteria without a plant check nothing, so the verdict is
    UNCHECKED; the rate advice said "lowest rate that passes 1.025 Hz". Nothing can pass where
    nothing is checked (definition)."""
    import json

    case = tmp_path / "onlystep.toml"
    case.write_text(ONLY_LOOP_CRITERIA)
    res = run_cli("report", str(case), "--out", str(tmp_path / "out"))
    assert "UNCHECKED" in res.out
    assert "lowest rate that passes" not in res.out
    assert "lowest rate that passes" not in (tmp_path / "out" / "report.md").read_text()
    advice = json.loads((tmp_path / "out" / "results.json").read_text())["rate_advice"]
    assert advice and all(a["checked_fs_hz"] is None and a["checked"] is False for a in advice)
    assert "nothing checked" in advice[0]["limiting"]


# ROUGH 15: a missing netlist on the command line -----------------------------------------------


def test_missing_netlist_on_the_command_line_does_not_mention_a_case_file(run_cli, tmp_path, monkeypatch):
    """Without a case file the message must not say paths are relative to one."""
    monkeypatch.chdir(tmp_path)
    line = _one_line_error(run_cli("compare", "pid: kc=2 ti=10s", "netlist: nofile.cir"), "B", "nofile.cir")
    assert "case file" not in line and "current folder" in line


def test_missing_netlist_in_a_case_file_names_the_case_file(run_cli, tmp_path):
    case = tmp_path / "c.toml"
    case.write_text(
        '[source.pid]\nkc = 2\nti = "10 s"\n[target.given.card]\nform = "circuit"\nnetlist = "nofile.cir"\n'
        '[criteria]\nband = ["10 mHz", "1 Hz"]\nmax_gain_error_db = 1\n'
    )
    _one_line_error(
        run_cli("report", str(case), "--out", str(tmp_path / "o")), "nofile.cir", "relative to the case file"
    )


# ROUGH 16: a forced cascade of one stage -------------------------------------------------------


def test_forced_cascade_of_one_stage_reads_as_one_stage(run_cli):
    """``--topology cascade`` on a PID one stage realizes: no "1 stages", no "noise gain 0"
    (the noise gain between stages needs two of them), and no claim that no single stage can."""
    res = run_cli("circuit", "--pid", "kc=3", "ti=8s", "td=1.5s", "n=6", "form=series", "--topology", "cascade")
    assert res.code == 0, res.out + res.err
    text = " ".join(res.out.split())
    assert "cascade of 1 stage:" in text and "1 stages" not in text
    assert "noise gain (sum" not in text
    assert "no single catalog stage realizes" not in text and "a cascade was asked for" in text


# ROUGH 17: prewarp above fs/2 in a case file ---------------------------------------------------


def test_case_file_prewarp_above_nyquist_names_the_prewarp_key(run_cli, tmp_path):
    """Reviewer: the refusal named target.digital.methods. The Tustin prewarp frequency must be
    below fs/2 (tan(π·f/fs) is undefined at fs/2; textbook definition of prewarping)."""
    case = tmp_path / "pw.toml"
    case.write_text(
        '[source]\nexpression = "2*(1+1/(10s))"\n[target.digital]\nfs = ["20 Hz", "10 Hz"]\n'
        'methods = ["tustin"]\nprewarp = "8 Hz"\n[criteria]\nband = ["10 mHz", "1 Hz"]\n'
        "max_gain_error_db = 1\n"
    )
    _one_line_error(
        run_cli("report", str(case), "--out", str(tmp_path / "o")),
        "pw.toml:6",
        "target.digital.prewarp",
        "5 Hz",
        "8 Hz",
    )


# ROUGH 20: too few Monte Carlo draws for the percentiles reported ----------------------------


@pytest.mark.parametrize(
    "argv",
    [
        ("compare", "2*(1+1/s)", "card: topology=pi-rc-feedback R1=100k R2=200k C1=5u tol=R:1%", "--draws", "1"),
        ("circuit", "2*(1+1/(3s))", "--draws", "10"),
        ("report", "cases/pi_card_to_firmware.toml", "--draws", "1"),
        ("batch", "cases", "--draws", "199"),
    ],
)
def test_draws_below_the_percentile_minimum_are_refused(argv, run_cli):
    """Reviewer: --draws 1 gave a figure labelled "p99 of draws". A 0.5 % tail holds a draw
    only from 1/0.005 = 200 draws (definition of an empirical percentile); fewer are refused
    on every command, as in case files."""
    from pathlib import Path

    root = Path(__file__).resolve().parents[1]
    argv = tuple(str(root / w) if w.startswith("cases") else w for w in argv)
    _one_line_error(run_cli(*argv), "--draws", "200")


def test_case_file_draws_below_the_minimum_are_refused(run_cli, tmp_path):
    case = tmp_path / "d.toml"
    case.write_text(
        '[source.pid]\nkc = 2\nti = "10 s"\n[target.circuit]\ndraws = 150\n'
        '[criteria]\nband = ["1 mHz", "1 Hz"]\nmax_gain_error_db = 1\n'
    )
    _one_line_error(
        run_cli("report", str(case), "--out", str(tmp_path / "o")), "d.toml:5", "target.circuit.draws", "200", "150"
    )


def test_two_hundred_draws_are_accepted(run_cli):
    res = run_cli(
        "compare", "2*(1+1/s)", "card: topology=pi-rc-feedback R1=100k R2=200k C1=5u tol=R:1%", "--draws", "200"
    )
    assert res.code in (0, 1), res.err


# ROUGH 22: an op-amp without feedback -----------------------------------------------------------


def test_opamp_without_feedback_names_the_opamp_line(run_cli, tmp_path):
    """An ideal op-amp with nothing from its output back to its inputs has no solution (its
    output is undefined; common practice). The load R6, written before X1, was named; the
    element that drives the undetermined node is the one to check."""
    cir = tmp_path / "nofb.cir"
    cir.write_text(
        "* PI card with its feedback network left off\nVIN in 0 AC 1\nR1 in n1 100k\nR6 out 0 10k\n"
        "X1 0 n1 out OPAMP\n.end\n"
    )
    line = _one_line_error(run_cli("card", str(cir)), "nofb.cir:5: X1:", "singular")
    assert "R6" not in line


# ROUGH 23: a log whose output never moved ---------------------------------------------------------


def test_log_whose_output_never_moved_is_refused_naming_the_column(run_cli, tmp_path):
    """Reviewer's log_manual.csv: the error moves, the output stays at 30 (the loop in manual).
    The replay printed "offset 30 (0 % of range)" and a FAIL over 1 row; nothing in such a log
    shows how the controller responds, so it is refused as evidence, saying why."""
    t = np.arange(0, 200, 0.1)
    e = np.sin(2 * np.pi * t / 80)
    log = tmp_path / "log_manual.csv"
    log.write_text("time (s),error,output\n" + "".join(f"{a:.2f},{b:.5f},30.0\n" for a, b in zip(t, e)))
    line = _one_line_error(
        run_cli("compare", "pid: kc=2 ti=10s", "--log", str(log), "--max-residual-rms", "1%"),
        "log_manual.csv",
        "'output' never moves",
        "30 in all 2,000 rows",
    )
    assert "manual" in line
