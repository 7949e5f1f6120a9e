"""Output limits with signal scaling mean one thing on the command line and in a case file: they
are given in the controller's own output units (the units the controller was given in, here
volts), as deviations from the operating point, and the firmware works in firmware units, so
they move with the output map's slope (docs/firmware.md "Signal scaling", docs/case-files.md).

References: the maps by hand (a slope is Δfirmware / Δsignal); the generated C compiled with gcc
and run (the float32 integrator stall figure must hold at the firmware's own output level)."""

from __future__ import annotations

import json
import shutil
import subprocess

import pytest

EXPR = "1.5*(1 + 1/(12*s))"
MAPS = ["--input-scale", "0V", "10V", "0", "4000", "--output-scale", "2V", "10V", "0", "1000"]
CASE = """\
[source]
expression = "1.5*(1 + 1/(12*s))"
[target.digital]
fs = "20 Hz"
output_limits = [-3, 5]
word_format = "float32"
structure = "direct1"
code_name = "lvl"
[target.digital.input_signal]
range = ["0 V", "10 V"]
firmware = [0, 4000]
[target.digital.output_signal]
range = ["2 V", "10 V"]
firmware = [0, 1000]
[plant]
model = "2/((30s+1)(5s+1))"
[criteria]
band = ["1 mHz", "0.5 Hz"]
max_gain_error_db = 1
max_phase_error_deg = 10
"""
CODE = ["code", EXPR, "--fs", "20Hz", "--format", "float", "--structure", "direct1", "--output-limits", "-3", "5"]


def _limit_lines(h: str) -> list[str]:
    lines = h.splitlines()
    i = next(k for k, x in enumerate(lines) if "Output limits:" in x)
    return lines[i - 1 : i + 3]


def test_cli_and_case_file_put_the_same_limits_in_the_code(run_cli, tmp_path):
    """By hand: the output map 2..10 V -> 0..1000 has the slope 125 per volt, so limits of
    -3 .. 5 V (deviations) are -375 .. 625 firmware units; the word-format checks use the output
    level U = 625. The command line and the case file write the same C body and the same limit
    lines (both units), and the command line's analysis uses U = 625 (it used 5 before)."""
    cli = run_cli(*CODE, *MAPS, "--name", "lvl", "--out", str(tmp_path / "cli"))
    assert cli.code == 0, cli.err
    assert "output limits -3 .. 5 (controller output units) = -375 .. 625 firmware units" in cli.out
    (tmp_path / "c.toml").write_text(CASE)
    rep = run_cli("report", str(tmp_path / "c.toml"), "--out", str(tmp_path / "rep"))
    assert rep.code == 0, rep.err
    (case_h,) = (tmp_path / "rep" / "code").glob("*/lvl.h")
    cli_h = (tmp_path / "cli" / "lvl.h").read_text()
    assert _limit_lines(cli_h) == _limit_lines(case_h.read_text())
    assert " * Output limits: -375 .. 625 firmware units, apply them to the returned value" in cli_h
    assert "given as -3 .. 5 in the source controller's output units" in cli_h
    assert "Inputs and outputs in firmware units" in cli_h
    assert (tmp_path / "cli" / "lvl.c").read_text() == (case_h.parent / "lvl.c").read_text()

    data = json.loads(run_cli(*CODE, *MAPS, "--json").out)
    assert data["output_limits"] == [-375.0, 625.0] and data["output_limits_given"] == [-3.0, 5.0]
    assert {a["output_level"] for a in data["analysis"] if not a["refused"]} == {625.0}
    results = json.loads((tmp_path / "rep" / "results.json").read_text())
    scaled = next(r["details"]["signal_scaling"] for r in results["realizations"] if "signal_scaling" in r["details"])
    assert scaled["output_limits"] == [-375.0, 625.0] and scaled["given_output_limits"] == [-3.0, 5.0]
    direct1 = next(a for a in data["analysis"] if a["structure"] == "direct1")
    assert direct1["input_range"] == pytest.approx(scaled["input_range"], rel=1e-12)

    # an inverted output map (1000 at 2 V) swaps the ends: -5 * 125 .. 3 * 125
    inv = MAPS[:8] + ["1000", "0"]
    data = json.loads(run_cli(*CODE, *inv, "--json").out)
    assert data["output_limits"] == [-625.0, 375.0]


