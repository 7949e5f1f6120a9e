"""Which part moves what: sensitivities of a card's controller to each part and pot.

For each part value p and each controller quantity q (the low-frequency gain, the high-frequency
gain, every corner frequency, and the PID parameters where the controller is a PID) the table
gives the elasticity ``d ln q / d ln p``: the percent change of q for a +1 % change of p
(central finite differences in log space, step ±0.1 %; the truncation error is about 1e-6).
The changed circuits are not factored afresh: see :func:`sensitivities` (``method``).

A pot is recognised from two resistors named ``<base>A`` and ``<base>B`` (e.g. ``RP1A``,
``RP1B``) that share one node (the wiper); its row moves the wiper by +1 % of the travel
(one half grows by 1 % of the total, the other shrinks by as much) and reports the percent
change of each quantity.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from collections.abc import Callable

import numpy as np

from convert.circuit.netlist import Netlist
from convert.controller import Controller
from convert.pid import without_leak
from convert.circuit.mna import reusing_nominal

_STEP = 1e-3


@dataclass(frozen=True)
class PartSensitivity:
    """One row: ``part`` (element name, ``RP1`` for a pot, ``X1.gbw`` for an op-amp GBW),
    ``kind`` ("R", "C", "L", "E", "G", "pot", "gbw"), nominal ``value`` (SI units; for a pot its
    total resistance) and ``effects``: quantity -> % change per +1 % of the part (or of the travel)."""

    part: str
    kind: str
    value: float
    effects: dict[str, float]


def controller_quantities(controller: Controller, pid=None) -> dict[str, float]:
    """The quantities a sensitivity table tracks, as positive numbers (units in the keys)."""
    out: dict[str, float] = {}
    if pid is not None:  # the PID read through a leaking integrator: track the integrator, not the leak
        controller = without_leak(controller)
    num = np.asarray(controller.num)
    den = np.asarray(controller.den)
    m = controller.integrator_count()
    # Lowest-order behaviour: C(s) ≈ K / s^m at low frequency.
    low_den = den[len(den) - 1 - m] if m < len(den) else den[0]
    nz = np.flatnonzero(num[::-1])
    low_num = num[::-1][nz[0]] if nz.size else 0.0
    zeros_at_origin = int(nz[0]) if nz.size else 0
    label = (
        "DC gain"
        if m == 0 and zeros_at_origin == 0
        else (f"gain ×s^{m} (low frequency)" if m else f"gain ÷s^{zeros_at_origin} (low frequency)")
    )
    if low_num and low_den:
        out[label] = abs(low_num / low_den)
    if controller.is_proper and controller.relative_degree == 0 and abs(num[0]) > 0:
        out["high-frequency gain"] = abs(num[0])
    corners = controller.corner_frequencies_hz()
    for kind in ("zeros", "poles"):
        for i, f in enumerate(corners[kind], start=1):
            out[f"{kind[:-1]} {i} (Hz)"] = f
    if pid is not None:
        for key, label in (("kp", "kp"), ("ki", "ki (1/s)"), ("kd", "kd (s)"), ("tf", "tf (s)")):
            v = getattr(pid, key)
            if v > 0:
                out[label] = v
        if pid.kp > 0 and pid.ki > 0:
            out["ti (s)"] = pid.kp / pid.ki
        if pid.kp > 0 and pid.kd > 0:
            out["td (s)"] = pid.kd / pid.kp
        for key in ("b", "c"):
            v = getattr(pid, key)
            if v > 0 and v != 1.0:
                out[key] = v
    return out


def _pots(netlist: Netlist) -> list[tuple[str, str, str]]:
    """(pot name, element A, element B) for resistor pairs <base>A / <base>B sharing a node."""
    rs = {e.name: e for e in netlist.of_kind("R")}
    pots = []
    for name, e in rs.items():
        if name.endswith("A") and name[:-1] + "B" in rs:
            other = rs[name[:-1] + "B"]
            if set(e.nodes) & set(other.nodes):
                pots.append((name[:-1], name, other.name))
    return pots


METHODS = ("update", "resolve")


def sensitivities(
    netlist: Netlist, evaluate: Callable[[Netlist], dict[str, float]], *, method: str = "update"
) -> list[PartSensitivity]:
    """Elasticities of the quantities ``evaluate(netlist)`` returns, to each part and pot.

    ``evaluate`` maps a netlist to named positive quantities (see :func:`controller_quantities`);
    quantities that vanish or change their count under a perturbation are left out of that row.

    ``method``: "update" (default) runs the loop inside :func:`convert.circuit.mna.reusing_nominal`,
    so transfer functions of the changed netlists are low-rank updates of the nominal factorization
    (each still checked against a direct solve); "resolve" solves every changed netlist afresh
    (the reference). Both give the same finite differences.
    """
    if method not in METHODS:
        raise ValueError(f"method must be one of {METHODS}, not {method!r}")
    if method == "update":
        with reusing_nominal(netlist):
            return _sensitivities(netlist, evaluate)
    return _sensitivities(netlist, evaluate)


def _sensitivities(netlist: Netlist, evaluate: Callable[[Netlist], dict[str, float]]) -> list[PartSensitivity]:
    nominal = evaluate(netlist)
    rows: list[PartSensitivity] = []
    pot_members = set()
    pots = _pots(netlist)
    for _, a, b in pots:
        pot_members.update((a, b))

    def row(name: str, kind: str, value: float, up: dict, down: dict, per: float) -> None:
        q_up = evaluate(netlist.with_values(up))
        q_dn = evaluate(netlist.with_values(down))
        effects = {}
        for key, q0 in nominal.items():
            if key in q_up and key in q_dn and q_up[key] > 0 and q_dn[key] > 0 and q0 > 0:
                e = (math.log(q_up[key]) - math.log(q_dn[key])) / per
                effects[key] = 0.0 if abs(e) < 1e-7 else e
        rows.append(PartSensitivity(name, kind, value, effects))

    for e in netlist.parts:
        if e.value is None or e.value == 0:
            continue
        v = e.value
        # d ln q / d ln p, so per = 2·step in ln p; effects are then "% per %".
        row(e.name, e.kind, v, {e.name: v * math.exp(_STEP)}, {e.name: v * math.exp(-_STEP)}, 2 * _STEP)
    for e in netlist.of_kind("OPAMP"):
        gbw = e.param("gbw")
        if gbw is not None:
            key = f"{e.name}.gbw"
            row(key, "gbw", gbw, {key: gbw * math.exp(_STEP)}, {key: gbw * math.exp(-_STEP)}, 2 * _STEP)
    for pot, a, b in pots:
        ra, rb = netlist.element(a).value, netlist.element(b).value
        total = ra + rb
        d = _STEP * total
        if ra - d <= 0 or rb - d <= 0:
            continue
        # per travel percent: Δtravel = ±0.1 % → divide by 2·0.1 % and report % per 1 % of travel.
        row(pot, "pot", total, {a: ra + d, b: rb - d}, {a: ra - d, b: rb + d}, 2 * _STEP)
    return rows


def ranked_parts(rows: list[PartSensitivity]) -> list[PartSensitivity]:
    """Rows sorted by their largest effect, biggest first. Effects are compared to 1e-6 (the finite
    differences' accuracy), so equal effects (symmetric stages) keep the netlist order instead of
    an order set by rounding noise."""
    return sorted(rows, key=lambda r: -round(max((abs(v) for v in r.effects.values()), default=0.0), 6))


def value_sensitivities(
    values: dict[str, float],
    evaluate: Callable[[dict[str, float]], dict[str, float]],
    kinds: dict[str, str] | None = None,
) -> list[PartSensitivity]:
    """Elasticities for a plain part mapping (name -> SI value), e.g. a catalog topology's parts.

    ``evaluate`` maps a part mapping to named positive quantities.
    """
    nominal = evaluate(values)
    rows = []
    for name, v in values.items():
        if not (v > 0 and math.isfinite(v)):
            continue
        q_up = evaluate({**values, name: v * math.exp(_STEP)})
        q_dn = evaluate({**values, name: v * math.exp(-_STEP)})
        effects = {}
        for key, q0 in nominal.items():
            if key in q_up and key in q_dn and q_up[key] > 0 and q_dn[key] > 0 and q0 > 0:
                e = (math.log(q_up[key]) - math.log(q_dn[key])) / (2 * _STEP)
                effects[key] = 0.0 if abs(e) < 1e-7 else e
        rows.append(PartSensitivity(name, (kinds or {}).get(name, name[:1].upper()), v, effects))
    return rows
