"""A form's response as a function of the values that may have changed: a card's parts (catalog
topology or netlist elements; a netlist pot — resistors NAMEA and NAMEB sharing the wiper node —
as its wiper position NAME, 0 … 1 of the track from the A end) or a PID's parameters (analog law
or firmware block).

:func:`parametric_model` returns a :class:`ParametricModel` whose ``response(values, f_hz)``
gives the controller's complex response (error -> output; a digital block as it runs, with its
zero-order hold and computation delay) with some values replaced. Values in SI units (ohm,
farad; kp plain, ki 1/s, kd s, tf s).
"""

from __future__ import annotations

from dataclasses import dataclass
from collections.abc import Callable

import numpy as np

from convert.errors import InputError
from convert.circuit.topologies import get_topology
from convert.given import part_kind, pid_block_b_a
from convert.circuit.mna import build_system
from convert.circuit.netlist import read_netlist
from convert.circuit.sensitivity import _pots
from convert.compare.frequency import hold_and_delay_factor
from convert.controller import Controller

PID_PARAMETERS = ("kp", "ki", "kd", "tf")


@dataclass(frozen=True)
class ParametricModel:
    """``names`` the values that may be fitted; ``nominal`` their drawn/configured values;
    ``kinds`` each one's value kind (for printing); ``response(values, f_hz)``."""

    label: str
    names: tuple[str, ...]
    nominal: dict
    kinds: dict
    response: Callable[[dict, np.ndarray], np.ndarray]


def parametric_model(given) -> ParametricModel:
    """The parametric model of a :class:`convert.given.GivenForm`. Forms without values to fit
    (an expression, firmware coefficients) are refused with the reason."""
    d = given.data
    if given.form == "circuit" and "topology" in d:
        return _card(given)
    if given.form == "circuit":
        return _netlist(given)
    if given.form == "pid" or (given.form == "analog" and "pid" in d):
        return _pid(given)
    raise InputError(
        "a fit needs a card (catalog topology or netlist) or PID settings; "
        f"{'an expression' if given.form == 'analog' else 'firmware coefficients'} has no parts or "
        "parameters to estimate",
        where=given.where,
    )


def _card(given) -> ParametricModel:
    topo = get_topology(given.data["topology"])
    parts = dict(topo.check_parts(given.data["parts"]))
    names = tuple(k for k, v in parts.items() if np.isfinite(v) and v > 0)

    def response(values: dict, f_hz) -> np.ndarray:
        merged = {k: np.array([float(values.get(k, v))]) for k, v in parts.items()}
        return topo.response(merged, np.asarray(f_hz, dtype=float))[0]

    return ParametricModel(
        f"card {topo.name}", names, {k: float(parts[k]) for k in names}, {k: part_kind(k) for k in names}, response
    )


def _netlist(given) -> ParametricModel:
    d = given.data
    path = d["netlist"]
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read the netlist: {exc}", where=str(path)) from None
    net = read_netlist(text, source=path.name)

    pots = {base: (a, b, net.element(a).value + net.element(b).value) for base, a, b in _pots(net)}
    members = {m for a, b, _ in pots.values() for m in (a, b)}
    two = d.get("setpoint") is not None
    inputs = (d["measurement"],) if two else (d["input"],)
    sign = -1.0 if two else 1.0  # a two-input card's feedback controller is minus its measurement path
    parts = [e for e in net.of_kind("R", "C", "L") if e.value]
    names = tuple(e.name for e in parts if e.name not in members) + tuple(pots)
    kinds = {e.name: {"R": "ohm", "C": "farad", "L": "henry"}[e.kind] for e in parts}
    kinds.update({base: "position" for base in pots})
    nominal = {e.name: float(e.value) for e in parts}
    nominal.update({base: net.element(a).value / total for base, (a, b, total) in pots.items()})
    source_name = net.element(inputs[0]).name

    def response(values: dict, f_hz) -> np.ndarray:
        values = dict(values)
        for base, (a, b, total) in pots.items():  # a wiper position sets both halves of the track
            if base in values:
                pos = values.pop(base)
                values[a], values[b] = pos * total, (1 - pos) * total
        sys_ = build_system(net.with_values(values) if values else net, inputs, d["output"])
        w = 2 * np.pi * np.asarray(f_hz, dtype=float)
        y = sys_.G[None, :, :] + 1j * w[:, None, None] * sys_.C[None, :, :]
        b = sys_.rhs[source_name]
        x = np.linalg.solve(y, np.broadcast_to(b[:, None], (w.size, b.size, 1)))[:, sys_.output, 0]
        return sign * x

    return ParametricModel(f"netlist {path.name}", names, nominal, kinds, response)


def _pid(given) -> ParametricModel:
    from dataclasses import replace

    d = given.data
    pid = d["pid"]
    names = tuple(k for k in PID_PARAMETERS if getattr(pid, k) > 0)
    kinds = {"kp": "number", "ki": "number", "kd": "second", "tf": "second"}
    block = given.form == "pid"

    if block:
        fs, method, delay = d["fs_hz"], d["method"], given.delay_for()

        def response(values: dict, f_hz) -> np.ndarray:
            p = replace(pid, **{k: float(v) for k, v in values.items()})
            b, a = pid_block_b_a(p, fs, method)
            f = np.asarray(f_hz, dtype=float)
            c = Controller.from_b_a(b, a, 1 / fs).frequency_response(f)
            return c * hold_and_delay_factor(f, 1 / fs, delay)
    else:

        def response(values: dict, f_hz) -> np.ndarray:
            v = {k: float(values.get(k, getattr(pid, k))) for k in PID_PARAMETERS}
            s = 2j * np.pi * np.asarray(f_hz, dtype=float)
            out = v["kp"] + v["ki"] / s + v["kd"] * s / (v["tf"] * s + 1)
            return pid.sign * out

    label = "PID block" if block else "PID law"
    return ParametricModel(
        label, names, {k: float(getattr(pid, k)) for k in names}, {k: kinds[k] for k in names}, response
    )
