"""Run ngspice (the independent reference simulator) in batch mode and read an AC sweep back.

Used by tests only. Tests that need ngspice call :func:`require_ngspice` first, which skips
with a clear reason where ngspice is not installed (``.ci/run`` installs it).
"""

from __future__ import annotations

import os
import shutil
import subprocess
import tempfile

import numpy as np
import pytest


def require_ngspice() -> str:
    path = shutil.which("ngspice")
    if path is None:
        pytest.skip("ngspice is not installed (Debian package 'ngspice'; .ci/run installs it)")
    return path


def _run_deck(netlist: str, analysis: str, output_node: str, options: str = "") -> np.ndarray:
    """Run ``netlist`` (no analysis lines; a trailing .end is removed) with one ``analysis``
    command in batch mode and return the rows ``wrdata`` wrote for ``v(output_node)``.
    ngspice pitfalls respected: batch mode ends with ``quit 0``; values in exponent form."""
    exe = require_ngspice()
    with tempfile.TemporaryDirectory() as tmp:
        data = os.path.join(tmp, "out.txt")
        body = netlist.rstrip()
        if body.lower().endswith(".end"):
            body = body[: -len(".end")].rstrip()
        deck = (
            f"{body}\n"
            f"{options}"
            ".control\n"
            "set noaskquit\n"
            "set wr_singlescale\n"
            "set wr_vecnames\n"
            "option numdgt=15\n"
            f"{analysis}\n"
            f"wrdata {data} v({output_node})\n"
            "quit 0\n"
            ".endc\n"
            ".end\n"
        )
        cir = os.path.join(tmp, "deck.cir")
        with open(cir, "w") as fh:
            fh.write(deck)
        proc = subprocess.run([exe, "-b", cir], capture_output=True, text=True, timeout=120, cwd=tmp)
        if not os.path.exists(data):
            raise AssertionError(
                f"ngspice produced no data (exit {proc.returncode}):\n{proc.stdout[-2000:]}\n{proc.stderr[-2000:]}"
            )
        return np.loadtxt(data, skiprows=1, ndmin=2)


def ac_sweep(
    netlist: str,
    output_node: str = "out",
    f_start_hz: float = 0.01,
    f_stop_hz: float = 100.0,
    points_per_decade: int = 20,
) -> tuple[np.ndarray, np.ndarray]:
    """Simulate ``netlist`` (no analysis lines, no .end) with an AC sweep; return (f_hz, V(out)).

    The netlist must contain an AC 1 source. The sweep is logarithmic (``dec``).
    """
    rows = _run_deck(netlist, f"ac dec {points_per_decade} {f_start_hz:.9e} {f_stop_hz:.9e}", output_node)
    return rows[:, 0], rows[:, 1] + 1j * rows[:, 2]


def pwl_source(name: str, node: str, times_s, values_v) -> str:
    """A SPICE piecewise-linear voltage source line ``NAME node 0 PWL(t0 v0 t1 v1 ...)`` in
    exponent form (continued over several lines, ngspice reads ``+`` continuations)."""
    pairs = [f"{float(t):.12e} {float(v):.12e}" for t, v in zip(times_s, values_v)]
    lines = [f"{name} {node} 0 DC 0 PWL("]
    for i in range(0, len(pairs), 8):
        lines.append("+ " + " ".join(pairs[i : i + 8]))
    lines.append("+ )")
    return "\n".join(lines)


def transient(
    netlist: str, t_stop_s: float, max_step_s: float, output_node: str = "out", reltol: float = 1e-6
) -> tuple[np.ndarray, np.ndarray]:
    """Simulate ``netlist`` (no analysis lines, no .end) with ngspice ``tran``; return (t_s, V(out))
    at ngspice's own time points (interpolate them to the instants you need).

    ``max_step_s`` caps the internal step (use a small fraction of the fastest time constant and
    of the sample period); ``reltol`` is tightened from SPICE's 1e-3 so the reference is better
    than the tolerances it checks. The simulation starts from zero (``uic``: capacitors
    uncharged, as a card switched on with its integrator reset).
    """
    rows = _run_deck(
        netlist,
        f"tran {max_step_s:.9e} {t_stop_s:.9e} 0 {max_step_s:.9e} uic",
        output_node,
        options=f".options reltol={reltol:g} abstol=1e-15 vntol=1e-12\n",
    )
    return rows[:, 0], rows[:, 1]
