"""The report shows what decided the verdict (issue 10 item 7, the parts that are not Monte Carlo):
no empty z-plane panel and no claimed hold for a circuit-only case, a card's clamp limits shown and
used as the firmware's output limits, the setpoint note only when the path differs, and the failing
criteria beside the FAIL banner. Each test uses the input that showed the defect."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

CASES = Path(__file__).resolve().parent.parent / "cases"
NETLISTS = Path(__file__).resolve().parent / "netlists"


def _evaluate(path: Path, **kw):
    from convert.case import load_case
    from convert.compare.evaluate import evaluate_case

    return evaluate_case(load_case(path), **kw)


@pytest.fixture(scope="module")
def circuit_only():
    return _evaluate(CASES / "firmware_pid_to_opamp.toml", draws=200)


def test_circuit_only_case_has_no_z_plane_panel(circuit_only):
    """Before: the pole-zero figure of firmware_pid_to_opamp.toml (an analog PID to an op-amp
    circuit) had a second, empty z-plane panel. Now one panel, the s-plane."""
    from convert.report.figures import pole_zero_figure

    fig = pole_zero_figure(circuit_only)
    titles = [a.get_title() for a in fig.axes]
    assert titles == ["s-plane (rad/s)"]


def test_mixed_case_keeps_both_planes():
    """A digital target next to an analog source keeps both panels (the rule is 'no empty plane')."""
    from convert.report.figures import pole_zero_figure

    res = _evaluate(CASES / "pi_card_to_firmware.toml")
    titles = [a.get_title() for a in pole_zero_figure(res).axes]
    assert len(titles) == 2 and titles[0].startswith("s-plane") and titles[1].startswith("z-plane")


def test_bode_title_claims_hold_only_with_a_digital_form(circuit_only):
    """Before: the circuit-only Bode figure was titled '(hold and delay included)'."""
    from convert.report.figures import bode_title

    assert "hold" not in bode_title(circuit_only)
    res = _evaluate(CASES / "pi_card_to_firmware.toml")
    assert "hold and delay included" in bode_title(res)


def _clamp_case(tmp_path: Path, limits_line: str = "") -> Path:
    (tmp_path / "card.cir").write_text((NETLISTS / "clamped_pi.cir").read_text())
    case = tmp_path / "clamped.toml"
    case.write_text(f"""
[case]
title = "clamped card to firmware"
[source.netlist]
file = "card.cir"
[target.digital]
fs = "100 Hz"
methods = ["tustin"]
{limits_line}
[plant]
model = "-2/(3s + 1)"
dead_time = "0.2 s"
[signals]
setpoint_step = 1.0
disturbance_step = 1.0
[criteria]
band = ["10 mHz", "1 Hz"]
max_phase_error_deg = 5
max_step_deviation = "5 %"
""")
    return case


def test_card_clamps_become_the_firmware_output_limits(tmp_path):
    """Before: clamped_pi.cir's zeners (±5.35 V across the feedback) and D3 (output ≥ −0.65 V) were
    only a note; the firmware ran unlimited. Now the limits (thresholds summed by hand from the
    netlist: BV 4.7 V + 0.65 V forward drop; one forward drop, common practice for the knee) are in
    the case inputs and bound the firmware's output in the simulation."""
    from convert.report.tables import input_tables

    res = _evaluate(_clamp_case(tmp_path))
    lo, hi = res.source.extra["output_limits"]
    assert lo == pytest.approx(-0.65) and hi == pytest.approx(4.7 + 0.65)
    rows = dict((r[0], r[1]) for r in input_tables(res)[0][2])
    assert "from the card's clamps" in rows["target: firmware"]
    assert "-0.65 … 5.35" in rows["card clamps"]
    (r,) = res.realizations
    assert r.details["output_limits"] == (lo, hi)  # what the firmware is given (results.json, code)
    u = np.concatenate([r.step.u, r.disturbance.u])
    assert u.min() >= lo - 1e-9 and u.max() <= hi + 1e-9
    assert u.min() == pytest.approx(lo) or u.max() == pytest.approx(hi)  # the limit was reached
    assert res.source_step.u.min() >= lo - 1e-9 and res.source_step.u.max() <= hi + 1e-9


