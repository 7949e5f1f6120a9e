"""Case files: loading, validation, and errors that name file, line and key."""

from __future__ import annotations

from pathlib import Path

import pytest

from convert.case import key_lines, load_case, parse_case
from convert.errors import InputError

CASES = Path(__file__).resolve().parent.parent / "cases"

MINIMAL = """\
[source]
expression = "2*(1 + 1/(30*s))"

[target.digital]
fs = "10 Hz"
methods = ["tustin"]

[criteria]
band = ["1 mHz", "1 Hz"]
max_gain_error_db = 1
"""


@pytest.mark.parametrize("path", sorted(CASES.glob("*.toml")), ids=lambda p: p.stem)
def test_every_demo_case_loads(path):
    case = load_case(path)
    assert case.criteria.band_hz[0] < case.criteria.band_hz[1]
    assert case.digital or case.circuit or case.given


def test_minimal_case_values_are_si():
    case = parse_case(MINIMAL, "m.toml")
    assert case.digital.fs_hz == (10.0,)
    assert case.criteria.band_hz == (1e-3, 1.0)
    assert case.source.form == "expression"
    assert case.plant is None


def _error(text: str) -> str:
    with pytest.raises(InputError) as info:
        parse_case(text, "job.toml")
    return str(info.value)


def test_unknown_key_names_file_line_key_and_suggests():
    text = MINIMAL.replace("max_gain_error_db = 1", "max_gain_eror_db = 1")
    msg = _error(text)
    assert msg.startswith("job.toml:10: criteria.max_gain_eror_db:")
    assert "did you mean 'max_gain_error_db'" in msg


def test_unknown_table_suggests():
    msg = _error(MINIMAL + '\n[plnat]\nmodel = "1/(s+1)"\n')
    assert msg.startswith("job.toml:12: plnat:") and "did you mean 'plant'" in msg


def test_bad_value_names_line_and_unit_rule():
    msg = _error(MINIMAL.replace('fs = "10 Hz"', 'fs = "10 kF"'))
    assert msg.startswith("job.toml:5: target.digital.fs:")
    assert "frequency" in msg


def test_bad_expression_names_line_and_column():
    msg = _error(MINIMAL.replace("2*(1 + 1/(30*s))", "2*(1 + 1/(30*s)"))
    assert msg.startswith("job.toml:2: source.expression column 16:")


def test_unknown_method_suggests():
    msg = _error(MINIMAL.replace('["tustin"]', '["tustn"]'))
    assert "job.toml:6: target.digital.methods" in msg and "did you mean 'tustin'" in msg


def test_two_sources_refused():
    msg = _error(MINIMAL.replace("[target.digital]", "pid = { kc = 2 }\n\n[target.digital]"))
    assert "exactly one of" in msg and msg.startswith("job.toml:")


def test_missing_band_and_missing_target():
    assert "missing band" in _error(MINIMAL.replace('band = ["1 mHz", "1 Hz"]', ""))
    no_target = MINIMAL.split("[target.digital]")[0] + '[criteria]\nband = ["1 mHz", "1 Hz"]\n'
    assert "target" in _error(no_target)


def test_invalid_toml_names_line():
    msg = _error(MINIMAL.replace('fs = "10 Hz"', "fs = 10 Hz"))
    assert msg.startswith("job.toml:5:") and "not valid TOML" in msg


def test_netlist_path_is_relative_to_case_file(tmp_path):
    text = MINIMAL.replace('expression = "2*(1 + 1/(30*s))"', 'netlist = { file = "missing.cir" }')
    with pytest.raises(InputError) as info:
        parse_case(text, tmp_path / "c.toml")
    assert "missing.cir" in str(info.value) and "relative to the case file" in str(info.value)


def test_key_lines_inline_tables_and_headers():
    lines = key_lines('[a.b]\nx = 1\ny = { p = 1, q = 2 }\n\n[c]\n"quoted" = 3\n')
    assert lines["a"] == 1 and lines["a.b.x"] == 2 and lines["a.b.y.q"] == 3 and lines["c.quoted"] == 6


def test_pid_error_points_at_the_pid_key(tmp_path):
    from convert.case import source_controller

    text = MINIMAL.replace('expression = "2*(1 + 1/(30*s))"', 'pid = { kc = 2, ti = "-3 s" }')
    case = parse_case(text, tmp_path / "p.toml")
    with pytest.raises(InputError) as info:
        source_controller(case)
    assert str(info.value).startswith("p.toml:2: source.pid")


def test_report_cli_bad_case_exit_2(run_cli, tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text(MINIMAL.replace("methods", "metods"))
    res = run_cli("report", str(bad), "--out", str(tmp_path / "r"))
    assert res.code == 2
    assert "bad.toml:6: target.digital.metods" in res.err
    assert "Traceback" not in res.err
    assert not (tmp_path / "r").exists()


@pytest.mark.parametrize(
    "written, seconds_at_10_hz",
    [
        ('"20 ms"', 0.02),
        ('"1 sample"', 0.1),
        ('"2 samples"', 0.2),
        ('"0.5sample"', 0.05),
        ('"0.003 s"', 0.003),
        ("0", 0.0),
    ],
)
def test_delay_in_seconds_or_samples(written, seconds_at_10_hz):
    """A computation delay reads as a time or as a count of samples (the same words as
    `loopshift digital --delay`); samples are resolved per rate as count / fs (definition)."""
    case = parse_case(MINIMAL.replace('methods = ["tustin"]', f'methods = ["tustin"]\ndelay = {written}'), "m.toml")
    assert case.digital.delay_for(10.0) == pytest.approx(seconds_at_10_hz, rel=1e-12)


def test_bad_delay_names_line_key_and_both_forms():
    msg = _error(MINIMAL.replace('methods = ["tustin"]', 'methods = ["tustin"]\ndelay = "one tick"'))
    assert msg.startswith("job.toml:7: target.digital.delay:") and "1 sample" in msg
    msg = _error(MINIMAL.replace('methods = ["tustin"]', 'methods = ["tustin"]\ndelay = "-1 sample"'))
    assert "zero or positive" in msg
