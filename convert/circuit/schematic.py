"""What a circuit's schematic shows, as plain data: the topology (its op-amp stages), the part
values drawn beside each symbol, whether a unity inverter follows, and a title.

The computation hands this description on; the report layer draws it
(:mod:`convert.report.schematic`, schemdraw), so nothing here imports a drawing library.
"""

from __future__ import annotations

import textwrap
from collections.abc import Mapping
from dataclasses import dataclass

from convert.circuit.topologies import Topology


@dataclass(frozen=True)
class Schematic:
    """A circuit to draw: ``topology`` (its stages), ``parts`` (name -> value in Ω or F, checked
    against the topology), ``add_inverter`` (a unity inverter after the last stage) and ``title``
    (already wrapped to lines of at most 70 characters)."""

    topology: Topology
    parts: Mapping[str, float]
    add_inverter: bool = False
    title: str | None = None


def schematic_of(design) -> Schematic:
    """The schematic of a :class:`convert.circuit.design.CircuitDesign` with its rounded parts."""
    # wrapped so a long description stays inside the drawing
    title = "\n".join(textwrap.wrap(f"{design.topology.name}: {design.topology.description}", 70))
    parts = {k: float(v) for k, v in design.topology.check_parts(design.rounded).items()}
    return Schematic(design.topology, parts, add_inverter=design.needs_inverter, title=title)