def test_target_output_limits_override_the_clamps(tmp_path):
    from convert.report.tables import input_tables

    res = _evaluate(_clamp_case(tmp_path, "output_limits = [-0.5, 3]"))
    rows = dict((r[0], r[1]) for r in input_tables(res)[0][2])
    assert "output limits -0.5 … 3" in rows["target: firmware"]
    assert "from the card's clamps" not in rows["target: firmware"]


def test_card_command_prints_the_clamp_output_limits(run_cli):
    r = run_cli("card", str(NETLISTS / "clamped_pi.cir"), "--no-sensitivity")
    assert r.code == 0
    assert "output limits for the firmware: -0.65 … 5.35 V" in r.out
    j = run_cli("card", str(NETLISTS / "clamped_pi.cir"), "--no-sensitivity", "--json")
    import json

    assert json.loads(j.out)["output_limits"] == pytest.approx([-0.65, 5.35])


PLAIN_ERROR_CARD = """Two-input PI card whose setpoint and measurement meet as a plain error (invented)
VSP sp 0 DC 0
VPV pv 0 DC 0
* difference amplifier: e = sp - pv
R1 pv n 10k
R2 n e 10k
R3 sp p 10k
R4 p 0 10k
X1 p n e OPAMP
* inverting PI, then an inverter
R5 e m 100k
R6 m f 200k
C1 f o1 1u
X2 0 m o1 OPAMP
R7 o1 q 10k
R8 q out 10k
X3 0 q out OPAMP
.end
"""


def _two_input_case(tmp_path: Path, netlist_text: str) -> Path:
    (tmp_path / "card.cir").write_text(netlist_text)
    case = tmp_path / "two.toml"
    case.write_text("""
[source.netlist]
file = "card.cir"
setpoint = "VSP"
measurement = "VPV"
[target.digital]
fs = "100 Hz"
methods = ["tustin"]
[criteria]
band = ["10 mHz", "1 Hz"]
max_phase_error_deg = 5
""")
    return case


def test_setpoint_note_says_differs_only_when_it_does(tmp_path):
    """Before: every two-input card got 'its setpoint path differs (setpoint and measurement meet
    as a plain error ...: b = 1, c = 1)', a contradiction. A card that forms sp − pv first has
    the same setpoint path; the demo flow card (setpoint bypasses the 17.5 Hz measurement filter)
    differs."""
    from convert.case import load_case, source_controller

    same = source_controller(load_case(_two_input_case(tmp_path, PLAIN_ERROR_CARD)))
    note = next(n for n in same.notes if n.startswith("two-input card"))
    assert "differs" not in note and "is the same" in note
    flow = source_controller(load_case(CASES / "netlist_card_to_firmware.toml"))
    note = next(n for n in flow.notes if n.startswith("two-input card"))
    assert "differs" in note


def test_failing_criteria_beside_the_fail_banner():
    """Before: slow_firmware_fails.toml's HTML said 'Verdict: FAIL' and nothing else until the
    verdict table far below. Now each failed criterion is listed under the banner."""
    from convert.report.documents import html_report, markdown_report

    res = _evaluate(CASES / "slow_firmware_fails.toml")
    assert res.verdict.overall == "fail" and res.verdict.failures
    page = html_report(res, {})
    banner = page.index("Verdict: FAIL")
    listed = page.index('<ul class="failed">')
    assert banner < listed < page.index("Cautions")
    block = page[listed : page.index("</ul>", listed)]
    for j in res.verdict.failures:
        assert f"{j.realization}: {j.label}" in block
    assert block.count("<li>") == len(res.verdict.failures)
    md = markdown_report(res)
    assert md.count("- failed: ") == len(res.verdict.failures)


def test_passing_report_lists_no_failures():
    from convert.report.documents import html_report

    res = _evaluate(CASES / "pi_card_to_firmware.toml")
    assert res.verdict.overall == "pass"
    assert 'class="failed"' not in html_report(res, {})
