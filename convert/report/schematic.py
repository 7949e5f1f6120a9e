"""Schematic drawing of a circuit with schemdraw (PNG or SVG): the report layer draws the
:class:`convert.circuit.schematic.Schematic` the computation describes.

Each op-amp stage is drawn on its own row; nets between stages are shown by their node names
(``in``, ``np``, ``out`` …), as the netlist names them. schemdraw and matplotlib are imported
here only, lazily, with matplotlib's Agg backend (no display needed).
"""

from __future__ import annotations

from collections.abc import Mapping

from convert.circuit.schematic import Schematic, schematic_of
from convert.circuit.topologies import GROUND, C, R, Series, is_open
from convert.values import format_value

UNIT = 2.0  # width of one element
ROW = 1.6  # vertical pitch between parallel branches


def _width(net) -> float:
    if isinstance(net, (R, C)):
        return UNIT
    if isinstance(net, Series):
        return sum(_width(i) for i in net.items)
    return max(_width(i) for i in net.items) + 1.0


def _height(net) -> float:
    if isinstance(net, (R, C)):
        return ROW
    if isinstance(net, Series):
        return max(_height(i) for i in net.items)
    return sum(_height(i) for i in net.items)


def _draw_net(d, elm, net, start, parts, width=None):
    """Draw ``net`` rightwards from ``start``; return the end point (same y)."""
    x, y = start
    total = width if width is not None else _width(net)
    if isinstance(net, (R, C)):
        kind = "ohm" if isinstance(net, R) else "farad"
        e = (elm.Resistor if isinstance(net, R) else elm.Capacitor)().right().at((x, y)).to((x + UNIT, y))
        d.add(e.label(f"{net.name}\n{format_value(parts[net.name], kind, 3)}", fontsize=8))
        if total > UNIT:
            d.add(elm.Line().at((x + UNIT, y)).to((x + total, y)))
        return (x + total, y)
    if isinstance(net, Series):
        pos = (x, y)
        used = 0.0
        for item in net.items:
            pos = _draw_net(d, elm, item, pos, parts)
            used += _width(item)
        if total > used:
            d.add(elm.Line().at(pos).to((x + total, y)))
        return (x + total, y)
    branches = [i for i in net.items if not is_open(i, parts)]
    offset = 0.0
    for i, item in enumerate(branches):
        yy = y - offset
        if i:
            d.add(elm.Line().at((x, y - offset + _height(branches[i - 1]) * 0)).to((x, yy)))
            d.add(elm.Line().at((x + total, yy)).to((x + total, y - offset + 0)))
        d.add(elm.Line().at((x, yy)).to((x + 0.5, yy)))
        end = _draw_net(d, elm, item, (x + 0.5, yy), parts, width=total - 1.0)
        d.add(elm.Line().at(end).to((x + total, yy)))
        offset += _height(item)
    if len(branches) > 1:
        d.add(elm.Line().at((x, y)).to((x, y - offset + _height(branches[-1]))))
        d.add(elm.Line().at((x + total, y)).to((x + total, y - offset + _height(branches[-1]))))
    return (x + total, y)


def _draw_junction(d, elm, jn, parts, y0: float, shown: Mapping[str, str]) -> float:
    """A passive node (e.g. a multiple-feedback section's middle node) on its own row: each branch
    from its other node's label (or ground) rightwards into the node's label. Returns the next row."""
    branches = [(other, net) for other, net in jn.branches if not is_open(net, parts)]
    width = max([_width(net) for _, net in branches] + [UNIT]) + 1.0
    x_node = 1.0 + width + 0.5
    yy = y0
    for other, net in branches:
        if other == GROUND:
            d.add(elm.Ground().at((1.0, yy)))
        else:
            d.add(elm.Dot(open=True).at((0.5, yy)).label(shown.get(other, other), loc="left"))
            d.add(elm.Line().at((0.5, yy)).to((1.0, yy)))
        end = _draw_net(d, elm, net, (1.0, yy), parts, width=width)
        d.add(elm.Line().at(end).to((x_node, yy)))
        if yy != y0:
            d.add(elm.Line().at((x_node, yy)).to((x_node, yy + _height(net) + 0.4)))
        yy -= _height(net) + 0.4
    d.add(elm.Dot(open=True).at((x_node + 0.5, y0)).label(jn.name, loc="right"))
    d.add(elm.Line().at((x_node, y0)).to((x_node + 0.5, y0)))
    return min(yy, y0 - 3.0) - 1.5


