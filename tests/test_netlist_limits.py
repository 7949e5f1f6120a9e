"""Netlist bounds and large sparse netlists (issue 9 item 3, the netlist part).

Each refusal is one line naming the limit. The 500-node ladder (tests/netlists_large/ladder500.cir,
written by tests/netlists_large/make_ladder500.py; our own scenario) is checked against ngspice AC
analysis (the independent simulator) and its peak memory measured in a fresh process.
"""

from __future__ import annotations

import json
import pathlib
import subprocess
import sys

import numpy as np
import pytest

from convert.circuit import mna
from convert.circuit.netlist import MAX_ELEMENTS, read_netlist
from convert.errors import InputError, UnrealizableError

HERE = pathlib.Path(__file__).parent
ROOT = HERE.parent


def nested_text(levels: int, fan: int = 10) -> str:
    """Subcircuits nested ``levels`` deep, each level instantiating ``fan`` of the one below."""
    lines = ["nested subcircuits", "VIN in 0 AC 1", ".subckt L0 a b", "R1 a b 1k", ".ends"]
    for k in range(1, levels + 1):
        lines.append(f".subckt L{k} a b")
        lines += [f"X{i} a b L{k - 1}" for i in range(fan)]
        lines.append(".ends")
    lines += [f"XTOP in out L{levels}", "R2 out 0 1k", "C1 out 0 1u"]
    return "\n".join(lines) + "\n"


def rc_ladder_text(sections: int) -> str:
    """An RC ladder: ``sections`` × (series 1 kΩ, 100 nF to ground), the last node is out."""
    lines = ["rc ladder", "VIN in 0 AC 1", "R0 in n1 1k"]
    for k in range(1, sections + 1):
        lines.append(f"C{k} n{k} 0 100n")
        lines.append(f"R{k} n{k} {'n' + str(k + 1) if k < sections else 'out'} 1k")
    lines.append("RO out 0 1meg")
    return "\n".join(lines) + "\n"


def test_tenfold_nested_subcircuits_refused_before_expanding(run_cli, tmp_path):
    """Issue 9 regression: ten-fold nested subcircuits (10 levels × 10 instances = 10^10 resistors)
    hung. Now the flattened size is counted first and refused in one line naming the limit."""
    path = tmp_path / "nested.cir"
    path.write_text(nested_text(10))
    r = run_cli("card", str(path))
    assert r.code == 2 and len(r.err.strip().splitlines()) == 1
    assert f"{MAX_ELEMENTS:,}" in r.err and "MAX_ELEMENTS" in r.err


def test_nesting_within_the_limit_is_read():
    """Three levels × 10 = 1,000 resistors in parallel between in and out: read, and the ladder's
    resistance is 1 kΩ / 1000 = 1 Ω (Ohm's law, common practice)."""
    netlist = read_netlist(nested_text(3))
    assert sum(e.kind == "R" for e in netlist.elements) == 1001
    h = mna.transfer_function(netlist, "VIN", "out")
    assert abs(h.dc_gain() - 1000 / 1001) < 1e-9


def test_self_instantiating_subcircuit_refused():
    """A subcircuit that contains itself: refused naming the nesting limit (common practice)."""
    text = "loop\nVIN in 0 AC 1\n.subckt A x y\nX1 x y A\nR1 x y 1k\n.ends\nX1 in out A\nR2 out 0 1k\n"
    with pytest.raises(InputError, match="nest deeper than 20 levels"):
        read_netlist(text)


def test_300_section_rc_ladder_refused_naming_the_degree_limit(run_cli, tmp_path):
    """Issue 9 regression: a 300-section RC ladder took 179 s and 12 GB, then said falsely "output
    does not depend on VIN". Its transfer function has degree 300, beyond what a ratio of
    double-precision polynomials holds: refused at once in one line naming MAX_REACTIVE."""
    path = tmp_path / "ladder300.cir"
    path.write_text(rc_ladder_text(300))
    r = run_cli("card", str(path))
    assert r.code == 2 and len(r.err.strip().splitlines()) == 1
    assert "300 reactive parts" in r.err and f"limit is {mna.MAX_REACTIVE}" in r.err
    assert "does not depend" not in r.err


