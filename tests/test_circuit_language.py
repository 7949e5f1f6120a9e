"""The circuit speaks the user's language (issue 10 item 6): a series PID's quantities named K′,
Ti′, Td′ in the assignment the user gave; direct action realized in every single-input topology
(inverter added) as docs/circuits.md promises; an out-of-range part named by the front end's own
setting (case key or option). Each test starts from the input that failed before."""

from __future__ import annotations

import json

import numpy as np
import pytest

from convert.circuit.design import DesignOptions, design_circuit
from convert.controller import from_expression
from convert.pid import pid_from_words


def _series(words):
    st = pid_from_words(words)
    return st, design_circuit(st.to_controller(), DesignOptions(topology="pid-single-amp"), settings=st)


def test_series_pid_is_built_in_the_assignment_given(run_cli):
    """Before: `circuit --pid kc=0.5 ti=3s td=1s tf=0.02s form=series` silently built the other
    assignment of the zeros (K′ = 0.1667, Ti′ = 1 s, Td′ = 3 s: it rounds better) and named the
    quantities k, ti_series, td_series. Now the parts set K′ = 0.5, Ti′ = 3 s, Td′ = 1 s as given,
    the JSON names them kc', ti', td', and a note says the other assignment gives better parts."""
    r = run_cli("circuit", "--pid", "kc=0.5", "ti=3s", "td=1s", "tf=0.02s", "form=series", "--draws", "0", "--json")
    assert r.code == 0, r.err
    data = json.loads(r.out)
    q = data["design_quantities"]
    assert q["kc'"] == pytest.approx(0.5) and q["ti'"] == pytest.approx(3.0) and q["td'"] == pytest.approx(1.0)
    assert not {"k", "ti_series", "td_series"} & set(q)
    assert any("as in the series settings as given" in n for n in data["notes"])
    better = [n for n in data["notes"] if "other assignment" in n]
    assert len(better) == 1 and "Ti′ = 1 s, Td′ = 3 s" in better[0]
    roles = {name: p["role"] for name, p in data["parts"].items()}
    assert "Ti′ = R2·C2" in roles["C2"] and "Td′ = (R1+R3)·C1" in roles["C1"] and "K′ = R2/R1" in roles["R1"]
    assert set(data["errors"]["rounding"]["quantities"]) >= {"kc'", "ti'", "td'"}


def test_the_two_assignments_are_one_transfer_function():
    """K′(1 + 1/(Ti′s))(1 + Td′s)/(Tf s + 1) with Ti′, Td′ swapped and K′ scaled by Ti′/Td′ is the same
    polynomial ratio (expanded by numpy.polymul; an identity of the series form, common practice)."""
    st, d = _series(["kc=0.5", "ti=3s", "td=1s", "tf=0.02s", "form=series"])
    k, ti, td, tf = 0.5, 3.0, 1.0, 0.02
    f = np.geomspace(0.01, 100, 30)
    s = 2j * np.pi * f
    mine = st.to_controller().frequency_response(f)
    for kk, a, b in ((k, ti, td), (k * td / ti, td, ti)):
        num = kk * np.polymul([a, 1.0], [b, 1.0])
        den = np.polymul([a, 0.0], [tf, 1.0])
        assert np.allclose(np.polyval(num, s) / np.polyval(den, s), mine, rtol=1e-12)
    # and the design offered both assignments (the other one is named in the note)
    assert any("K′ = 0.1667, Ti′ = 1 s, Td′ = 3 s" in n for n in d.notes)


def test_series_settings_with_ti_below_td_keep_their_assignment(run_cli):
    """Before: `show --pid kc=0.5 ti=0.7s td=4s tf=0.02s form=series` printed the series form as
    K′ = 2.857, Ti′ = 4 s, Td′ = 0.7 s (Ti′ ≥ Td′ always), not the settings typed. Now `show` and
    the circuit both keep Ti′ = 0.7 s, Td′ = 4 s."""
    r = run_cli("show", "--pid", "kc=0.5", "ti=0.7s", "td=4s", "tf=0.02s", "form=series", "--json")
    series = json.loads(r.out)["pid"]["series"]
    assert (
        series["kc"] == pytest.approx(0.5)
        and series["ti_s"] == pytest.approx(0.7)
        and series["td_s"] == pytest.approx(4)
    )
    _, d = _series(["kc=0.5", "ti=0.7s", "td=4s", "tf=0.02s", "form=series"])
    assert d.params["ti'"] == pytest.approx(0.7) and d.params["td'"] == pytest.approx(4.0)


