"""Write a SPICE netlist of a circuit that any SPICE simulator runs as it is.

Conventions (see docs/circuits.md):

* The input is a voltage source ``VIN`` from node ``in`` to ground, ``DC 0 AC 1``; the output is
  node ``out``. Two-input stages get their inputs from ``in`` through voltage-controlled sources:
  ``drive="error"`` (default) sets sp = 0 and meas = −in, so V(out)/V(in) is the error-to-output
  controller; ``drive="setpoint"`` sets sp = in and meas = 0 (the setpoint path).
* By default the netlist realizes +C(s) from ``in`` to ``out``: when the stage's sign differs from
  the target's, a unity inverter (RINV1, RINV2, XUINV) follows it and the stage output is node
  ``stage_out``.
* Op-amps are the self-contained subcircuit ``LSOPAMP`` (pins: non-inverting input, inverting
  input, output): a voltage-controlled source of gain 1e9 by default, or a single-pole model
  (dc gain A0, unity-gain frequency GBW) when a gain-bandwidth is given.
* Values are in exponent form (``4.700000000e+03``), which every simulator reads the same way
  (no ``M``/``meg`` or ``4k7`` ambiguity). Parts left open (not fitted) are omitted.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

from convert.circuit.opamp import HIGH_GAIN, OpAmpModel
from convert.circuit.topologies import GROUND, C, Parallel, R, Series, Topology, is_open
from convert.values import format_spice_number

INVERTER_PARTS = {"RINV1": 10e3, "RINV2": 10e3}


class _Writer:
    def __init__(self, parts: Mapping[str, float]):
        self.parts = parts
        self.lines: list[str] = []
        self.counter = 0

    def node(self, hint: str) -> str:
        self.counter += 1
        return f"{hint}_{self.counter}"

    def emit(self, net, a: str, b: str, hint: str) -> None:
        if is_open(net, self.parts):
            return
        if isinstance(net, (R, C)):
            self.lines.append(f"{net.name} {a} {b} {format_spice_number(self.parts[net.name])}")
        elif isinstance(net, Series):
            items = list(net.items)
            nodes = [a] + [self.node(hint) for _ in items[:-1]] + [b]
            for item, n1, n2 in zip(items, nodes[:-1], nodes[1:]):
                self.emit(item, n1, n2, hint)
        elif isinstance(net, Parallel):
            for item in net.items:
                self.emit(item, a, b, hint)


def opamp_subcircuit(model: OpAmpModel) -> list[str]:
    if model.ideal:
        return [
            ".subckt LSOPAMP inp inn out",
            f"* high-gain amplifier standing for an ideal op-amp (gain {HIGH_GAIN:g})",
            f"E1 out 0 inp inn {format_spice_number(HIGH_GAIN)}",
            ".ends LSOPAMP",
        ]
    cap = 1.0 / (2 * math.pi * model.gbw_hz)
    return [
        ".subckt LSOPAMP inp inn out",
        f"* single-pole op-amp: dc gain {model.a0:g}, gain-bandwidth {model.gbw_hz:g} Hz",
        "G1 0 n1 inp inn 1",
        f"R1 n1 0 {format_spice_number(model.a0)}",
        f"C1 n1 0 {format_spice_number(cap)}",
        "E1 out 0 n1 0 1",
        ".ends LSOPAMP",
    ]


def netlist_text(
    topology: Topology,
    parts: Mapping[str, float],
    *,
    opamp: OpAmpModel | None = None,
    add_inverter: bool | None = None,
    drive: str = "error",
    title: str | None = None,
    band_hz: tuple[float, float] | None = None,
) -> str:
    """The netlist of ``topology`` with ``parts`` (ohms, farads).

    ``add_inverter`` None means "when the stage is inverting" (realize +F(s)); a design passes its
    own ``needs_inverter``. ``band_hz`` adds an ``.ac`` line over that band (50 points/decade).
    """
    opamp = opamp or OpAmpModel()
    checked = {k: float(v) for k, v in topology.check_parts(parts).items()}
    if add_inverter is None:
        add_inverter = topology.inverting
    if drive not in ("error", "setpoint"):
        raise ValueError("drive must be 'error' or 'setpoint'")
    w = _Writer(checked)
    title = title or f"loopshift circuit: {topology.name}"
    head = [
        f"* {title}",
        f"* {topology.description}",
        "* input: VIN from node in to ground (AC 1); output: node out; values in ohms and farads",
    ]
    stage_out = topology.stages[-1].output
    rename = {stage_out: "stage_out"} if add_inverter else {}

    def n(node: str) -> str:
        return rename.get(node, node)

    src = ["VIN in 0 DC 0 AC 1"]
    if topology.two_input:
        if drive == "error":
            src += [
                "* two-input stage driven by the error: setpoint 0, measurement = -V(in)",
                "VSP sp 0 DC 0 AC 0",
                "EMEAS meas 0 in 0 -1",
            ]
        else:
            src += [
                "* two-input stage driven on the setpoint: measurement 0",
                "ESP sp 0 in 0 1",
                "VMEAS meas 0 DC 0 AC 0",
            ]
    body: list[str] = []
    for st in topology.stages:
        inv = f"{st.amp.lower()}_m"
        w.lines = []
        for src_node, net in st.inputs:
            w.emit(net, n(src_node), inv, f"{st.amp.lower()}_n")
        w.emit(st.feedback, n(st.output), inv, f"{st.amp.lower()}_f")
        plus = "0"
        if st.plus is not None:
            plus = f"{st.amp.lower()}_p"
            s_node, top, bottom = st.plus
            w.emit(top, n(s_node), plus, f"{st.amp.lower()}_t")
            w.emit(bottom, plus, "0", f"{st.amp.lower()}_b")
        body.append(f"* {st.amp}: {st.role}")
        body += w.lines
        body.append(f"X{st.amp} {plus} {inv} {n(st.output)} LSOPAMP")
    for jn in topology.junctions:
        w.lines = []
        for other, net in jn.branches:
            w.emit(net, n(jn.name), "0" if other == GROUND else n(other), f"{jn.name}_b")
        body.append(f"* node {jn.name}: {jn.role}")
        body += w.lines
    if add_inverter:
        body += [
            "* UINV: unity inverter giving the target's sign",
            f"RINV1 stage_out uinv_m {format_spice_number(INVERTER_PARTS['RINV1'])}",
            f"RINV2 out uinv_m {format_spice_number(INVERTER_PARTS['RINV2'])}",
            "XUINV 0 uinv_m out LSOPAMP",
        ]
    tail = []
    if band_hz is not None:
        tail.append(f".ac dec 50 {format_spice_number(band_hz[0])} {format_spice_number(band_hz[1])}")
    tail.append(".end")
    return "\n".join(head + opamp_subcircuit(opamp) + src + body + tail) + "\n"


def design_netlist(
    design, *, opamp: OpAmpModel | None = None, add_inverter: bool | None = None, drive: str = "error"
) -> str:
    """Netlist of a :class:`~convert.circuit.design.CircuitDesign` with its rounded parts; by default
    it realizes +C(s) (the inverter is added exactly when ``design.needs_inverter``)."""
    inv = design.needs_inverter if add_inverter is None else add_inverter
    return netlist_text(
        design.topology,
        design.rounded,
        opamp=opamp,
        add_inverter=inv,
        drive=drive,
        title=f"loopshift circuit: {design.topology.name} realizing {design.target.expression(5)}",
        band_hz=design.band_hz,
    )