@pytest.mark.skipif(shutil.which("gcc") is None, reason="gcc is not on the PATH")
@pytest.mark.parametrize("sign", [1.0, -1.0])
def test_stall_figure_holds_at_the_firmware_output_level(run_cli, tmp_path, sign):
    """The generated float32 C, compiled with gcc: held at 600 firmware units (inside the limits
    -375 .. 625) with a constant error 1.5 times the stall figure the tool states, the output still
    moves. With the limits read as firmware units (U = 5), the figure was 128 times too small
    (float32 spacing 2^-21 at 5 against 2^-14 at 600) and such an error left the output stuck."""
    from tests.firmware_refs import compile_c

    data = json.loads(run_cli(*CODE, *MAPS, "--json").out)
    stall = next(a for a in data["analysis"] if a["structure"] == "direct1")["stall_error"]
    assert run_cli(*CODE, *MAPS, "--name", "lvl", "--out", str(tmp_path / "fw")).code == 0
    files = {n: (tmp_path / "fw" / n).read_text() for n in ("lvl.h", "lvl.c")}
    main = """#include <stdio.h>
#include <stdlib.h>
#include "lvl.h"
int main(int argc, char **argv)
{
    float e = (float)atof(argv[1]), y1 = 0.0f, y = 0.0f;
    lvl_state st;
    (void)argc;
    lvl_set_output(&st, 600.0f);
    for (int n = 0; n < 200; n++) {
        y = lvl_step(&st, e);
        if (n == 1) y1 = y;
    }
    printf("%.9g %.9g\\n", (double)y1, (double)y);
    return 0;
}
"""
    exe = compile_c(tmp_path, files, "lvl", main)
    out = subprocess.run([str(exe), repr(sign * 1.5 * stall)], capture_output=True, text=True, check=True).stdout
    y1, y = map(float, out.split())
    assert sign * (y - y1) > 0, (stall, y1, y)


def test_limits_in_other_units_than_the_controller_are_warned(run_cli, tmp_path):
    """A 4-20 mA output on 0..4095 counts: the controller works in amperes (SI), so limits typed
    as "4 20" (meant as mA) are 4 .. 20 A, by hand 4 * 4095/0.016 = 1.02375e6 .. 5.11875e6 counts,
    1250 times the signal's whole range: a clamp that never acts, and said so, as a case file
    does; limits of -8 .. 8 mA (deviations, in A) are -2047.5 .. 2047.5 counts and pass quietly."""
    argv = ["code", "0.8*(1+1/(45*s))", "--fs", "5Hz", "--format", "float"]
    maps = ["--input-scale", "4mA", "20mA", "0", "1000", "--output-scale", "4mA", "20mA", "0", "4095"]
    r = run_cli(*argv, *maps, "--output-limits", "4", "20", "--json")
    data = json.loads(r.out)
    assert data["output_limits"] == pytest.approx([1.02375e6, 5.11875e6])
    assert len(data["warnings"]) == 1 and "a clamp that never acts" in data["warnings"][0]
    r = run_cli(*argv, *maps, "--output-limits", "4", "20", "--name", "x", "--out", str(tmp_path))
    assert "warning: the output limits become 1.024e+06 .. 5.119e+06 in firmware units" in r.out
    data = json.loads(run_cli(*argv, *maps, "--output-limits", "-0.008", "0.008", "--json").out)
    assert data["output_limits"] == pytest.approx([-2047.5, 2047.5]) and data["warnings"] == []
