"""One pipeline, one set of figures: the same design through `loopshift report` (results.json) and
through `circuit --json`, `digital --json` and `card --json` gives the same figures, because every
command calls the same stage functions (convert.pipeline).

The agreement itself is internal; the figures each side shows are checked against outside
references elsewhere (scipy/python-control in tests/test_digital_reference.py, ngspice in
tests/test_circuit_spice.py and tests/test_mna_ngspice.py). Here one independent computation pins
the stage: the digital row's gain error is recomputed from python-control's own frequency
response of the same coefficients (python-control, ``TransferFunction.frequency_response``).
The scenarios (a kiln zone, a dosing pump, a level card) are invented for these tests.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest


def _cli(*argv: str) -> tuple[int, str]:
    """Run the command in-process with a console writing to a buffer (as the run_cli fixture;
    module-scoped fixtures cannot take it)."""
    import io

    from rich.console import Console

    from convert.cli.main import main

    buffer = io.StringIO()
    console = Console(file=buffer, width=160, color_system=None, force_terminal=False, highlight=False, markup=False)
    code = main(list(argv), console=console)
    return code, buffer.getvalue()


# ------------------------------------------------------------------------------- circuit
CIRCUIT_EXPR = "3*(1 + 1/(0.4*s))*(1 + 0.05*s)/(1 + 0.005*s)"
CIRCUIT_CASE = f"""
[case]
title = "Dosing pump lead-PI on an op-amp stage"

[source]
expression = "{CIRCUIT_EXPR}"

[target.circuit]
topology = "auto"
resistors = "E24"
capacitors = "E6"
tolerances = {{ R = "1 %", C = "5 %" }}
draws = 1200
seed = 21
distribution = "uniform"
opamp_gbw = "300 kHz"

[criteria]
band = ["0.05 Hz", "200 Hz"]
max_gain_error_db = 3
max_phase_error_deg = 20
"""

CIRCUIT_ARGS = (
    "circuit",
    CIRCUIT_EXPR,
    "--band",
    "0.05Hz",
    "200Hz",
    "--resistors",
    "E24",
    "--capacitors",
    "E6",
    "--tolerance",
    "R=1%",
    "C=5%",
    "--draws",
    "1200",
    "--seed",
    "21",
    "--opamp-gbw",
    "300kHz",
    "--json",
)

FIGURES = (
    "max_gain_error_db",
    "max_gain_error_at_hz",
    "max_phase_error_deg",
    "max_phase_error_at_hz",
    "percentile",
    "applicable",
)


@pytest.fixture(scope="module")
def circuit_pair(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("circuit")
    case = tmp / "pump.toml"
    case.write_text(CIRCUIT_CASE)
    assert _cli("report", str(case), "--out", str(tmp / "rep"))[0] in (0, 1)
    report = json.loads((tmp / "rep" / "results.json").read_text())
    code, out = _cli(*CIRCUIT_ARGS)
    assert code == 0, out
    return report, json.loads(out)


def test_circuit_command_and_report_give_the_same_budget(circuit_pair):
    """Rounding, tolerances, op-amp and total: every row of `circuit --json`'s budget is the
    report's row for the same design, seed and draws, exactly."""
    report, circuit = circuit_pair
    (entry,) = report["budget"]
    rows = {r["key"]: r for r in entry["rows"]}
    mine = {r["key"]: r for r in circuit["budget"]}
    assert set(mine) == set(rows)
    for key in ("series_rounding", "tolerances", "opamp_gbw", "total"):
        assert rows[key]["applicable"], key
        for name in FIGURES:
            assert mine[key][name] == rows[key][name], (key, name)
    # the documented `errors` fields carry the same figures (one answer per error source)
    assert (
        circuit["errors"]["rounding"]["response"]["max_gain_error_db"] == rows["series_rounding"]["max_gain_error_db"]
    )
    assert circuit["errors"]["opamp"]["response"]["max_phase_error_deg"] == rows["opamp_gbw"]["max_phase_error_deg"]
    fig = circuit["errors"]["tolerance"]["monte_carlo"]["figures"]
    assert fig["tolerances"]["max_gain_error_db"] == rows["tolerances"]["max_gain_error_db"]
    assert fig["total"]["max_phase_error_deg"] == rows["total"]["max_phase_error_deg"]
    assert rows["total"]["max_gain_error_db"] > rows["series_rounding"]["max_gain_error_db"] > 0


