"""How the cost grows: a few points along each dimension a user can turn up, measured in one run.

Not figures with targets: each row is a time (and for the draws its peak memory) and its ratio to
the first point of the same dimension, so the growth can be read off (×2 for twice the work is
linear). Dimensions, each on the path users run where there is one:

* draws — ``loopshift report cases/firmware_pid_to_opamp.toml --draws N`` (fresh process, peak
  resident memory too, under the 4 GB address-space cap of bench/report.py);
* frequency points — the tolerance engine ``convert.circuit.tolerance.run_tolerances`` as
  bench/circuit.py runs it (10,000 draws of the single-amplifier PID, bands and per-draw maxima)
  at 100 … 1,600 frequencies, in-process;
* rates × methods — ``loopshift report`` of the tank-level case (cases/pi_card_to_firmware.toml)
  with its firmware target widened to R rates × M methods;
* netlist size — ``read_netlist`` + ``transfer_function`` of a generated resistive ladder of N nodes
  (five filter capacitors spread along it) into a PI card, in-process;
* cases and workers — ``loopshift batch`` of N copies of the demo cases with 1 and 2 workers.

    python bench/scaling.py [--quick]      # prints the Markdown tables docs/performance.md holds
"""

from __future__ import annotations

import os
import re
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

if __package__ in (None, ""):
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

from bench.common import ROOT, loopshift, process, repeated

DOCS_BEGIN = "<!-- scaling: begin (written by python -m bench --write-docs) -->"
DOCS_END = "<!-- scaling: end -->"

Row = tuple[str, float, str]  # point, seconds, extra