def test_expression_input_uses_the_assignment_show_prints():
    """Without series settings, the assignment is the one `show` prints (Ti′ ≥ Td′)."""
    d = design_circuit(
        from_expression("0.5*(1 + 1/(3*s))*(1 + 1*s)/(0.02*s + 1)"), DesignOptions(topology="pid-single-amp")
    )
    assert d.params["ti'"] == pytest.approx(3.0) and d.params["td'"] == pytest.approx(1.0)


TARGETS = {  # single-input topologies and a target each realizes (our own numbers)
    "unity-inverter": "1",
    "inverting-gain": "2.5",
    "integrator-rc": "1/(3*s)",
    "first-order-lag": "2/(0.5*s+1)",
    "pi-rc-feedback": "2*(1+1/(3*s))",
    "pd-limited": "2 + 0.5*s/(0.05*s+1)",
    "lead-lag-rc": "2*(0.5*s+1)/(0.05*s+1)",
    "pid-single-amp": "2*(1+1/(3*s))*(1+0.5*s)/(0.05*s+1)",
    "pid-parallel": "2 + 1/s + 0.5*s/(0.05*s+1)",
    "tow-thomas": "(s^2+2*s+100)/(s^2+20*s+100)",
    "mfb-low-pass": "2500/(s^2+20*s+2500)",
    "mfb-band-pass": "20*s/(s^2+20*s+2500)",
}


def test_every_single_input_topology_is_listed():
    from convert.circuit.topologies import TOPOLOGIES

    assert set(TARGETS) == {n for n, t in TOPOLOGIES.items() if not t.two_input}


@pytest.mark.parametrize("name", sorted(TARGETS))
@pytest.mark.parametrize("sign", [1, -1], ids=["reverse", "direct"])
def test_either_action_in_every_topology(name, sign):
    """docs/circuits.md: 'the target's sign is kept; when it differs from the stage's, a unity
    inverter follows the stage'. Before: pid-parallel refused every direct-acting target
    ('needs kp >= 0 ... kp=-2') and unity-inverter crashed with a ValueError. Now each topology
    realizes both actions; the built controller has the target's sign (phase within 5°)."""
    target = from_expression(TARGETS[name]).scaled(sign)
    d = design_circuit(target, DesignOptions(topology=name))
    topo_sign = -1 if d.topology.inverting else 1
    assert d.sign == sign and d.needs_inverter == (topo_sign != sign)
    f = np.geomspace(0.01, 100, 40)
    ratio = d.realized.frequency_response(f) / target.frequency_response(f)
    assert np.max(np.abs(np.angle(ratio, deg=True))) < 5 and np.max(np.abs(20 * np.log10(np.abs(ratio)))) < 1


def test_direct_acting_parallel_pid_netlist_in_ngspice():
    """Reference: ngspice AC analysis of the direct-acting pid-parallel netlist (the inverter
    added after the non-inverting summing stage) against the rounded design's −C(s): 0.05 dB, 0.5°."""
    from convert.circuit.netlist_out import design_netlist
    from tests.spice import ac_sweep, require_ngspice

    require_ngspice()
    target = from_expression("-(2 + 1/s + 0.5*s/(0.05*s+1))")
    d = design_circuit(target, DesignOptions(topology="pid-parallel"))
    assert d.needs_inverter
    f, v = ac_sweep(design_netlist(d), f_start_hz=0.01, f_stop_hz=100, points_per_decade=10)
    ratio = v / d.realized.frequency_response(f)
    assert np.max(np.abs(20 * np.log10(np.abs(ratio)))) < 0.05 and np.max(np.abs(np.angle(ratio, deg=True))) < 0.5
    assert np.real(v[0] / target.frequency_response(f[:1])[0]) > 0  # the sign of the target, not of the stage


def test_weighted_pi_names_what_the_two_input_stage_needs(run_cli):
    """Before: `circuit --pid kp=2 ki=1/s b=0.5` failed with 'R8 ... would be 0.0, below the resistor
    minimum' (a part of the D amplifier it has no use for). Now it says the stage needs kd."""
    r = run_cli("circuit", "--pid", "kp=2", "ki=1/s", "b=0.5")
    assert r.code == 2 and "no derivative action" in r.err and "R8" not in r.err


RANGE_CASE = """
[source.pid]
kc = 50
ti = "100 s"
[target.circuit]
topology = "pi-rc-feedback"
resistor_range = ["1k", "100k"]
draws = 200
[criteria]
band = ["1 mHz", "1 Hz"]
max_gain_error_db = 0.5
"""


