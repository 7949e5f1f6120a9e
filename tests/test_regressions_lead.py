"""Regression tests for defects found in review; each is named after the bug it pins."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from convert.controller import Controller, from_expression


def test_pole_far_in_the_right_half_plane_is_refused_not_overflowed(run_cli):
    """Bug: `digital "1/(s-2e6)" --fs 1kHz --method zoh` overflowed e^{pT} and ended with a NaN
    coefficient error plus runtime warnings. Now one line naming the pole, exit 2.
    Reference: e^x overflows IEEE double precision for x > 709.78 (IEEE 754 binary64 range)."""
    r = run_cli("digital", "1/(s-2e6)", "--fs", "1kHz", "--method", "zoh")
    assert r.code == 2
    assert r.err.count("\n") == 1 and "pole at s = 2e+06" in r.err and "per sample" in r.err


def test_integrator_is_not_found_in_poles_merely_close_to_z_equal_1():
    """Bug: two poles within 1e-5 of z = 1 (fs = 100 kHz, corners near 1.6 Hz) were counted as an
    integrator, so dc_gain() returned None. Reference: the DC gain is num(1)/den(1), here finite;
    numpy.polyval evaluates it (common practice)."""
    t = 1e-5
    p = np.exp(-2 * np.pi * 1.0 * t)
    c = Controller.from_zpk([0.5], [p, p * 0.99999], 1.0, "digital", t)
    assert c.integrator_count() == 0
    assert c.dc_gain() == pytest.approx(np.polyval(c.num, 1.0) / np.polyval(c.den, 1.0), rel=1e-9)
    exact = Controller.from_zpk([0.5], [1.0, 1.0, 0.3], 1.0, "digital", t)
    assert exact.integrator_count() == 2


def test_report_out_naming_an_existing_file_says_it_is_not_a_folder(run_cli, tmp_path):
    """Bug: `report CASE --out existing_file` said "the report folder already exists"."""
    target = tmp_path / "a_file"
    target.write_text("keep me")
    case = Path(__file__).resolve().parent.parent / "cases" / "pi_card_to_firmware.toml"
    r = run_cli("report", str(case), "--out", str(target))
    assert r.code == 2 and "is not a folder" in r.err
    assert target.read_text() == "keep me"


def test_digital_json_names_the_analog_controller_it_came_from(run_cli):
    """Bug: `digital --json` carried no num/den of the analog source. Reference: the parsed
    expression (s+2)/(s+20)."""
    r = run_cli("digital", "(s+2)/(s+20)", "--fs", "1kHz", "--method", "tustin", "--json")
    data = json.loads(r.out)
    assert data[0]["analog"] == {"num": [1.0, 2.0], "den": [1.0, 20.0]}


def test_circuit_and_digital_add_the_same_derivative_filter():
    """Bug: `circuit --derivative-filter N` was documented as a pole at N times the highest zero
    while `digital --derivative-filter N` uses tau = Td/N; one option name had two meanings. Both now
    use the ideal-form rule Kc·Td·s/((Td/N)·s + 1) (Åström & Hägglund, PID Controllers, 2nd ed.,
    derivative filter; from memory)."""
    from convert.circuit.design import DesignOptions, prepare_target
    from convert.digital import add_derivative_filter

    ideal_pid = from_expression("2*(1 + 1/(3*s) + 0.5*s)")
    target, filtered, notes = prepare_target(ideal_pid, DesignOptions(derivative_filter_n=8))
    expected = add_derivative_filter(ideal_pid, 8)
    assert np.allclose(filtered.num, expected.num, rtol=1e-12) and np.allclose(filtered.den, expected.den, rtol=1e-12)
    # tau = Td/N = 0.5/8: the filter pole of the ideal form
    assert np.any(np.isclose(filtered.poles(), -8 / 0.5, rtol=1e-9))
    assert any("Td/N" in n for n in notes)


def test_written_files_get_ordinary_permissions_not_private_temp_ones(run_cli, tmp_path):
    """Bug: the netlist, BOM and schematic were written through mkstemp and kept its private mode
    0600, unreadable by colleagues. Reference: POSIX open(2) creates files with 0666 & ~umask."""
    import os

    umask = os.umask(0o022)
    try:
        r = run_cli(
            "circuit",
            "--pid",
            "kc=2",
            "ti=3s",
            "--netlist",
            str(tmp_path / "pi.cir"),
            "--bom",
            str(tmp_path / "pi.csv"),
            "--schematic",
            str(tmp_path / "pi.svg"),
        )
    finally:
        os.umask(umask)
    assert r.code == 0, r.err
    for name in ("pi.cir", "pi.csv", "pi.svg"):
        assert (os.stat(tmp_path / name).st_mode & 0o777) == 0o644, name
    assert not [p for p in os.listdir(tmp_path) if p.startswith(".loopshift-")]


def test_repeats_per_minute_are_refused_on_ki(run_cli):
    """Bug: `--pid kp=2 "ki=2 repeats/min"` was read as ki = 2/min, dropping the gain that a reset
    rate implies (ki = kp·reset). Repeats per minute is a reset rate, 1/Ti (common practice);
    the tool now points at reset= instead of guessing."""
    r = run_cli("show", "--pid", "kp=2", "ki=2 repeats/min")
    assert r.code == 2 and "reset=" in r.err
    ok = run_cli("show", "--pid", "kc=2", "reset=2 repeats/min", "--json")
    assert ok.code == 0


@pytest.mark.parametrize("dead_time_s", [0.3, 1.0])
def test_margins_beside_a_sharp_resonance_are_not_interpolation_limited(dead_time_s):
    """Bug: crossings were interpolated between grid points only, which beside a resonance with
    damping 0.025 cost up to 0.05 dB of gain margin. Reference: python-control's
    stability_margins on the same loop with a 12th-order Padé approximant of the dead time."""
    import warnings

    import control

    from convert.compare.loop import loop_margins

    c = from_expression("0.8*(1+1/(2*s))")
    plant = from_expression("4/((s+1)*(s^2/100 + 0.05*s/10 + 1))")  # 10 rad/s, damping 0.025
    m = loop_margins(c, plant, dead_time_s)
    num, den = control.pade(dead_time_s, 12)
    loop = c.to_control() * plant.to_control() * control.tf(num, den)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        gm, pm = control.stability_margins(loop)[:2]
    assert m.gain_margin_db == pytest.approx(20 * np.log10(gm), abs=1e-4)
    assert m.phase_margin_deg == pytest.approx(pm, abs=1e-3)
