"""Trimmer potentiometers: a fixed resistor plus a pot (wired as a rheostat) so that a named
design quantity (e.g. ``kp`` or ``ti``) covers a requested tuning range.

Each topology lists in ``tunable`` the quantities set by a single resistor without disturbing
the others, with the exponent of the dependence (quantity ∝ R^exponent). The fixed part is the
series value at or below the low end of the resistor range; the pot is the smallest value of the
1-2-5 sequence (common practice for trimmers) that reaches the high end.
"""

from __future__ import annotations

from dataclasses import dataclass

from convert.errors import InputError, UnrealizableError
from convert.circuit import series as es

POT_VALUES = tuple(m * 10.0**e for e in range(1, 7) for m in (1.0, 2.0, 5.0)) + (10e6,)


@dataclass(frozen=True)
class Trim:
    parameter: str
    part: str
    fixed_ohm: float
    pot_ohm: float
    requested: tuple[float, float]
    covered: tuple[float, float]

    def summary(self) -> dict:
        return {
            "parameter": self.parameter,
            "part": self.part,
            "fixed_ohm": self.fixed_ohm,
            "pot_ohm": self.pot_ohm,
            "requested": list(self.requested),
            "covered": list(self.covered),
        }


def size_trim(design, parameter: str, low: float, high: float) -> Trim:
    """Size the fixed resistor and pot replacing the part that sets ``parameter``."""
    topo = design.topology
    key = parameter.lower()
    if key not in topo.tunable:
        options = ", ".join(topo.tunable) or "none"
        raise UnrealizableError(
            f"{topo.name} has no single resistor that sets {parameter!r} alone (tunable here: {options})", key="trim"
        )
    if not (0 < low < high):
        raise InputError(f"a trim range needs 0 < low < high, found {low!r} .. {high!r}", key="trim")
    part, exponent = topo.tunable[key]
    params = design.realized_parameters()
    pname = (
        key
        if key in params
        else ("kp" if key == "kc" and "kp" in params else "k" if "k" in params and key in ("kp", "kc") else None)
    )
    if pname is None:
        raise UnrealizableError(f"{topo.name} does not report {parameter!r}", key="trim")
    nominal_param = params[pname]
    r = design.rounded[part]
    lo_r = r * (low / nominal_param) ** (1 / exponent)
    hi_r = r * (high / nominal_param) ** (1 / exponent)
    lo_r, hi_r = min(lo_r, hi_r), max(lo_r, hi_r)
    fixed = float(es.round_to_series(lo_r, design.options.resistors, "down"))
    need = hi_r - fixed
    pot = next((p for p in POT_VALUES if p >= need), None)
    if pot is None:
        raise UnrealizableError(f"the range of {parameter} needs more than a 10 MΩ pot on {part}", key="trim")
    ends = [nominal_param * (v / r) ** exponent for v in (fixed, fixed + pot)]
    return Trim(parameter, part, fixed, pot, (low, high), (min(ends), max(ends)))
