"""Benchmark: read and solve a 40-node card with 10 capacitors and 4 op-amps (issue 5 target ≤ 0.2 s).

Run: /work/venv/bin/python bench/netlist.py

The card is generated (our own invented four-stage card: resistor ladders and dividers around
four inverting stages, capacitors spread over five decades of time constant). The script times
read_netlist + transfer_function in-process (imports done beforehand), repeats a few times in the
same run, and prints the median and the ratio to the 0.2 s target. The full ``card`` analysis
with the sensitivity table is timed too, for information (no target).

The sensitivity table (76 parts, ±0.1 % each) is timed both ways in the same run: by updating the
nominal factorization (``method="update"``, what ``loopshift card`` uses; median of 3) and by
re-solving every changed circuit (``method="resolve"``, the reference; once). The script prints
the ratio and the largest difference between the two tables (target: ≥ 5× faster, same table).
"""

from __future__ import annotations

import statistics
import sys
import time

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


def main() -> int:
    from convert.circuit.card import analyze_card
    from convert.circuit.mna import transfer_function
    from convert.circuit.netlist import read_netlist

    text = make_card()
    netlist = read_netlist(text, "bench.cir")
    nodes = len(netlist.nodes())
    caps = len(netlist.of_kind("C"))
    amps = len(netlist.of_kind("OPAMP"))
    transfer_function(netlist)  # warm up (numpy first-call costs)

    times = []
    for _ in range(7):
        t0 = time.perf_counter()
        controller = transfer_function(read_netlist(text, "bench.cir"))
        times.append(time.perf_counter() - t0)
    median = statistics.median(times)
    t0 = time.perf_counter()
    analysis = analyze_card(netlist)
    full = time.perf_counter() - t0
    print(f"card: {nodes} nodes, {caps} capacitors, {amps} op-amps, {len(netlist.elements)} elements; "
          f"controller order {controller.order}")
    print(f"read + solve: median {median * 1e3:.1f} ms over {len(times)} runs "
          f"(min {min(times) * 1e3:.1f} ms, max {max(times) * 1e3:.1f} ms)")
    print(f"ratio to the {TARGET_S * 1e3:.0f} ms target: {median / TARGET_S:.3f} "
          f"({'within' if median <= TARGET_S else 'OVER'} target)")
    print(f"full card analysis with sensitivities of {len(analysis.sensitivities)} parts: {full * 1e3:.0f} ms "
          "(information, no target)")
    sens_ok = sensitivity_table(netlist)
    return 0 if median <= TARGET_S and sens_ok else 1


def sensitivity_table(netlist) -> bool:
    """Time the sensitivity table by update and by re-solve; print the ratio and the difference."""
    from convert.circuit.mna import transfer_functions
    from convert.circuit.sensitivity import controller_quantities, sensitivities
    from convert.pid import pid_from_controller

    def evaluate(nl):  # the quantities ``loopshift card`` tracks for a one-input card
        c = transfer_functions(nl)["VIN"].controller
        return controller_quantities(c, pid_from_controller(c))

    fast_times = []
    for _ in range(3):
        t0 = time.perf_counter()
        fast = sensitivities(netlist, evaluate, method="update")
        fast_times.append(time.perf_counter() - t0)
    t0 = time.perf_counter()
    ref = sensitivities(netlist, evaluate, method="resolve")
    slow = time.perf_counter() - t0
    fast_t = statistics.median(fast_times)
    same_rows = [(r.part, list(r.effects)) for r in fast] == [(r.part, list(r.effects)) for r in ref]
    diff = max((abs(a.effects[k] - b.effects[k]) for a, b in zip(fast, ref) for k in b.effects), default=0.0)
    ratio = slow / fast_t
    print(f"sensitivity table, {len(ref)} parts: update {fast_t * 1e3:.0f} ms (median of {len(fast_times)}), "
          f"re-solve {slow * 1e3:.0f} ms; {ratio:.1f}x faster ({'within' if ratio >= 5 else 'UNDER'} the 5x target)")
    print(f"tables {'have the same rows and quantities' if same_rows else 'DIFFER in rows or quantities'}; "
          f"largest difference {diff:.2g} (% per %)")
    return ratio >= 5 and same_rows and diff <= 1e-6


if __name__ == "__main__":
    sys.exit(main())
