"""``loopshift card``: netlist and topology+parts to the controller, text and JSON, errors exit 2."""

from __future__ import annotations

import json
import pathlib

import pytest

HERE = pathlib.Path(__file__).parent / "netlists"


def test_text_output_has_all_forms(run_cli):
    """Closed form (common practice) for tests/netlists/pi_card.cir: −4.7 − 10/s, i.e. kp = 4.7,
    ki = 10 /s, direct action (the card inverts)."""
    r = run_cli("card", str(HERE / "pi_card.cir"))
    assert r.code == 0, r.err
    assert "(-4.7*s - 10) / (s)" in r.out
    assert "kp = 4.7" in r.out and "ki = 10 /s" in r.out
    assert "Sensitivity" in r.out and "R2" in r.out
    assert ".ac ignored" in r.out
    assert "does not certify" in r.out


def test_json_fields(run_cli):
    """Issue 5 item 7: JSON has num/den (descending s), zeros, poles, gain and the sensitivities;
    the closed-form values are those of test_text_output_has_all_forms."""
    r = run_cli("card", str(HERE / "pi_card.cir"), "--json")
    assert r.code == 0, r.err
    data = json.loads(r.out)
    assert data["num"] == pytest.approx([-4.7, -10.0]) and data["den"] == pytest.approx([1.0, 0.0])
    assert data["gain"] == pytest.approx(-4.7)
    assert len(data["poles"]) == 1 and data["poles"][0]["re"] == pytest.approx(0.0, abs=1e-12)
    rows = {row["part"]: row["effects_percent_per_percent"] for row in data["sensitivities"]}
    assert rows["R2"]["kp"] == pytest.approx(1.0, abs=1e-5)
    assert data["card"]["inputs"] == ["VIN"] and data["card"]["output"] == "out"


def test_two_inputs_and_clamps(run_cli):
    """Two-input card (closed form in tests/test_mna_core.py): c = 0, b = R2/(Rsp·kp); clamps listed."""
    r = run_cli("card", str(HERE / "sp_pv_card.cir"), "--setpoint", "VSP", "--measurement", "VPV", "--json")
    assert r.code == 0, r.err
    data = json.loads(r.out)
    st = data["setpoint_structure"]
    assert st["c"] == 0.0 and st["b"] == pytest.approx(1.5 / data["pid"]["parallel"]["kp"])
    assert "must reproduce" in st["description"]
    r = run_cli("card", str(HERE / "clamped_pi.cir"))
    assert r.code == 0 and "Clamps" in r.out and "5.35 V" in r.out and "anti-windup" in r.out


def test_input_output_options(run_cli, tmp_path):
    """--input/--output name the source and node (names are case-insensitive, SPICE convention)."""
    f = tmp_path / "c.cir"
    f.write_text("t\nVERR e 0\nR1 e n 10k\nR2 n u1 20k\nX1 0 n u1 OPAMP\n")
    r = run_cli("card", str(f), "--input", "verr", "--output", "u1", "--json", "--no-sensitivity")
    assert r.code == 0, r.err
    assert json.loads(r.out)["num"] == pytest.approx([-2.0])


@pytest.mark.parametrize(
    "args, pattern",
    [
        (["card"], "give a netlist file"),
        (["card", "NOFILE.cir"], "NOFILE.cir: no such file"),
        (["card", str(HERE / "pi_card.cir"), "--setpoint", "VSP"], "give both --setpoint and --measurement"),
        (["card", str(HERE / "pi_card.cir"), "--output", "nowhere"], "output node 'nowhere' not found"),
        (["card", str(HERE / "pi_card.cir"), "--part", "R1=1k"], "--part goes with --topology"),
        (["card", "--topology", "no-such-thing", "--part", "R1=1k"], "unknown topology"),
        (["card", "--topology", "pi-rc-feedback", "--part", "R1=4k7", "R2=1k", "C1=1u"], "R1"),
        (["card", "--topology", "pi-rc-feedback", "--part", "R1"], "expected NAME=VALUE"),
    ],
)
def test_errors_exit_2_one_line(run_cli, args, pattern):
    """DESIGN.md §4: bad input is one line on stderr, exit code 2, no traceback."""
    r = run_cli(*args)
    assert r.code == 2
    assert pattern in r.err and "Traceback" not in r.err
    assert len([line for line in r.err.splitlines() if line.strip()]) == 1


def test_bad_netlist_error_names_line(run_cli, tmp_path):
    """Issue 5 item 6 through the CLI: file:line: element: what."""
    f = tmp_path / "bad.cir"
    f.write_text("t\nVIN in 0\nR1 in out 4k7\n")
    r = run_cli("card", str(f))
    assert r.code == 2 and "bad.cir:3: R1:" in r.err


def test_topology_and_parts(run_cli):
    """Issue 4 item 7 via this command: the catalog's PI with series R-C feedback, closed form
    (common practice) F(s) = R2/R1 + 1/(R1 C1 s): kp = 4.7, ki = 10 /s with R1 = 100k, R2 = 470k, C1 = 1µ."""
    pytest.importorskip("convert.circuit.topologies")
    r = run_cli("card", "--topology", "pi-rc-feedback", "--part", "R1=100k", "R2=470k", "--part", "C1=1u", "--json")
    assert r.code == 0, r.err
    data = json.loads(r.out)
    assert data["pid"]["parallel"]["kp"] == pytest.approx(4.7)
    assert data["pid"]["parallel"]["ki_per_s"] == pytest.approx(10.0)
    rows = {row["part"]: row["effects_percent_per_percent"] for row in data["sensitivities"]}
    assert rows["C1"]["ki (1/s)"] == pytest.approx(-1.0, abs=1e-5)
    r = run_cli("card", "--topology", "pi-rc-feedback", "--part", "R1=100k", "R2=470k", "C1=1u")
    assert r.code == 0 and "inverts" in r.out


def test_topology_matches_netlist_of_same_card(run_cli):
    """The same PI read two ways (catalog formula vs nodal analysis of pi_card.cir) agree, up to
    the stage's inverting sign."""
    pytest.importorskip("convert.circuit.topologies")
    a = json.loads(
        run_cli(
            "card",
            "--topology",
            "pi-rc-feedback",
            "--part",
            "R1=100k",
            "R2=470k",
            "C1=1u",
            "--json",
            "--no-sensitivity",
        ).out
    )
    b = json.loads(run_cli("card", str(HERE / "pi_card.cir"), "--json", "--no-sensitivity").out)
    assert a["num"] == pytest.approx([-x for x in b["num"]]) and a["den"] == pytest.approx(b["den"])


def test_help_has_examples(run_cli):
    """Preamble: help texts explain every option with an example."""
    r = run_cli("card", "--help")
    assert r.code == 0
    for option in ("--input", "--output", "--setpoint", "--measurement", "--topology", "--part", "--json"):
        assert option in r.out
    assert "examples:" in r.out