def test_circuit_figures_do_not_depend_on_the_band_grid(circuit_pair):
    """The rounding figure is a grid-free maximum: recomputed on a grid ten times denser from the
    built controller (python-control's frequency response of the same num/den), the largest gain
    error is never above the pipeline's figure by more than the grid's own resolution."""
    import control

    report, circuit = circuit_pair
    (entry,) = report["budget"]
    rounding = next(r for r in entry["rows"] if r["key"] == "series_rounding")
    target = control.tf(circuit["target"]["num"], circuit["target"]["den"])
    built = control.tf(circuit["num"], circuit["den"])
    f = np.logspace(math.log10(0.05), math.log10(200), 4001)
    w = 2 * np.pi * f
    err = 20 * np.log10(np.abs(built.frequency_response(w).complex / target.frequency_response(w).complex))
    dense = float(np.max(np.abs(err)))
    assert dense <= rounding["max_gain_error_db"] * (1 + 1e-6)
    assert dense >= rounding["max_gain_error_db"] * 0.999


# ------------------------------------------------------------------------------- digital
DIGITAL_EXPR = "1.8*(1 + 1/(45*s))*(1 + 4*s)/(1 + 0.4*s)"
DIGITAL_CASE = f"""
[case]
title = "Kiln zone lead-PI into firmware"

[source]
expression = "{DIGITAL_EXPR}"

[target.digital]
fs = "5 Hz"
methods = ["tustin", "zoh"]
delay = "40 ms"
word_format = "float32"

[plant]
model = "0.9/((60*s + 1)*(8*s + 1))"
dead_time = "3 s"

[criteria]
band = ["1 mHz", "1 Hz"]
max_gain_error_db = 1
max_phase_error_deg = 10
max_phase_margin_change_deg = 5
"""


