"""Benchmark: read and solve the 500-node ladder netlist (issue 9 target ≤ 2 s).

Run: /work/venv/bin/python bench/netlist_large.py [--quick] [--json]

The netlist is tests/netlists_large/ladder500.cir (our own scenario: a field cable as a 500-node
resistive ladder with a filter capacitor every 100 nodes, into a PI card; 505 nodal unknowns,
solved with a sparse LU per sample point). The script times read_netlist + transfer_function
in-process (imports done beforehand), repeats it in the same run; the figure is the median over
the fixed 2 s target. For scale a note gives the dense batched solve of the same equations at the
same sample points in the same run (numpy), the path used before (not with --quick). Exit 1 when the target is missed.
"""

from __future__ import annotations

import sys
import time

if __package__ in (None, ""):
    sys.path.insert(0, __import__("os").path.dirname(__import__("os").path.dirname(__file__)))

from bench.common import ROOT, Figure, repeated, run_script, seconds_figure

TARGET_S = 2.0


def measure(quick: bool = False) -> list[Figure]:
    import numpy as np

    from convert.circuit import mna
    from convert.circuit.netlist import read_netlist

    text = (ROOT / "tests" / "netlists_large" / "ladder500.cir").read_text()
    controllers = []
    times = repeated(
        lambda: controllers.append(mna.transfer_function(read_netlist(text, "ladder500.cir"), "VIN", "out")),
        2 if quick else 5,
        warmup=False,
    )
    if quick:  # the dense solve takes tens of seconds and about 400 MB: only in the full run
        return [
            seconds_figure(
                "netlist: 500-node ladder read + solve",
                times,
                TARGET_S,
                f"read_netlist + transfer_function (degree {len(controllers[0].den) - 1})",
            )
        ]
    netlist = read_netlist(text, "ladder500.cir")
    system = mna.build_system(netlist, ("VIN",), "out")
    G, C, rhs = mna._equilibrate(system)
    _, _, points = mna._sample_points(system, *mna._ATTEMPTS[0])
    t0 = time.perf_counter()
    Y = G[None, :, :] + points[:, None, None] * C[None, :, :]
    np.linalg.solve(Y, np.broadcast_to(rhs["VIN"][:, None], (len(points), G.shape[0], 1)))
    dense = time.perf_counter() - t0
    return [
        seconds_figure(
            "netlist: 500-node ladder read + solve",
            times,
            TARGET_S,
            f"read_netlist + transfer_function ({G.shape[0]} unknowns, degree {len(controllers[0].den) - 1})",
            notes=(
                f"the dense batched solve alone at the same {len(points)} sample points: {dense:.3f} s and "
                f"{Y.nbytes / 2**20:.0f} MB for the matrices (the path used before)",
            ),
        )
    ]


if __name__ == "__main__":
    sys.exit(run_script(measure))
