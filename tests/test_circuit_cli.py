"""`loopshift circuit` end to end (in-process): JSON shape, files, no overwrite, bad input exit 2."""

from __future__ import annotations

import json

import pytest


def test_json_shape(run_cli):
    r = run_cli("circuit", "2*(1+1/(0.3*s))", "--json", "--draws", "500")
    assert r.code == 0, r.err
    data = json.loads(r.out)
    assert data["topology"] == "pi-rc-feedback"
    assert set(data["parts"]) == {"R1", "R2", "C1"}
    assert {"nominal", "rounded"} <= set(data["parts"]["R1"])
    assert data["num"] and data["den"]
    assert {"rounding", "tolerance"} <= set(data["errors"])
    assert data["errors"]["tolerance"]["monte_carlo"]["seed"] == 1


def test_files_written_and_not_overwritten(run_cli, tmp_path):
    net, bom, sch = tmp_path / "a.cir", tmp_path / "a.csv", tmp_path / "a.svg"
    r = run_cli(
        "circuit",
        "--pid",
        "kc=2",
        "ti=3s",
        "td=0.5s",
        "n=10",
        "--netlist",
        str(net),
        "--bom",
        str(bom),
        "--schematic",
        str(sch),
        "--draws",
        "0",
    )
    assert r.code == 0, r.err
    assert "VIN in 0 DC 0 AC 1" in net.read_text() and "XUINV" in net.read_text()
    assert bom.read_text().splitlines()[0] == "reference,value,series,tolerance,role"
    assert sch.read_text().lstrip().startswith("<?xml") or "<svg" in sch.read_text()[:500]
    before = net.read_text()
    r = run_cli("circuit", "3", "--netlist", str(net), "--draws", "0")
    assert r.code == 2 and "--force" in r.err and net.read_text() == before
    r = run_cli("circuit", "3", "--netlist", str(net), "--draws", "0", "--force")
    assert r.code == 0 and net.read_text() != before


@pytest.mark.parametrize(
    "argv, match",
    [
        (("circuit", "2*(1+1/(0.3*s))", "--topology", "pid-magic"), "unknown topology"),
        (("circuit", "2*(1+1/(0.3*s))", "--resistors", "E13"), "unknown E-series"),
        (("circuit", "2*(1+1/(0.3*s))", "--r-min", "1M", "--r-max", "1k"), "above its maximum"),
        (("circuit", "(s-1)/(s+1)"), "no catalog topology"),
        (("circuit", "2*(1+1/(30*s))"), "R2"),
        (("circuit", "2", "--tolerance", "R=200%"), "tolerance"),
        (("circuit", "2", "--amplitude", "1V"), "both --amplitude and --rail"),
        (("circuit", "2*(1+1/(0.3*s))", "--trim", "ti=1..2"), "no single resistor"),
    ],
)
def test_bad_input_exit_2(run_cli, argv, match):
    r = run_cli(*argv)
    assert r.code == 2
    assert match in r.err and "Traceback" not in r.err
    assert len(r.err.strip().splitlines()) == 1


def test_catalog_lists_every_topology(run_cli):
    from convert.circuit.topologies import TOPOLOGIES

    r = run_cli("circuit", "--catalog", "--json")
    assert r.code == 0 and set(json.loads(r.out)) == set(TOPOLOGIES)


def test_two_input_reports_both_paths(run_cli):
    r = run_cli("circuit", "--pid", "kp=2", "ki=1/s", "kd=0.5s", "tf=0.05s", "b=0.5", "c=0", "--json", "--draws", "0")
    assert r.code == 0, r.err
    data = json.loads(r.out)
    assert data["topology"] == "pid-two-input"
    assert data["parts"]["C2"]["fitted"] is False
    assert data["errors"]["setpoint_path"]["response"]["max_gain_error_db"] < 0.5


def test_command_module_imports_only_argparse():
    import subprocess
    import sys

    code = (
        "import sys; import convert.cli.circuit; "
        "bad=[m for m in ('numpy','scipy','control','matplotlib','schemdraw','rich') if m in sys.modules]; "
        "print(bad)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout.strip()
    assert out == "[]"
