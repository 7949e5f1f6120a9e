"""Benchmark: read and solve the 500-node ladder netlist (issue 9 target ≤ 2 s).

Run: /work/venv/bin/python bench/netlist_large.py

The netlist is tests/netlists_large/ladder500.cir (our own scenario: a field cable as a 500-node
resistive ladder with a filter capacitor every 100 nodes, into a PI card; 505 nodal unknowns,
solved with a sparse LU per sample point). The script times read_netlist + transfer_function
in-process (imports done beforehand), repeats a few times in the same run, and prints the median
and its ratio to the 2 s target; for scale it also times the dense batched solve of the same
equations at the same sample points in the same run (numpy), the path used before. Exit 1 when
the target is missed.
"""

from __future__ import annotations

import pathlib
import statistics
import sys
import time

TARGET_S = 2.0
ROOT = pathlib.Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))


def main() -> int:
    import numpy as np

    from convert.circuit import mna
    from convert.circuit.netlist import read_netlist

    text = (ROOT / "tests" / "netlists_large" / "ladder500.cir").read_text()
    times = []
    for _ in range(5):
        t0 = time.perf_counter()
        controller = mna.transfer_function(read_netlist(text, "ladder500.cir"), "VIN", "out")
        times.append(time.perf_counter() - t0)
    median = statistics.median(times)
    netlist = read_netlist(text, "ladder500.cir")
    system = mna.build_system(netlist, ("VIN",), "out")
    G, C, rhs = mna._equilibrate(system)
    _, _, points = mna._sample_points(system, *mna._ATTEMPTS[0])
    t0 = time.perf_counter()
    Y = G[None, :, :] + points[:, None, None] * C[None, :, :]
    np.linalg.solve(Y, np.broadcast_to(rhs["VIN"][:, None], (len(points), G.shape[0], 1)))
    dense = time.perf_counter() - t0
    print(f"500-node ladder ({G.shape[0]} unknowns, degree {len(controller.den) - 1}): read + solve median "
          f"{median:.3f} s over {len(times)} runs (min {min(times):.3f} s)")
    print(f"ratio to the {TARGET_S:g} s target: {median / TARGET_S:.2f} (≤ 1 meets it)")
    print(f"for scale: the dense batched solve alone at the same {len(points)} sample points took {dense:.3f} s "
          f"and {Y.nbytes / 2**20:.0f} MB for the matrices")
    return 0 if median <= TARGET_S else 1


if __name__ == "__main__":
    sys.exit(main())
