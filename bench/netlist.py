"""Benchmark: read and solve a 40-node card with 10 capacitors and 4 op-amps (issue 5 target ≤ 0.2 s).

Run: /work/venv/bin/python bench/netlist.py

The card is generated (our own invented four-stage card: resistor ladders and dividers around
four inverting stages, capacitors spread over five decades of time constant). The script times
read_netlist + transfer_function in-process (imports done beforehand), repeats a few times in the
same run, and prints the median and the ratio to the 0.2 s target. The full ``card`` analysis
with the sensitivity table is timed too, for information (no target).
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
    return 0 if median <= TARGET_S else 1


if __name__ == "__main__":
    sys.exit(main())
