"""The buyer's bill of materials (issue 14 items 3 and 4): ratings, dielectric, op-amp requirements and
the dominant part's tighter tolerance, each against a hand calculation stated here (common practice
where no published source applies), and the CSV read back by Python's csv module, ASCII only."""

from __future__ import annotations

import csv
import io
import math

import numpy as np
import pytest

from convert.circuit.buylist import buy_list
from convert.circuit.design import DesignOptions, design_circuit
from convert.controller import from_expression


def _lines_by_ref(order):
    return {ref: line for line in order.lines for ref in line["references"]}


def test_capacitor_dielectric_and_voltage_rating():
    """Common practice: C0G/NP0 up to 100 nF, non-polarised film above; rating >= 1.5 x the largest
    voltage across (a feedback capacitor sees at most the rail). Rail 15 V -> 22.5 V -> 25 V;
    rail 5 V -> 7.5 V -> 10 V."""
    small = design_circuit(from_expression("1/(0.001*s)"), DesignOptions(c_max=100e-9))  # C1 <= 100 nF
    big = design_circuit(from_expression("1/(3*s)"), DesignOptions(c_min=1e-6))  # C1 >= 1 uF
    a = _lines_by_ref(buy_list(small, rail_v=15.0))["C1"]
    b = _lines_by_ref(buy_list(big, rail_v=5.0))["C1"]
    assert small.rounded["C1"] <= 100e-9 and a["type"] == "C0G/NP0 ceramic" and a["min_voltage_v"] == 25.0
    assert big.rounded["C1"] >= 1e-6 and b["type"] == "film, non-polarised" and b["min_voltage_v"] == 10.0
    assert "electrolytic" not in b["type"] and "tantalum" not in b["type"]


def test_resistor_power_rating():
    """Hand calculation: a 1.5 kohm input resistor driven by a 10 V input amplitude dissipates at most
    V^2/R = 100/1500 = 66.7 mW; with 2x derating 133 mW -> the 0.25 W rating. The feedback resistor
    (R2 = k x R1 with k = 4.7) across a 15 V rail: 225/R2."""
    d = design_circuit(from_expression("4.7"), DesignOptions(r_min=1e3, r_max=1e4, resistors="E12"))
    order = buy_list(d, rail_v=15.0, amplitude_v=10.0)
    lines = _lines_by_ref(order)
    r1, r2 = d.rounded["R1"], d.rounded["R2"]
    ratings = (0.063, 0.1, 0.125, 0.25, 0.5, 1.0, 2.0)
    assert lines["R1"]["min_power_w"] == min(x for x in ratings if x >= 2 * 10.0**2 / r1)
    assert lines["R2"]["min_power_w"] == min(x for x in ratings if x >= 2 * 15.0**2 / r2)


def test_opamp_requirements_of_an_inverting_gain_stage():
    """Hand calculation for an inverting gain stage R2/R1 = k: noise gain 1 + k at every frequency, so a
    single-pole op-amp errs by (1 + k)·f/GBW; for 1 % at the band's top f = 1 kHz: GBW >= 100·(1 + k)·1 kHz.
    Input bias <= 1 mV / R2 (the largest resistor). Slew rate for a sine of peak min(rail, k·A) at
    1 kHz: 2π·1 kHz·V. Rail-to-rail when that peak comes within 1.5 V of the rail."""
    d = design_circuit(from_expression("-4.7"), DesignOptions(band_hz=(1.0, 1000.0)))
    assert not d.needs_inverter
    order = buy_list(d, rail_v=12.0, amplitude_v=2.0, error=0.01, offset_v=1e-3)
    (u1,) = order.opamps
    k = d.rounded["R2"] / d.rounded["R1"]
    assert u1.min_gbw_hz == pytest.approx(100 * (1 + k) * 1000.0, rel=1e-9)
    assert u1.max_input_bias_a == pytest.approx(1e-3 / max(d.rounded.values()), rel=1e-12)
    peak = min(12.0, 2.0 * k)
    assert u1.min_slew_v_per_s == pytest.approx(2 * math.pi * 1000.0 * peak, rel=1e-6)
    assert u1.rail_to_rail == (peak > 12.0 - 1.5)
    assert buy_list(d, rail_v=5.0, amplitude_v=1.0).opamps[0].rail_to_rail  # 4.7 V of a 5 V rail