def _drawing(schematic: Schematic):
    """The schemdraw ``Drawing`` of ``schematic`` (not yet saved)."""
    import matplotlib

    matplotlib.use("Agg")
    import schemdraw
    import schemdraw.elements as elm

    schemdraw.use("matplotlib")
    topology, checked = schematic.topology, schematic.parts
    add_inverter, title = schematic.add_inverter, schematic.title
    stages = list(topology.stages)
    y0 = 0.0
    with schemdraw.Drawing(show=False) as d:
        d.config(fontsize=9)
        if title:
            d.add(elm.Label().at((0, 3.5)).label(title, loc="right", fontsize=10))
        for st in stages:
            inputs = [(src, net) for src, net in st.inputs if not is_open(net, checked)]
            in_w = max([_width(net) for _, net in inputs] + [UNIT]) + 1.5
            x_in = 1.5 + in_w
            op = d.add(elm.Opamp(leads=True).anchor("in1").at((x_in + 1.0, y0)).label(st.amp, loc="center", fontsize=8))
            junction = (x_in, y0)
            d.add(elm.Line().at(junction).to(op.in1))
            yy = y0
            for src, net in inputs:
                d.add(elm.Dot(open=True).at((0.5, yy)).label(src, loc="left"))
                end = _draw_net(d, elm, net, (1.0, yy), checked, width=in_w - 0.5)
                if end != junction:
                    if yy != y0:
                        d.add(elm.Line().at(end).to((junction[0], end[1])))
                        d.add(elm.Line().at((junction[0], end[1])).to(junction))
                    else:
                        d.add(elm.Line().at(end).to(junction))
                yy -= _height(net) + 0.4
            fb_y = y0 + 1.6
            fb_w = _width(st.feedback)
            out_x = op.out[0]
            span = max(out_x - x_in, fb_w)
            d.add(elm.Line().at(junction).to((x_in, fb_y)))
            end = _draw_net(d, elm, st.feedback, (x_in, fb_y), checked, width=span)
            d.add(elm.Line().at(end).to((x_in + span, op.out[1])))
            d.add(
                elm.Line().at((x_in + span, op.out[1])).to(op.out) if x_in + span != op.out[0] else elm.Dot().at(op.out)
            )
            out_name = st.output if not (add_inverter and st is stages[-1]) else "stage_out"
            d.add(elm.Line().at((x_in + span, op.out[1])).to((x_in + span + 1.0, op.out[1])))
            d.add(elm.Dot(open=True).at((x_in + span + 1.0, op.out[1])).label(out_name, loc="right"))
            if st.plus is None:
                d.add(elm.Ground().at(op.in2))
            else:
                src, top, bottom = st.plus
                px, py = op.in2
                d.add(elm.Dot(open=True).at((0.5, py - 0.8)).label(src, loc="left"))
                end = _draw_net(d, elm, top, (1.0, py - 0.8), checked, width=px - 1.0 - 0.5)
                d.add(elm.Line().at(end).to(op.in2))
                d.add(
                    elm.Resistor()
                    .down()
                    .at(end)
                    .label(f"{bottom.name}\n{format_value(checked[bottom.name], 'ohm', 3)}", fontsize=8)
                )
                d.add(elm.Ground())
            y0 = min(yy, y0 - 3.0) - 3.0
        shown = {stages[-1].output: "stage_out"} if add_inverter else {}
        for jn in topology.junctions:
            y0 = _draw_junction(d, elm, jn, checked, y0, shown)
        if add_inverter:
            op = d.add(elm.Opamp(leads=True).anchor("in1").at((6.0, y0)).label("UINV", loc="center", fontsize=8))
            d.add(elm.Dot(open=True).at((0.5, y0)).label("stage_out", loc="left"))
            d.add(elm.Resistor().at((1.0, y0)).to((4.0, y0)).label("RINV1\n10 kΩ", fontsize=8))
            d.add(elm.Line().at((4.0, y0)).to(op.in1))
            d.add(elm.Line().at((4.0, y0)).to((4.0, y0 + 1.6)))
            d.add(elm.Resistor().at((4.0, y0 + 1.6)).to((op.out[0], y0 + 1.6)).label("RINV2\n10 kΩ", fontsize=8))
            d.add(elm.Line().at((op.out[0], y0 + 1.6)).to(op.out))
            d.add(elm.Ground().at(op.in2))
            d.add(elm.Dot(open=True).at(op.out).label("out", loc="right"))
    return d


def draw_schematic(schematic: Schematic, path: str) -> str:
    """Draw ``schematic`` to the file ``path`` (.png or .svg, chosen by the extension). Returns the path."""
    _drawing(schematic).save(path)
    return path


def schematic_png(schematic: Schematic) -> bytes:
    """``schematic`` drawn as PNG bytes (each drawing costs about a second)."""
    return _drawing(schematic).get_imagedata("png")


def design_schematic(design, path: str) -> str:
    """Draw the designed circuit (rounded parts) to ``path`` (.png or .svg)."""
    return draw_schematic(schematic_of(design), path)
