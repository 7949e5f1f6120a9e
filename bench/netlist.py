"""Benchmark: read and solve a 40-node card with 10 capacitors and 4 op-amps (issue 5 target ≤ 0.2 s).

Run: /work/venv/bin/python bench/netlist.py [--quick] [--json]

The card is generated (our own invented four-stage card: resistor ladders and dividers around
four inverting stages, capacitors spread over five decades of time constant). The script times
read_netlist + transfer_function in-process (imports done beforehand), repeats it in the same
run; the figure is the median over the fixed 0.2 s target. The full ``card`` analysis with the
sensitivity table is timed too, as a note (no target).

The sensitivity table (76 parts, ±0.1 % each) is timed both ways in the same run by interleaved
pairs: by updating the nominal factorization (``method="update"``, what ``loopshift card`` uses)
and by re-solving every changed circuit (``method="resolve"``, the reference). The figure is the
speed-up (target: ≥ 5× faster); the two tables must agree (same rows, quantities within 1e-6),
or the benchmark stops.
"""

from __future__ import annotations

import sys
import time

if __package__ in (None, ""):
    sys.path.insert(0, __import__("os").path.dirname(__import__("os").path.dirname(__file__)))

from bench.common import Figure, interleaved, repeated, run_script, seconds_figure

TARGET_S = 0.2


def make_card() -> str:
    lines = ["Benchmark card: four inverting stages with ladders (generated)", "VIN in 0 AC 1"]
    caps = [3, 3, 2, 2]
    prev = "in"
    r = 0
    c = 0
    for k in range(4):
        nodes = [f"s{k}l{i}" for i in range((6, 6, 6, 5)[k])]
        # input ladder: series resistors with shunt resistors, some shunt capacitors
        last = prev
        for i, n in enumerate(nodes):
            r += 1
            lines.append(f"R{r} {last} {n} {10 + i}k")
            r += 1
            lines.append(f"R{r} {n} 0 {100 + 10 * i}k")
            last = n
        inv = f"s{k}m"
        r += 1
        lines.append(f"R{r} {last} {inv} 47k")
        out = "out" if k == 3 else f"s{k}o"
        fb = f"s{k}f"
        r += 1
        lines.append(f"R{r} {inv} {fb} 100k")
        for j in range(caps[k]):
            c += 1
            tau_node = nodes[j + 1]
            value = 10 ** (-9 + (c % 5))  # 1 nF .. 10 µF
            lines.append(f"C{c} {tau_node} 0 {value:.3e}")
        c_fb = None
        if caps[k] < 3:
            pass
        lines.append(f"X{k + 1} 0 {inv} {out} OPAMP")
        # feedback: R to a node, plus a divider back from the output
        mid = f"s{k}d"
        r += 1
        lines.append(f"R{r} {fb} {out} 22k")
        r += 1
        lines.append(f"R{r} {out} {mid} 33k")
        r += 1
        lines.append(f"R{r} {mid} 0 68k")
        prev = mid
        del c_fb
    lines.append(".end")
    return "\n".join(lines) + "\n"


def measure(quick: bool = False) -> list[Figure]:
    from convert.circuit.card import analyze_card
    from convert.circuit.mna import transfer_function
    from convert.circuit.netlist import read_netlist

    text = make_card()
    netlist = read_netlist(text, "bench.cir")
    nodes = len(netlist.nodes())
    caps = len(netlist.of_kind("C"))
    amps = len(netlist.of_kind("OPAMP"))
    controller = transfer_function(netlist)  # warm up (numpy first-call costs)
    times = repeated(lambda: transfer_function(read_netlist(text, "bench.cir")), 5 if quick else 15)
    t0 = time.perf_counter()
    analysis = analyze_card(netlist)
    full = time.perf_counter() - t0
    read = seconds_figure(
        f"netlist: {nodes}-node card read + solve",
        times,
        TARGET_S,
        f"read_netlist + transfer_function ({caps} capacitors, {amps} op-amps, {len(netlist.elements)} elements, "
        f"order {controller.order})",
        notes=(
            f"full card analysis with sensitivities of {len(analysis.sensitivities)} parts: "
            f"{full * 1e3:.0f} ms (no target)",
        ),
    )
    return [read, sensitivity_table(netlist, 1 if quick else 3)]


def sensitivity_table(netlist, pairs: int) -> Figure:
    """The sensitivity table by update against re-solving, interleaved; the tables must agree."""
    from convert.circuit.mna import transfer_functions
    from convert.circuit.sensitivity import controller_quantities, sensitivities
    from convert.pid import pid_from_controller

    def evaluate(nl):  # the quantities ``loopshift card`` tracks for a one-input card
        c = transfer_functions(nl)["VIN"].controller
        return controller_quantities(c, pid_from_controller(c))

    fast = sensitivities(netlist, evaluate, method="update")
    ref = sensitivities(netlist, evaluate, method="resolve")
    same_rows = [(r.part, list(r.effects)) for r in fast] == [(r.part, list(r.effects)) for r in ref]
    diff = max((abs(a.effects[k] - b.effects[k]) for a, b in zip(fast, ref) for k in b.effects), default=0.0)
    if not same_rows or diff > 1e-6:
        raise RuntimeError(
            f"netlist: the sensitivity tables differ (same rows: {same_rows}, largest difference {diff:.2g})"
        )
    p = interleaved(
        lambda: sensitivities(netlist, evaluate, method="update"),
        lambda: sensitivities(netlist, evaluate, method="resolve"),
        pairs,
        warmup=False,
    )
    return Figure(
        f"netlist: sensitivity table by update ({len(ref)} parts)",
        p.median,
        5.0,
        at_least=True,
        spread=p.spread,
        detail=f"speed-up: re-solve {p.subject_s * 1e3:.0f} ms / update {p.reference_s * 1e3:.0f} ms "
        f"(medians of {pairs} interleaved pairs); tables agree within {diff:.1g} % per %",
    )


if __name__ == "__main__":
    sys.exit(run_script(measure))
