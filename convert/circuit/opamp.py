"""Op-amp models and the errors they cause: finite gain-bandwidth and output swing.

Model: single pole, A(s) = A0 / (1 + s·A0 / (2π·GBW)) — the open-loop gain A0 at dc rolling off
at −20 dB/decade through unity at GBW (Hz). ``gbw_hz=None`` is the ideal op-amp (A = ∞) that
the catalog formulas assume. The same model is written into SPICE netlists
(:mod:`convert.circuit.netlist_out`), so the simulator and this module agree by construction.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from convert.errors import InputError
from convert.circuit.topologies import node_responses, output_node
from convert.circuit.topologies.model import circuit_polynomials, polyval_jw

DEFAULT_A0 = 1e5  # open-loop dc gain of the single-pole model (100 dB; common practice)
HIGH_GAIN = 1e9  # gain of the "high-gain amplifier" netlist model (stands for ideal)


@dataclass(frozen=True)
class OpAmpModel:
    """``gbw_hz`` None = ideal; otherwise a single pole with dc gain ``a0``."""

    gbw_hz: float | None = None
    a0: float = DEFAULT_A0

    def __post_init__(self):
        if self.gbw_hz is not None and not (math.isfinite(self.gbw_hz) and self.gbw_hz > 0):
            raise InputError(f"the gain-bandwidth must be a positive frequency, found {self.gbw_hz!r}", key="opamp gbw")
        if not (math.isfinite(self.a0) and self.a0 > 1):
            raise InputError(f"the open-loop gain must be above 1, found {self.a0!r}", key="opamp a0")

    @property
    def ideal(self) -> bool:
        return self.gbw_hz is None

    @property
    def pole_hz(self) -> float | None:
        return None if self.gbw_hz is None else self.gbw_hz / self.a0

    def open_loop_gain(self, f_hz) -> np.ndarray | None:
        """A(j2πf) over ``f_hz`` (None for the ideal model)."""
        if self.gbw_hz is None:
            return None
        f = np.asarray(f_hz, dtype=float)
        return self.a0 / (1 + 1j * f * self.a0 / self.gbw_hz)

    def open_loop_polynomials(self) -> tuple[list, list] | None:
        """A(s) as (num, den) in descending powers of s (None for the ideal model)."""
        if self.gbw_hz is None:
            return None
        return [self.a0], [self.a0 / (2 * math.pi * self.gbw_hz), 1.0]


def gbw_response(topology, parts, f_hz, model: OpAmpModel) -> np.ndarray:
    """F(j2πf) of the circuit with the op-amp model (positive form, stage sign removed).

    The circuit is written out as one rational function of s per draw
    (:func:`convert.circuit.topologies.model.circuit_polynomials`: stages alone by their formula,
    stages in a loop and middle nodes by Cramer's rule) and evaluated by Horner; a block of more
    unknowns than that writes out, or parts open in some draws only, are solved node by node at
    every frequency (:func:`node_responses`). Both are the same stage equations."""
    poly = circuit_polynomials(topology, parts, model.open_loop_polynomials())
    if poly is not None:
        w = 2 * np.pi * np.asarray(f_hz, dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            return topology.sign * (polyval_jw(poly[0], w) / polyval_jw(poly[1], w))
    nodes = node_responses(topology, parts, f_hz, open_loop_gain=model.open_loop_gain(f_hz))
    return topology.sign * nodes[output_node(topology)]


@dataclass(frozen=True)
class SwingCheck:
    """Peak output of each amplifier for a sine of ``amplitude_v`` at the input, against the rails.

    ``peak_v[amp]`` is an array over ``f_hz``; ``exceeded[amp]`` lists (f_low, f_high) ranges in Hz
    where the peak is above ``rail_v``.
    """

    f_hz: np.ndarray
    amplitude_v: float
    rail_v: float
    peak_v: dict
    exceeded: dict

    @property
    def ok(self) -> bool:
        return not any(self.exceeded.values())

    def summary(self) -> dict:
        return {
            "amplitude_v": self.amplitude_v,
            "rail_v": self.rail_v,
            "ok": self.ok,
            "max_peak_v": {k: float(np.max(v)) for k, v in self.peak_v.items()},
            "exceeded_hz": {k: v for k, v in self.exceeded.items() if v},
        }


def swing_check(
    topology, parts, f_hz, amplitude_v: float, rail_v: float, model: OpAmpModel | None = None
) -> SwingCheck:
    """Flag where an amplifier's output (gain × input amplitude) would exceed the rails.

    The input is a sine of peak ``amplitude_v`` on ``in`` (two-input stages: on the measurement,
    the error's worst case); ``rail_v`` is the largest output peak the op-amp delivers.
    """
    if not (amplitude_v > 0 and rail_v > 0):
        raise InputError(
            f"amplitude and rail must be positive volts, found {amplitude_v!r} and {rail_v!r}", key="amplitude/rail"
        )
    f = np.asarray(f_hz, dtype=float)
    drive = {"in": amplitude_v} if not topology.two_input else {"sp": 0.0, "meas": amplitude_v}
    model = model or OpAmpModel()
    nodes = node_responses(topology, parts, f, drive=drive, open_loop_gain=model.open_loop_gain(f))
    peak = {st.amp: np.abs(np.asarray(nodes[st.output])).reshape(-1)[: f.size] for st in topology.stages}
    exceeded = {}
    for amp, v in peak.items():
        mask = v > rail_v
        ranges = []
        i = 0
        while i < mask.size:
            if mask[i]:
                j = i
                while j + 1 < mask.size and mask[j + 1]:
                    j += 1
                ranges.append((float(f[i]), float(f[j])))
                i = j + 1
            else:
                i += 1
        exceeded[amp] = ranges
    return SwingCheck(f, amplitude_v, rail_v, peak, exceeded)


SWING_HINT = "; give an input amplitude and the rail to check each against the swing"
"""The tail of a design note listing peak gains when no amplitude and rail were stated."""


def swing_noted(notes: list[str], amplitude_v: float | None, rail_v: float | None) -> list[str]:
    """``notes`` with :data:`SWING_HINT` replaced by what was checked when both an input amplitude
    and a rail (V) were given (the hint asks only for a value that is really missing)."""
    if amplitude_v is None or rail_v is None:
        return list(notes)
    done = f"; checked against the {rail_v:g} V rail for a {amplitude_v:g} V input (the output-swing check)"
    return [n.replace(SWING_HINT, done) for n in notes]
