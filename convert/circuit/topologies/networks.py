"""The pieces a topology's circuit is drawn from: resistors, capacitors, series and parallel
networks, op-amp stages and named parts. Resistances in ohms, capacitances in farads; complex
frequency ``s`` in rad/s."""

from __future__ import annotations

import math
from dataclasses import dataclass
from collections.abc import Mapping

import numpy as np


@dataclass(frozen=True)
class R:
    """A resistor (part name)."""

    name: str


@dataclass(frozen=True)
class C:
    """A capacitor (part name)."""

    name: str


@dataclass(frozen=True)
class Series:
    items: tuple

    def __init__(self, *items):
        object.__setattr__(self, "items", tuple(items))


@dataclass(frozen=True)
class Parallel:
    items: tuple

    def __init__(self, *items):
        object.__setattr__(self, "items", tuple(items))


def network_parts(net) -> list[str]:
    """Part names in a network, in drawing order."""
    if isinstance(net, (R, C)):
        return [net.name]
    out: list[str] = []
    for item in net.items:
        out.extend(network_parts(item))
    return out


def is_open(net, parts: Mapping[str, float]) -> bool:
    """True when ``net`` conducts nothing with these part values: a resistor of ``inf`` ohms or a
    capacitor of 0 F (a part left off the board), through series and parallel combinations."""
    if isinstance(net, R):
        return math.isinf(parts[net.name])
    if isinstance(net, C):
        return parts[net.name] == 0
    if isinstance(net, Series):
        return any(is_open(i, parts) for i in net.items)
    return all(is_open(i, parts) for i in net.items)


def impedance(net, parts: Mapping[str, np.ndarray], s: np.ndarray) -> np.ndarray:
    """Impedance of ``net`` at complex frequencies ``s`` (rad/s); parts broadcast against s.

    An open resistor is ``inf`` ohms and an open (not fitted) capacitor is 0 F.
    """
    if isinstance(net, R):
        return parts[net.name] + 0 * s
    if isinstance(net, C):
        c = np.asarray(parts[net.name])
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(c == 0, np.inf + 0j, 1.0 / (s * np.where(c == 0, 1.0, c)))
    if isinstance(net, Series):
        total = 0
        for item in net.items:
            total = total + impedance(item, parts, s)
        return total
    admittance = 0
    for item in net.items:
        with np.errstate(divide="ignore"):
            admittance = admittance + 1.0 / impedance(item, parts, s)
    with np.errstate(divide="ignore"):
        return 1.0 / admittance


@dataclass(frozen=True)
class Stage:
    """One op-amp stage.

    ``inputs``: (source node, network into the inverting node) pairs. ``feedback``: the network
    from the output to the inverting node. ``plus``: ``None`` (non-inverting input grounded) or
    (source node, top network, bottom network to ground) forming a divider at the + input.
    """

    amp: str
    output: str
    feedback: object
    inputs: tuple
    plus: tuple | None = None
    role: str = ""


@dataclass(frozen=True)
class Junction:
    """A node inside a stage that only passive networks meet at (no op-amp output drives it), such
    as the middle node of a multiple-feedback section.

    ``branches``: (other node, network) pairs; the other node is a circuit node (``in``, a stage
    output, another junction) or ``"0"`` for ground. Stages read a junction as any other node (an
    entry of their ``inputs``); the current those inputs draw is part of the junction's balance.
    """

    name: str
    branches: tuple
    role: str = ""


GROUND = "0"
"""The ground node of a :class:`Junction` branch."""


@dataclass(frozen=True)
class Part:
    name: str
    kind: str  # "R" or "C"
    role: str
    optional: bool = False  # may be left unfitted (open) in some designs

    @property
    def unit_kind(self) -> str:
        return "ohm" if self.kind == "R" else "farad"


def open_value(part: Part) -> float:
    return math.inf if part.kind == "R" else 0.0