def test_out_of_range_in_a_case_names_the_case_key(run_cli, tmp_path):
    """Before: the case above failed with 'case.toml:4: target.circuit.R2: ... widen the range with
    --r-max' (an option the case file does not have). Now the case key and its line."""
    path = tmp_path / "range.toml"
    path.write_text(RANGE_CASE)
    r = run_cli("report", str(path), "--out", str(tmp_path / "out"))
    assert r.code == 2
    assert "range.toml:7: target.circuit.resistor_range:" in r.err
    assert "resistor maximum (target.circuit.resistor_range)" in r.err
    assert "capacitor range (target.circuit.capacitor_range)" in r.err
    assert "--r-" not in r.err and "--c-" not in r.err
    cli = run_cli("circuit", "--pid", "kc=50", "ti=100s", "--topology", "pi-rc-feedback", "--r-max", "100k")
    assert cli.code == 2 and "resistor maximum (--r-max)" in cli.err and "target.circuit" not in cli.err


def test_case_file_series_pid_keeps_the_assignment_given(tmp_path):
    """A case whose source is a series PID with Ti′ < Td′ (kc = 0.5, ti = 0.7 s, td = 4 s) gets a
    circuit whose parts set those series times, and its notes say so."""
    from convert.case import load_case
    from convert.compare.evaluate import evaluate_case

    path = tmp_path / "series.toml"
    path.write_text("""
[source.pid]
kc = 0.5
ti = "0.7 s"
td = "4 s"
tf = "0.02 s"
form = "series"
[target.circuit]
topology = "pid-single-amp"
draws = 200
[criteria]
band = ["10 mHz", "5 Hz"]
max_gain_error_db = 3
""")
    res = evaluate_case(load_case(path))
    (r,) = res.realizations
    assert any("Ti′ = 0.7 s, Td′ = 4 s, as in the series settings as given" in n for n in r.details["notes"])


def test_direct_acting_pid_with_complex_zeros_on_auto(run_cli):
    """Before: `circuit --pid kc=2 ti=1s td=1s n=10 action=direct` (Ti < 4·Td: complex zeros, only
    pid-parallel realizes them) said 'no catalog topology realizes this target exactly'. Now
    pid-parallel with the inverter after it."""
    r = run_cli("circuit", "--pid", "kc=2", "ti=1s", "td=1s", "n=10", "action=direct", "--draws", "0", "--json")
    assert r.code == 0, r.err
    data = json.loads(r.out)
    assert data["topology"] == "pid-parallel" and data["needs_inverter"] is True
    assert data["num"][0] < 0  # direct action: the built controller carries the minus sign


@pytest.mark.parametrize("action", ["reverse", "direct"])
def test_two_input_stage_takes_either_action(action):
    """pid-two-input (inverting) realizes both actions: the feedback path and the setpoint path
    each match the PID settings' (sign included) within the rounding (0.1°)."""
    st = pid_from_words(["kp=2", "ki=1/s", "kd=0.5s", "tf=0.05s", "b=0.5", "c=0", f"action={action}"])
    d = design_circuit(st.to_controller(), DesignOptions(topology="pid-two-input"), settings=st)
    assert d.needs_inverter == (action == "reverse")
    f = np.geomspace(0.01, 100, 20)
    fb = d.realized.frequency_response(f) / st.to_controller().frequency_response(f)
    sp = d.topology.paths_from_parts(d.rounded)["setpoint"].scaled(d.sign)
    sp_ratio = sp.frequency_response(f) / st.setpoint_controller().frequency_response(f)
    assert np.max(np.abs(np.angle(fb, deg=True))) < 0.1 and np.max(np.abs(np.angle(sp_ratio, deg=True))) < 0.1


@pytest.mark.parametrize(
    "line,expected",
    [
        ('topology = "pid-foo"', "k.toml:6: target.circuit.topology: unknown topology 'pid-foo'"),
        ("draws = 0", "k.toml:6: target.circuit.draws: expected at least 200 Monte Carlo draws"),
    ],
)
def test_circuit_target_errors_name_the_case_key(run_cli, tmp_path, line, expected):
    """Before: an unknown topology in [target.circuit] was reported at 'target.circuit' (the
    library's key was the option --topology), and draws = 0 as '--draws: ...' with no file or
    line. Now the case key and its line; the command line still says --topology."""
    path = tmp_path / "k.toml"
    path.write_text(f"""
[source.pid]
kc = 2
ti = "10 s"
[target.circuit]
{line}
[criteria]
band = ["1 mHz", "1 Hz"]
max_gain_error_db = 1
""")
    r = run_cli("report", str(path), "--out", str(tmp_path / "out"))
    assert r.code == 2 and expected in r.err and "--topology" not in r.err and "--draws" not in r.err
    cli = run_cli("circuit", "2*(1 + 1/s)", "--topology", "pid-foo")
    assert cli.code == 2 and "--topology: unknown topology" in cli.err