@pytest.fixture(scope="module")
def digital_pair(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("digital")
    case = tmp / "kiln.toml"
    case.write_text(DIGITAL_CASE)
    assert _cli("report", str(case), "--out", str(tmp / "rep"))[0] in (0, 1)
    report = json.loads((tmp / "rep" / "results.json").read_text())
    code, out = _cli(
        *[
            "digital",
            DIGITAL_EXPR,
            "--fs",
            "5Hz",
            "--method",
            "tustin",
            "--method",
            "zoh",
            "--delay",
            "40ms",
            "--band",
            "1mHz",
            "1Hz",
            "--word-format",
            "float32",
            "--plant",
            "0.9/((60*s + 1)*(8*s + 1))",
            "--dead-time",
            "3s",
            "--json",
        ]
    )
    assert code == 0, out
    return report, json.loads(out)


@pytest.mark.parametrize("method", ["tustin", "zoh"])
def test_digital_command_and_report_agree_per_method(digital_pair, method):
    """Same rate and method: the same budget rows (discretization, hold and delay, word format,
    total), the same method error, and the same loop margins with the same plant."""
    report, digital = digital_pair
    item = next(i for i in digital if i["method"] == method)
    name = f"{method} @ 5 Hz"
    rows = next(b["rows"] for b in report["budget"] if b["realization"] == name)
    assert item["budget"] == rows
    by_key = {r["key"]: r for r in rows}
    assert item["method_error"]["max_gain_error_db"] == by_key["discretization"]["max_gain_error_db"]
    assert item["method_error"]["max_phase_error_deg"] == by_key["discretization"]["max_phase_error_deg"]
    assert by_key["word_format"]["applicable"]
    real = next(r for r in report["realizations"] if r["name"] == name)
    assert item["loop"]["margins"] == real["loop"]["margins"]
    assert item["loop"]["margins"]["phase_margin_deg"] > 0


def test_digital_discretization_row_against_python_control(digital_pair):
    """The tustin row's gain error recomputed independently: python-control's c2d (Tustin) of
    the same analog controller, its frequency response on a dense grid against the analog one;
    the pipeline's grid-free maximum is at least the dense-grid maximum and within 0.1 % of it."""
    import control

    _, digital = digital_pair
    item = next(i for i in digital if i["method"] == "tustin")
    analog = control.tf(item["analog"]["num"], item["analog"]["den"])
    disc = control.c2d(analog, 0.2, method="tustin")
    f = np.logspace(-3, 0, 30001)
    w = 2 * np.pi * f
    err = 20 * np.log10(np.abs(disc.frequency_response(w).complex / analog.frequency_response(w).complex))
    dense = float(np.max(np.abs(err)))
    row = next(r for r in item["budget"] if r["key"] == "discretization")
    assert dense <= row["max_gain_error_db"] * (1 + 1e-6)
    assert dense >= row["max_gain_error_db"] * 0.999


# ------------------------------------------------------------------------------- card
LEVEL_CARD = """Level loop PI card on single-pole op-amps, then an inverter (invented)
VIN in 0 AC 1
R1 in a 47k
R2 a f 220k
C1 f n 4.7u
X1 0 a n OPAMP1P gbw=800k a0=150k
R4 n m 10k
R5 m out 10k
X2 0 m out OPAMP1P gbw=800k a0=150k
.end
"""

CARD_CASE = """
[case]
title = "Level card into firmware"

[source.netlist]
file = "level.cir"
input = "VIN"
output = "out"

[target.digital]
fs = "50 Hz"
methods = ["tustin"]

[criteria]
band = ["5 mHz", "2 Hz"]
max_gain_error_db = 0.5
max_phase_error_deg = 5
"""


def test_card_command_and_report_read_the_same_controller(run_cli, tmp_path):
    """`card --json` with the case's band and rate, and the report whose source is that netlist:
    the same controller handed on, the same full card, the same cut and the same PID settings."""
    (tmp_path / "level.cir").write_text(LEVEL_CARD)
    (tmp_path / "level.toml").write_text(CARD_CASE)
    r = run_cli("report", str(tmp_path / "level.toml"), "--out", str(tmp_path / "rep"))
    assert r.code in (0, 1), r.err
    report = json.loads((tmp_path / "rep" / "results.json").read_text())
    r = run_cli("card", str(tmp_path / "level.cir"), "--band", "5mHz", "2Hz", "--fs", "50Hz", "--json")
    assert r.code == 0, r.err
    card = json.loads(r.out)
    source = report["source"]
    reduction = source["card_reduction"]
    assert reduction is not None and reduction["changed"]
    assert card["reduction"] == reduction
    assert (card["num"], card["den"]) == (reduction["reduced"]["num"], reduction["reduced"]["den"])
    assert (source["num"], source["den"]) == (reduction["full_card"]["num"], reduction["full_card"]["den"])
    assert card["pid"] == source["pid"]
    # R2/R1 and 1/(R1*C1) (the inverting PI stage, common practice), the inverter restoring the sign
    assert card["pid"]["parallel"]["kp"] == pytest.approx(220 / 47, rel=1e-3)
    assert card["pid"]["parallel"]["ki_per_s"] == pytest.approx(1 / (47e3 * 4.7e-6), rel=1e-3)


# ------------------------------------------------------------------------------- python
def test_run_pipeline_gives_typed_results_the_report_writes():
    """`run_pipeline` from Python: frozen typed results whose figures are the report's."""
    import dataclasses

    import convert
    from convert.report.results import results_dict

    case = convert.case_from_dict(
        {
            "source": {"pid": {"kp": 1.5, "ki": "0.1/s"}},
            "target": {"digital": {"fs": "2 Hz", "methods": ["tustin"]}},
            "plant": {"model": "2/(30*s + 1)", "dead_time": "2 s"},
            "criteria": {"band": ["1 mHz", "0.2 Hz"], "max_gain_error_db": 1},
        },
        name="boiler",
    )
    result = convert.run_pipeline(case)
    assert isinstance(result.source, convert.PidSource) and result.source.settings.kp == 1.5
    (firmware,) = result.realizations
    assert isinstance(firmware, convert.DigitalResult) and firmware.method == "tustin" and firmware.fs_hz == 2.0
    with pytest.raises(dataclasses.FrozenInstanceError):
        firmware.name = "other"
    assert isinstance(firmware.row("total"), convert.BudgetRow)
    data = results_dict(result.results)
    assert data["budget"][0]["rows"] == [row.as_dict() for row in firmware.budget]
    assert firmware.loop.margins.as_dict() == data["realizations"][0]["loop"]["margins"]
    tf = firmware.to_control()
    assert tf.dt == 0.5
    assert result.verdict.overall == data["verdict"]


# ------------------------------------------------------------------------------- results.json keys
def test_results_json_keys_from_labels_and_names():
    """Mappings keyed by display labels or by names become records: a label goes into ``label``
    with a snake_case ``key``, a name into ``name``; snake_case mappings stay mappings."""
    from convert.report.results import snake_case_keys

    data = {
        "effects": {"gain ×s^1 (low frequency)": 1.0, "zero 1 (Hz)": -0.5},
        "parts": {"R1": {"value": 1e3, "series": "E96"}, "X1.C2": 1e-9},
        "band_hz": [1.0, 2.0],
    }
    out = snake_case_keys(data)
    assert out["band_hz"] == [1.0, 2.0]
    assert out["effects"] == [
        {"key": "gain_s_1_low_frequency", "label": "gain ×s^1 (low frequency)", "value": 1.0},
        {"key": "zero_1_hz", "label": "zero 1 (Hz)", "value": -0.5},
    ]
    assert out["parts"] == [{"name": "R1", "value": 1e3, "series": "E96"}, {"name": "X1.C2", "value": 1e-9}]


def test_a_case_made_in_python_writes_its_report_under_its_own_name(tmp_path, monkeypatch):
    """Before: `case_from_dict(..., name="mixer")` then `write_report(results, "mixer")` was
    refused, "the report folder contains the input 'mixer'": the made-up path of a case with no
    file was protected as if it were the case file. A path with no file behind it has nothing to
    lose; a real case file inside the folder is still refused."""
    import convert

    monkeypatch.chdir(tmp_path)
    case = convert.case_from_dict(
        {
            "source": {"expression": "2*(1+1/(30s))"},
            "target": {"digital": {"fs": "10 Hz", "methods": ["tustin"]}},
            "plant": {"model": "1/(s*(20s+1))"},
            "criteria": {"band": ["1 mHz", "0.5 Hz"]},
        },
        name="mixer",
    )
    results = convert.run_pipeline(case).results
    folder = convert.write_report(results, "mixer")
    assert (folder / "report.md").is_file()
    (tmp_path / "inside").mkdir()
    (tmp_path / "inside" / "mixer.toml").write_text("")
    case_in = convert.case_from_dict(
        {
            "source": {"expression": "2*(1+1/(30s))"},
            "target": {"digital": {"fs": "10 Hz", "methods": ["tustin"]}},
            "criteria": {"band": ["1 mHz", "0.5 Hz"]},
        },
        name="mixer.toml",
        base_dir="inside",
    )
    with pytest.raises(convert.InputError, match="contains the input"):
        convert.write_report(convert.run_pipeline(case_in).results, "inside", force=True)
