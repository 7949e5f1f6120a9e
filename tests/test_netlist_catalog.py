"""The netlist reader + nodal analysis against the catalog topologies' own transfer functions.

Issue 5 check: every catalog topology (convert.circuit.topologies, written by hand as formulas in
the parts) written out by convert.circuit.netlist_out and read back by the netlist reader gives
the same transfer function. The writer's op-amp subcircuit is a 1e9 gain E source; the test swaps
its instances for the reader's ideal op-amp (a nullor), so the formulas are checked exactly (to
1e-8), and also keeps the 1e9 E source once, checked to 1e-3. Two independent derivations of the same circuit: hand-written formulas
versus nodal analysis of the netlist.
"""

from __future__ import annotations

import numpy as np
import pytest

topologies = pytest.importorskip("convert.circuit.topologies", reason="topology catalog not present")
netlist_out = pytest.importorskip("convert.circuit.netlist_out", reason="netlist writer not present")

from convert.circuit.mna import transfer_function  # noqa: E402
from convert.circuit.netlist import read_netlist  # noqa: E402


def _parts(topo, seed: int) -> dict[str, float]:
    rng = np.random.default_rng(seed)
    parts = {}
    for p in topo.parts:
        if p.kind == "R":
            parts[p.name] = float(10 ** rng.uniform(3.5, 5.5))
        else:
            parts[p.name] = float(10 ** rng.uniform(-8, -6))
    for k, v in topo.fixed_parts.items():
        parts[k] = float(v)
    for copy, original in topo.equal_parts:
        parts[copy] = parts[original]
    # the values the netlist carries (10 significant digits, convert.values.format_spice_number), so
    # that a high-Q section's sensitivity to the last written digit is not counted as a difference
    return {k: float(f"{v:.9e}") for k, v in parts.items()}


@pytest.mark.parametrize("name", list(topologies.TOPOLOGIES))
def test_catalog_topology_read_back(name):
    """Reference: the catalog's hand-derived transfer function of each topology (F(s), positive
    form; the writer adds the inverter so V(out)/V(in) = +F)."""
    topo = topologies.get_topology(name)
    parts = _parts(topo, seed=sum(map(ord, name)))
    drives = ["error", "setpoint"] if topo.two_input else ["error"]
    for drive in drives:
        text = netlist_out.netlist_text(topo, parts, drive=drive)
        ideal_text = "\n".join(
            line[: -len("LSOPAMP")] + "OPAMP" if line.startswith("X") and line.endswith("LSOPAMP") else line
            for line in text.splitlines()
        )
        ours = transfer_function(read_netlist(ideal_text, f"{name}.cir"))
        high_gain = transfer_function(read_netlist(text, f"{name}.cir"))
        if topo.two_input:
            paths = topo.paths_from_parts(parts)
            ref = paths["measurement"] if drive == "error" else paths["setpoint"]
        else:
            ref = topo.controller_from_parts(parts)
        corners = ref.corner_frequencies_hz()
        fs = corners["zeros"] + corners["poles"] or [100.0]
        f = np.geomspace(min(fs) / 100, max(fs) * 100, 80)
        a = ours.frequency_response(f, via="zpk")
        b = ref.frequency_response(f, via="zpk")
        err = np.max(np.abs(a - b) / np.abs(b))
        assert err < 1e-8, f"{name} ({drive}): relative difference {err:.3g}"
        err_hg = np.max(np.abs(high_gain.frequency_response(f, via="zpk") - b) / np.abs(b))
        assert err_hg < 1e-3, f"{name} ({drive}, 1e9 gain op-amp): relative difference {err_hg:.3g}"
