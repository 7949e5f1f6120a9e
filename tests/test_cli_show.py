"""`loopshift show`: tables, JSON shape, and one-line errors with exit code 2."""

from __future__ import annotations

import json

import numpy as np
import pytest


@pytest.mark.parametrize(
    "argv, fragment",
    [
        (["show", "2*(s+1"], "column 7"),
        (["show", "s +* 2"], "column 4"),
        (["show", "x + 1"], "unknown name 'x'"),
        (["show", "1/(s-s)"], "division by zero"),
        (["show", "nan*s"], "unknown name 'nan'"),
        (["show", "inf"], "unknown name 'inf'"),
        (["show", "1/(1 - z^-1)"], "sample rate"),
        (["show", "1/(1 - z^-1)", "--fs", "nan"], "--fs"),
        (["show", "1/(1 - z^-1)", "--fs", "10 s"], "--fs"),
        (["show", "--pid", "kc=2", "ti=-30s"], "ti: must be positive"),
        (["show", "--pid", "kc=2", "ti=nan"], "ti: expected a finite"),
        (["show", "--pid", "ti=30s"], "kc: missing the gain"),
        (["show", "--pid", "kc=2", "pb=50%"], "pb: conflicting"),
        (["show", "--pid", "kc=2", "kp=1"], "kp:"),
        (["show", "--pid", "kc=2", "tii=30s"], "did you mean ti"),
        (["show", "--pid", "kc=2", "td=-1s"], "td: must be zero or positive"),
        (["show", "--pid", "kc=2", "ti=30s", "td=20s", "form=series", "n=0.2"], "n:"),
        (["show", "2*s", "--pid", "kc=2"], "not both"),
        (["show"], "give a controller"),
        (["show", "--frobnicate"], "unknown option --frobnicate"),
    ],
)
def test_bad_input_is_one_line_exit_2(run_cli, argv, fragment):
    """Bad input: one line on stderr naming what and where, exit code 2, no traceback
    (the project's error rule)."""
    result = run_cli(*argv)
    assert result.code == 2, result
    lines = [line for line in result.err.splitlines() if line.strip()]
    assert len(lines) == 1, result.err
    assert lines[0].startswith("error: ")
    assert fragment in lines[0]
    assert "Traceback" not in result.err + result.out


def test_pid_tables(run_cli):
    """The tables show the transfer function, zeros/poles, and all three PID forms."""
    result = run_cli("show", "--pid", "kc=2", "ti=30s", "td=5s", "n=10")
    assert result.code == 0, result.err
    for text in (
        "Controller:",
        "Zeros, poles and gain",
        "integrating",
        "PID forms",
        "ideal (standard)",
        "series (interacting)",
        "Kc = 2",
        "Ti = 30 s",
        "N = 10",
        "corner frequencies (Hz)",
    ):
        assert text in result.out, text


def test_non_pid_is_explained(run_cli):
    """A lag network is shown with the reason it is not a PID."""
    result = run_cli("show", "(s+1)/(10*s+1)")
    assert result.code == 0
    assert "not a PID" in result.out


def test_json_shape_analog_pid(run_cli):
    """JSON: numbers as numbers, coefficients as lists in descending powers of s; the PID
    table for every form; the series form reports why it is unavailable when Ti < 4·Td."""
    result = run_cli("show", "--pid", "kc=2", "ti=10s", "td=5s", "n=10", "c=0", "--json")
    assert result.code == 0, result.err
    data = json.loads(result.out)
    assert data["domain"] == "analog"
    assert all(isinstance(x, float) for x in data["num"] + data["den"])
    # Kc(1 + 1/(Ti s) + Td s/(Td/N s + 1)) over the common denominator s(0.5 s + 1), den monic:
    np.testing.assert_allclose(data["den"], [1.0, 2.0, 0.0])
    np.testing.assert_allclose(data["num"], [2 * (0.5 + 5) / 0.5, 2 * (1 + 0.5 / 10) / 0.5, 2 / 10 / 0.5])
    assert data["dc_gain"] is None and data["integrating"] is True and data["integrators"] == 1
    assert data["proper"] is True and data["relative_degree"] == 0
    assert set(data["corner_frequencies_hz"]) == {"zeros", "poles"}
    assert data["pid"]["ideal"]["kc"] == pytest.approx(2.0)
    assert data["pid"]["ideal"]["ti_s"] == pytest.approx(10.0)
    assert data["pid"]["ideal"]["n"] == pytest.approx(10.0)
    assert "unavailable" in data["pid"]["series"]
    assert data["pid"]["derivative_on"] == "measurement"
    assert data["setpoint_path"]["den"] == [1.0, 0.0]
    assert isinstance(data["zeros"][0]["re"], float)


def test_json_shape_digital(run_cli):
    """A z expression with --fs: b/a in ascending z^-1 with a[0] = 1 and fs_hz."""
    result = run_cli("show", "(0.2 - 0.18 z^-1)/(1 - z^-1)", "--fs", "100 Hz", "--json")
    assert result.code == 0, result.err
    data = json.loads(result.out)
    assert data["domain"] == "digital" and data["fs_hz"] == 100.0
    assert data["b"] == [0.2, -0.18] and data["a"] == [1.0, -1.0]
    assert data["pid"] is None and "digital" in data["not_pid"]


def test_expression_pid_recognised_in_json(run_cli):
    """An s expression that is a PI is reported with its PID forms."""
    data = json.loads(run_cli("show", "2*(1 + 1/(30*s))", "--json").out)
    assert data["pid"]["kind"] == "PI"
    assert data["pid"]["ideal"]["ti_s"] == pytest.approx(30.0)
    assert data["source"] == {"expression": "2*(1 + 1/(30*s))"}


def test_help_explains_options(run_cli):
    """`loopshift show --help` lists every --pid key and has examples."""
    result = run_cli("show", "--help")
    assert result.code == 0
    for key in ("kc", "pb", "ti", "reset", "td", "tf", "action", "examples:", "--fs", "--json"):
        assert key in result.out
