"""Writes ladder500.cir: the 500-node netlist of issue 9's large-netlist check (our own scenario).

A level transmitter's long field cable, modelled as a 500-node resistive ladder (2 Ω of copper
per segment, 1 MΩ of insulation leakage to ground at every node), with a 10 µF surge/filter
capacitor every 100 nodes, feeding an inverting PI card (10 kΩ in, 20 kΩ + 1 µF feedback, ideal
op-amp). 505 nodal unknowns, six reactive parts. Run: python tests/netlists_large/make_ladder500.py
"""

import pathlib

NODES = 500


def ladder_text(nodes: int = NODES) -> str:
    lines = [f"Field cable as a {nodes}-node ladder into a PI card", "VIN src 0 AC 1", "RS src n1 2"]
    for k in range(1, nodes + 1):
        lines.append(f"RL{k} n{k} 0 1meg")
        if k < nodes:
            lines.append(f"RS{k} n{k} n{k + 1} 2")
        if k % 100 == 0:
            lines.append(f"CF{k} n{k} 0 10u")
    lines += [f"RIN n{nodes} inv 10k", "RF inv fb 20k", "CF fb out 1u", "X1 0 inv out OPAMP", ".end"]
    return "\n".join(lines) + "\n"


if __name__ == "__main__":
    (pathlib.Path(__file__).parent / "ladder500.cir").write_text(ladder_text())