def test_dominant_part_gets_a_tighter_tolerance_with_what_it_buys():
    """Hand calculation: an integrator 1/(R1·C1·s) with R 1 % and C 5 %: each part moves the gain by the
    same dB per percent, so C1 carries 5/6 = 83 % of the error. Worst case now: 20·log10(1/(0.99·0.95))
    = 0.533 dB; with C1 at 2 %: 20·log10(1/(0.99·0.98)) = 0.263 dB."""
    d = design_circuit(from_expression("1/(0.1*s)"))
    order = buy_list(d, {"R": 0.01, "C": 0.05})
    t = order.tightening
    assert t is not None and t.part == "C1" and t.suggested == pytest.approx(0.02)
    assert t.share == pytest.approx(5 / 6, rel=1e-3)
    assert t.gain_db[0] == pytest.approx(20 * math.log10(1 / (0.99 * 0.95)), abs=2e-3)
    assert t.gain_db[1] == pytest.approx(20 * math.log10(1 / (0.99 * 0.98)), abs=2e-3)
    assert "dominates" in _lines_by_ref(order)["C1"]["note"]


def test_no_dominant_part_no_suggestion():
    """Equal tolerances on R1 and C1 of an integrator: each carries half, none dominates (> 50 % rule)."""
    d = design_circuit(from_expression("1/(0.1*s)"))
    assert buy_list(d, {"R": 0.02, "C": 0.02}, dominant_share=0.6).tightening is None


def test_csv_is_ascii_grouped_in_designator_order_and_parses_back():
    """A cascade's buy list: the CSV has no non-ASCII byte, a units row, designators in order (R2 before
    R10), quantities equal to the references on the line, and every fitted part exactly once."""
    d = design_circuit(from_expression("(s^2 + 0.4*s + 400)/(s^2 + 8*s + 400)"))
    text = buy_list(d, rail_v=15.0).csv()
    raw = text.encode("utf-8")
    assert all(b < 128 for b in raw)
    rows = list(csv.reader(io.StringIO(text)))
    header, units, body = rows[0], rows[1], rows[2:]
    assert header[:3] == ["line", "references", "quantity"] and units[2] == "pcs" and units[7] == "%"
    refs = []
    for row in body:
        names = row[1].split()
        assert int(row[2]) == len(names)
        refs += names
    fitted = set(d.fitted_parts()) | ({"RINV1", "RINV2", "UINV"} if d.needs_inverter else set())
    fitted |= {st.amp for st in d.topology.stages}
    assert sorted(refs) == sorted(fitted)
    parts = [r for r in refs if r[0] in "RC" and r[1:].isdigit()]
    key = [(r[0] != "R", int(r[1:])) for r in parts]
    assert key == sorted(key)
    assert any(r[3] == "capacitor" and r[5] == "F" and r[4].endswith(("u", "n", "p")) for r in body)
    assert all("ohm" == r[5] for r in body if r[3] == "resistor")


def test_cli_writes_csv_and_json(run_cli, tmp_path):
    """The CLI writes the buy list as ASCII CSV or JSON (by the file's extension)."""
    import json

    c, j = tmp_path / "o.csv", tmp_path / "o.json"
    for path in (c, j):
        r = run_cli(
            "circuit",
            "2*(1+1/(3*s))/(0.1*s+1)",
            "--rail",
            "12V",
            "--amplitude",
            "1V",
            "--draws",
            "0",
            "--buy-list",
            str(path),
        )
        assert r.code == 0, r.err
    assert all(b < 128 for b in c.read_bytes())
    data = json.loads(j.read_text())
    assert data["assumptions"]["rail_v"] == 12.0 and len(data["opamps"]) >= 2
    assert np.isclose(data["assumptions"]["input_amplitude_v"], 1.0)