def ladder(nodes: int) -> str:
    """A field cable as an ``nodes``-node resistive ladder (2 Ω series, 1 MΩ leakage), a 10 µF filter
    capacitor every nodes/5 nodes, into a PI card (our own scenario, as tests/netlists_large)."""
    lines = [f"Field cable as a {nodes}-node ladder into a PI card", "VIN src 0 AC 1", "RS src n1 2"]
    step = max(nodes // 5, 1)
    for i in range(1, nodes + 1):
        lines.append(f"RL{i} n{i} 0 1meg")
        if i % step == 0:
            lines.append(f"CF{i} n{i} 0 10u")
        if i < nodes:
            lines.append(f"RS{i} n{i} n{i + 1} 2")
    lines += [f"RIN n{nodes} inv 10k", "RF inv fb 20k", "CF fb out 1u", "X1 0 inv out OPAMP", ".end"]
    return "\n".join(lines) + "\n"


def draws_rows(tmp: Path, quick: bool) -> list[Row]:
    from bench.common import peak_rss
    from bench.report import CIRCUIT_CASE

    case = ROOT / "cases" / f"{CIRCUIT_CASE}.toml"
    rows = []
    for n in (500, 2000, 10_000) if quick else (500, 2000, 10_000, 30_000):
        t0 = time.perf_counter()
        mb, code, last = peak_rss(
            loopshift("report", str(case), "--out", str(tmp / f"d{n}"), "--force", "--draws", str(n))
        )
        rows.append(
            (
                f"{n:,} draws",
                time.perf_counter() - t0,
                f"peak {mb:.0f} MB" + ("" if code in (0, 1) else f"; did not finish: {last[:80]}"),
            )
        )
    return rows


def frequency_rows(quick: bool) -> list[Row]:
    import numpy as np

    from bench.circuit import engine
    from convert.circuit.topologies import get_topology

    topo = get_topology("pid-single-amp")
    rows = []
    for n in (100, 400, 1600):
        f = np.logspace(-2, 3, n)
        times = repeated(lambda: engine(topo, f, 10_000), 1 if quick else 3)  # noqa: B023
        rows.append((f"{n} frequencies", statistics.median(times), "10,000 draws"))
    return rows


def rates_methods_rows(tmp: Path, quick: bool) -> list[Row]:
    from convert.digital import METHODS

    text = (ROOT / "cases" / "pi_card_to_firmware.toml").read_text(encoding="utf-8")
    rows = []
    for rates, methods in ((1, 1), (2, 2), (4, 7)) if quick else ((1, 1), (2, 2), (4, 4), (4, 7)):
        fs = ", ".join(f'"{5 * 2**k} Hz"' for k in range(rates))
        ms = ", ".join(f'"{m}"' for m in METHODS[:methods])
        case = tmp / f"rm{rates}x{methods}.toml"
        case.write_text(
            re.sub(r"methods = \[[^\]]*\]", f"methods = [{ms}]", text.replace('fs = "10 Hz"', f"fs = [{fs}]")),
            encoding="utf-8",
        )
        run = process(loopshift("report", str(case), "--out", str(tmp / case.stem), "--force"), ok_codes=(0, 1))
        times = repeated(run, 1, warmup=False)
        rows.append((f"{rates} × {methods}", times[0], f"{rates * methods} digital form(s)"))
    return rows


def netlist_rows(quick: bool) -> list[Row]:
    from convert.circuit.mna import transfer_function
    from convert.circuit.netlist import read_netlist

    transfer_function(read_netlist(ladder(50), "ladder.cir"), "VIN", "out")  # warm-up: first-call costs
    rows = []
    for n in (100, 250, 500, 1000) if quick else (100, 250, 500, 1000, 1900):
        text = ladder(n)
        times = repeated(
            lambda: transfer_function(read_netlist(text, "ladder.cir"), "VIN", "out"),  # noqa: B023 (called at once)
            1 if quick else 3,
            warmup=False,
        )
        rows.append((f"{n} nodes", statistics.median(times), ""))
    return rows


def batch_rows(tmp: Path, quick: bool) -> list[Row]:
    from bench.batch import make_cases, run_batch

    rows = []
    for n in (3, 6) if quick else (4, 8, 16):
        folder = tmp / f"b{n}"
        folder.mkdir()
        make_cases(folder, n)
        for workers in (1, 2):
            rows.append(
                (
                    f"{n} cases, {workers} worker{'s' if workers > 1 else ''}",
                    run_batch(folder, tmp / f"b{n}-out{workers}", workers),
                    "",
                )
            )
    return rows


def measure_points(quick: bool = False) -> dict[str, list[Row]]:
    out = {}
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        for title, fn in (
            ("draws (report, firmware_pid_to_opamp)", lambda: draws_rows(tmp, quick)),
            ("frequency points (tolerance engine, in-process)", lambda: frequency_rows(quick)),
            ("rates × methods (report, tank-level case)", lambda: rates_methods_rows(tmp, quick)),
            ("netlist size (read + solve, in-process)", lambda: netlist_rows(quick)),
            ("cases and workers (batch)", lambda: batch_rows(tmp, quick)),
        ):
            t0 = time.perf_counter()
            out[title] = fn()
            print(f"# scaling: {title} ({time.perf_counter() - t0:.0f} s)", file=sys.stderr)
        shutil.rmtree(tmp, ignore_errors=True)
    return out


def markdown(points: dict[str, list[Row]], quick: bool) -> str:
    lines = [
        DOCS_BEGIN,
        "",
        f"Measured {time.strftime('%Y-%m-%d')} with `python bench/scaling.py"
        f"{' --quick' if quick else ''}` (one run per point unless stated; the machine was shared).",
        "",
    ]
    for title, rows in points.items():
        lines += [f"**{title}**", "", "| point | seconds | × the first point | note |", "|---|---|---|---|"]
        first = rows[0][1]
        lines += [f"| {p} | {s:.3f} | {s / first:.2f} | {extra} |" for p, s, extra in rows]
        lines.append("")
    lines.append(DOCS_END)
    return "\n".join(lines)


if __name__ == "__main__":
    quick = "--quick" in sys.argv[1:]
    print(markdown(measure_points(quick), quick))