def test_matrix_size_limit():
    """A resistive ladder of 2,500 nodes needs more unknowns than MAX_UNKNOWNS: refused in one line
    naming the limit (common practice)."""
    lines = ["long divider", "VIN n0 0 AC 1"] + [f"R{k} n{k} n{k + 1} 10" for k in range(2500)]
    lines += ["RG n2500 0 1k", "RO n2500 out 1", "RL out 0 1k"]
    with pytest.raises(InputError, match=f"limit is {mna.MAX_UNKNOWNS:,}"):
        mna.transfer_function(read_netlist("\n".join(lines)), "VIN", "out")


def test_ladder_of_30_sections_against_the_closed_form():
    """The largest RC ladders inside the degree limit are still solved correctly: a 30-section
    ladder's DC gain is the resistive divider 1 MΩ / (31 kΩ + 1 MΩ) (Ohm's law, common practice),
    and its response at 10 Hz matches a direct complex solve with numpy (reference library)."""
    netlist = read_netlist(rc_ladder_text(30))
    h = mna.transfer_function(netlist, "VIN", "out")
    assert h.dc_gain() == pytest.approx(1e6 / (31e3 + 1e6), rel=1e-9)
    system = mna.build_system(netlist, ("VIN",), "out")
    w = 2 * np.pi * 10.0
    x = np.linalg.solve(system.G + 1j * w * system.C, system.rhs["VIN"])
    assert h.frequency_response([10.0], via="zpk")[0] == pytest.approx(x[system.output], rel=1e-6)


def test_lost_numerator_is_not_reported_as_no_dependence():
    """A fit whose numerator came out all zero while a direct solve shows the output depends on the
    input is an UnrealizableError, never "does not depend" (issue 9 regression, the false claim)."""
    netlist = read_netlist(rc_ladder_text(3))
    system = mna.build_system(netlist, ("VIN",), "out")
    G, C, rhs = mna._equilibrate(system)
    radii = np.array([1e3, 1e4, 1e5])
    with pytest.raises(UnrealizableError, match="could not be fitted"):
        mna._finish(netlist, system, G, C, rhs["VIN"], np.zeros(4), np.array([1.0, 1.0, 0, 0]), "VIN", radii)


# --------------------------------------------------------------------------- 500 nodes
def test_500_node_ladder_against_ngspice():
    """Reference: ngspice AC analysis of tests/netlists_large/ladder500.cir (505 unknowns, solved with a
    sparse LU), 10 mHz–1 kHz, within 0.05 dB and 0.5° (the tolerance of tests/test_mna_ngspice.py)."""
    from tests.spice import require_ngspice
    from tests.test_mna_ngspice import compare_with_ngspice

    require_ngspice()
    controller = compare_with_ngspice("../netlists_large/ladder500.cir", 0.01, 1000.0)
    assert controller.integrator_count() == 1 and len(controller.den) - 1 == 6


_MEASURE = """
import resource, sys, json
sys.path.insert(0, {root!r})
from convert.circuit.netlist import read_netlist
from convert.circuit.mna import transfer_function
before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
text = open({path!r}).read()
c = transfer_function(read_netlist(text, "ladder500.cir"), "VIN", "out")
after = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
print(json.dumps({{"before_kb": before, "after_kb": after, "order": len(c.den) - 1}}))
"""

#: Peak resident memory allowed for reading and solving the 500-node ladder, above what the
#: interpreter with numpy and scipy loaded already holds (MB). The dense batched solve it replaced
#: held points × n² complex matrices (about 0.25 GB for this netlist, 12 GB for the issue's ladder).
LADDER_MEMORY_MB = 60


def test_500_node_ladder_in_bounded_memory():
    """Peak memory (resource.getrusage ru_maxrss, Linux: KiB) of a fresh process that reads and
    solves ladder500.cir stays within LADDER_MEMORY_MB above its start with numpy and scipy
    imported. Memory, not time (times belong in bench/netlist_large.py)."""
    code = "import numpy, scipy.sparse.linalg, scipy.linalg\n" + _MEASURE.format(
        root=str(ROOT), path=str(HERE / "netlists_large" / "ladder500.cir")
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300, check=True)
    data = json.loads(out.stdout.strip().splitlines()[-1])
    grown_mb = (data["after_kb"] - data["before_kb"]) / 1024
    assert data["order"] == 6
    assert grown_mb <= LADDER_MEMORY_MB, f"peak grew by {grown_mb:.0f} MB"
