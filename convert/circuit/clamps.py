"""Diode and zener clamps of a card: recognized, left out of the linear analysis, limits reported.

A diode only conducts outside the linear range (forward above about 0.6–0.7 V, a zener in
reverse above its BV), so the small-signal transfer function is computed without it. The
firmware has to reproduce what it does as output limits and anti-windup; this module says
where each clamp sits and at roughly which voltage it starts to conduct.

Diodes in series (joined through nodes that nothing else touches) form one chain; the chain's
threshold in each direction is the sum of its diodes' thresholds: a diode conducting forward
adds its forward drop (default 0.65 V), a zener in reverse adds its BV, a plain diode in
reverse blocks. Approximate by nature (common practice; real knees are soft and depend on
current and temperature).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from convert.circuit.netlist import GROUND, Element, Netlist


@dataclass(frozen=True)
class Clamp:
    """One diode chain between ``node_a`` and ``node_b``.

    ``positive_v``: V(node_a) − V(node_b) at which it starts to conduct (inf: never);
    ``negative_v``: the same for V(node_b) − V(node_a). ``role`` says what it limits.
    """

    diodes: tuple[str, ...]
    node_a: str
    node_b: str
    positive_v: float
    negative_v: float
    role: str
    where: str

    def describe(self) -> str:
        a, b, up, down = self.node_a, self.node_b, self.positive_v, self.negative_v
        if a == GROUND:
            a, b, up, down = b, a, down, up
        limits = []
        if not math.isinf(up):
            limits.append(f"V({a}) − V({b}) rises above ≈ +{up:.2f} V")
        if not math.isinf(down):
            limits.append(f"falls below ≈ −{down:.2f} V")
        if not limits:
            when = "never (the chain blocks both ways)"
        elif len(limits) == 2:
            when = f"when {limits[0]} or {limits[1]}"
        elif math.isinf(up):
            when = f"when V({a}) − V({b}) {limits[0]} (blocks the other way)"
        else:
            when = f"when {limits[0]} (blocks the other way)"
        return f"{', '.join(self.diodes)} ({self.where}): {self.role}; conducts {when}"


def _thresholds(d: Element, from_node: str) -> tuple[float, float]:
    """(threshold going from ``from_node`` to the other end, threshold the other way)."""
    vf = d.param("vf", 0.65)
    bv = d.param("bv")
    reverse = bv if bv is not None else math.inf
    forward_first = d.nodes[0] == from_node  # anode at from_node: positive direction is forward
    return (vf, reverse) if forward_first else (reverse, vf)


def find_clamps(netlist: Netlist) -> tuple[Clamp, ...]:
    """Group the netlist's diodes into chains and describe each one's limits and role."""
    diodes = netlist.diodes
    if not diodes:
        return ()
    touched: dict[str, int] = {}
    for e in netlist.elements:
        for n in e.nodes:
            touched[n] = touched.get(n, 0) + (0 if e.kind == "D" else 1)
    diode_ends: dict[str, list[Element]] = {}
    for d in diodes:
        for n in d.nodes:
            diode_ends.setdefault(n, []).append(d)

    def internal(n: str) -> bool:
        return n != GROUND and touched.get(n, 0) == 0 and len(diode_ends.get(n, [])) == 2

    used: set[str] = set()
    clamps: list[Clamp] = []
    opamps = netlist.of_kind("OPAMP")
    for start in diodes:
        if start.name in used:
            continue
        # Walk to one end of the chain.
        chain = [start]
        node = start.nodes[0]
        while internal(node):
            nxt = next(d for d in diode_ends[node] if d is not chain[0])
            if nxt in chain:
                break
            chain.insert(0, nxt)
            node = nxt.nodes[1] if nxt.nodes[0] == node else nxt.nodes[0]
        end_a = node
        # Walk along to the other end, summing thresholds.
        pos = neg = 0.0
        current = end_a
        ordered: list[Element] = []
        prev = None
        d = chain[0]
        while True:
            ordered.append(d)
            used.add(d.name)
            fwd, back = _thresholds(d, current)
            pos += fwd
            neg += back
            current = d.nodes[1] if d.nodes[0] == current else d.nodes[0]
            if not internal(current):
                break
            prev = d
            d = next(x for x in diode_ends[current] if x is not prev)
            if d.name in used:
                break
        end_b = current
        clamps.append(
            Clamp(tuple(x.name for x in ordered), end_a, end_b, pos, neg, _role(end_a, end_b, opamps), ordered[0].where)
        )
    return tuple(clamps)


def _role(a: str, b: str, opamps) -> str:
    for op in opamps:
        if {a, b} == {op.nodes[2], op.nodes[1]}:
            return (
                f"across the feedback of {op.name} (output {op.nodes[2]} to inverting input {op.nodes[1]}): "
                "limits that stage's output swing, so its integrator cannot wind up beyond it"
            )
    if GROUND in (a, b):
        other = b if a == GROUND else a
        return f"from node {other} to ground: limits V({other})"
    return f"between nodes {a} and {b}: limits their difference"


def clamp_notes(netlist: Netlist) -> list[str]:
    """One line per clamp, plus the instruction for the firmware."""
    clamps = find_clamps(netlist)
    if not clamps:
        return []
    names = ", ".join(d.name for d in netlist.diodes)
    lines = [f"diodes {names} are left out of the linear analysis (they conduct only at the limits)"]
    lines += [c.describe() for c in clamps]
    lines.append(
        "the firmware must reproduce these limits as output limits with anti-windup "
        "(forward drop taken as 0.65 V, range 0.6–0.7 V; zener voltage from the model's BV)"
    )
    return lines


def clamped_nodes(netlist: Netlist) -> dict[str, tuple[float, float]]:
    """Node -> (low, high) volts its clamps hold it to (a side no clamp bounds is ±inf). A clamp
    counts when it runs from a node to ground, or across the feedback of an op-amp with its
    non-inverting input at ground (the inverting input is then a virtual ground and the clamp
    bounds that op-amp's output)."""
    virtual = {op.nodes[1]: op.nodes[2] for op in netlist.of_kind("OPAMP") if op.nodes[0] == GROUND}
    out: dict[str, tuple[float, float]] = {}
    for c in find_clamps(netlist):
        for node, other, up, down in (
            (c.node_a, c.node_b, c.positive_v, c.negative_v),
            (c.node_b, c.node_a, c.negative_v, c.positive_v),
        ):
            if node == GROUND or not (other == GROUND or virtual.get(other) == node):
                continue
            lo, hi = out.get(node, (-math.inf, math.inf))
            out[node] = (max(lo, -down), min(hi, up))
    return {k: v for k, v in out.items() if not (math.isinf(v[0]) and math.isinf(v[1]))}


def _linear_stage(netlist: Netlist, node: str) -> tuple[str, float] | None:
    """(output node, gain) of the one op-amp stage fed by ``node`` when it is a plain resistive
    amplifier (ideal or single-pole op-amp): inverting (+ at ground, one resistor from ``node`` to
    the inverting input and one from there to the output, nothing else at that input: gain −Rf/Rin) or non-inverting (+ at
    ``node``, the inverting input tied to the output, or to ground and the output through one
    resistor each: gain 1 + Rf/Rg). None for anything else (a reactive part, a second input, a
    divider, several stages fed by ``node``)."""
    at: dict[str, list[Element]] = {}
    for e in netlist.elements:
        for n in set(e.nodes):
            at.setdefault(n, []).append(e)
    found = []
    for op in netlist.of_kind("OPAMP"):
        # a single-pole op-amp (gbw=) is such an amplifier at the slow swings a clamp holds: its
        # DC gain A0 moves the stage gain by about (1 + Rf/Rin)/A0, far inside the clamp's own knee
        plus, minus, o = op.nodes
        others = [e for e in at.get(minus, []) if e is not op]
        if plus == GROUND and minus != node:
            rin = [e for e in others if e.kind == "R" and set(e.nodes) == {node, minus}]
            rf = [e for e in others if e.kind == "R" and set(e.nodes) == {minus, o}]
            if len(rin) == 1 and len(rf) == 1 and len(others) == 2:
                found.append((o, -rf[0].value / rin[0].value))
        elif plus == node:
            if minus == o:
                found.append((o, 1.0))
                continue
            rg = [e for e in others if e.kind == "R" and set(e.nodes) == {minus, GROUND}]
            rf = [e for e in others if e.kind == "R" and set(e.nodes) == {minus, o}]
            if len(rg) == 1 and len(rf) == 1 and len(others) == 2:
                found.append((o, 1.0 + rf[0].value / rg[0].value))
    return found[0] if len(found) == 1 else None


def _carried(netlist: Netlist, node: str, output: str, limits: tuple[float, float]) -> tuple[float, float] | None:
    """``limits`` of V(``node``) (an op-amp output) carried to V(``output``) through plain resistive
    stages (:func:`_linear_stage`), or None when the path is anything else."""
    drivers = {op.nodes[2] for op in netlist.of_kind("OPAMP")}
    if node not in drivers:  # a clamped node nothing drives hard: the next stage's load moves it
        return None
    lo, hi = limits
    for _ in range(len(drivers)):
        stage = _linear_stage(netlist, node)
        if stage is None:
            return None
        node, gain = stage
        lo, hi = sorted((gain * lo, gain * hi))  # an inverting stage swaps the ends
        if node == output:
            return lo, hi
    return None


def output_limits(netlist: Netlist, output: str) -> tuple[float, float] | None:
    """The range (low, high) in volts that the card's clamps hold V(``output``) to, or ``None``
    when no clamp bounds it. A clamp at the output counts as :func:`clamped_nodes` says; a clamp
    at an earlier op-amp's output counts when the path from it to the output is plain resistive
    amplifiers (inverting or non-inverting, no reactive part): its limits are carried through their
    gains, an inverting stage swapping the ends. A side no clamp bounds is ±inf. Approximate like
    the thresholds themselves (knees are soft)."""
    out = output.lower()
    nodes = clamped_nodes(netlist)
    lo, hi = nodes.get(out, (-math.inf, math.inf))
    for node, lim in nodes.items():
        if node == out:
            continue
        carried = _carried(netlist, node, out, lim)
        if carried is not None:
            lo, hi = max(lo, carried[0]), min(hi, carried[1])
    if math.isinf(lo) and math.isinf(hi):
        return None
    return lo, hi


def unreached_clamp_note(netlist: Netlist, output: str) -> str | None:
    """A note when a clamp bounds some node but no limits reach the output (see :func:`output_limits`),
    naming the node, so the output limits are given by hand; None otherwise."""
    if output_limits(netlist, output) is not None:
        return None
    nodes = clamped_nodes(netlist)
    if not nodes:
        return None
    where = "; ".join(f"V({n}) {limits_text(v)}" for n, v in nodes.items())
    return (
        f"the card's clamps hold {where}, but the path from there to the output {output.lower()} is not a plain "
        "resistive amplifier, so no output limits follow from them: give the output limits yourself "
        "(--output-limits, or output_limits in a case file)"
    )


def limits_text(limits: tuple[float, float]) -> str:
    """``(low, high)`` volts as text: "−0.65 … 5.35 V", or one side ("at least −0.65 V") when the
    other is unbounded."""
    lo, hi = limits
    if math.isinf(hi):
        return f"at least {lo:.3g} V (no upper clamp)"
    if math.isinf(lo):
        return f"at most {hi:.3g} V (no lower clamp)"
    return f"{lo:.3g} … {hi:.3g} V"
