"""A whole card: transfer function(s), the two-input structure, clamps and sensitivities.

One input (default ``VIN``): the controller is V(out)/V(in) as the card computes it. An
inverting card has a negative gain; fed with the measurement that minus sign is the feedback
sign (see the note the analysis adds).

Two inputs (``setpoint`` and ``measurement`` sources): with u = H_sp·r + H_pv·y the card is
written as a feedback controller on the error plus what the setpoint sees::

    C(s)  = −H_pv(s)           error → output (the measurement enters with a minus sign)
    F(s)  = H_sp(s) / C(s)     setpoint filter: u = C·(F·r − y)

Where C is a PID, the setpoint path H_sp is matched to ``sign·(kp·b + ki/s + kd·c·s/(tf·s+1))``
(least squares over the corners, then checked to 1e-4, see _WEIGHT_RTOL): the weights ``b`` and ``c`` of
:class:`convert.pid.PidSettings`. Otherwise F is given as a general setpoint filter. Either
way the firmware must reproduce the same structure, not just C.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from convert.circuit.clamps import Clamp, clamp_notes, find_clamps, output_limits
from convert.circuit.mna import RationalResult, transfer_functions
from convert.circuit.netlist import Netlist
from convert.controller import Controller
from convert.errors import InputError

# The weighted-PID reading must match the setpoint path to 1e-4 (0.01 %, far inside any part
# tolerance): a card's op-amps have finite gain (the high-gain amplifier loopshift's own netlists
# use, 1e9, already leaves ~3e-6), so an exact-arithmetic threshold would call a weighted PID a
# general filter. Weights within 1e-6 of 0 or 1 are those values.
_WEIGHT_RTOL = 1e-4
_WEIGHT_SNAP = 1e-6


@dataclass(frozen=True)
class SetpointStructure:
    """The two-input card as feedback controller + setpoint path (see the module docstring)."""

    feedback: Controller  # C = −H_pv
    setpoint_path: Controller  # H_sp
    setpoint_filter: Controller  # F = H_sp / C
    pid: object | None  # PidSettings with b, c when the pair is a weighted PID
    description: str

    @property
    def plain_error(self) -> bool:
        """True when setpoint and measurement meet as a plain error (b = c = 1): u = C·(r − y)."""
        if self.pid is not None:
            return self.pid.b == 1 and self.pid.c == 1
        f = self.setpoint_filter
        return f.order == 0 and len(f.num) == 1 and abs(f.num[0] - 1.0) <= _WEIGHT_RTOL


@dataclass(frozen=True)
class CardAnalysis:
    netlist: Netlist
    inputs: tuple[str, ...]
    output: str
    results: dict[str, RationalResult]
    controller: Controller
    pid: object | None  # PidSettings of ``controller`` (with b, c for two inputs) or None
    not_pid_reason: str | None
    structure: SetpointStructure | None
    clamps: tuple[Clamp, ...]
    notes: tuple[str, ...]
    sensitivities: tuple = field(default=())
    output_limits: tuple[float, float] | None = None  # V(output) range the clamps hold (see clamps.output_limits)


def _ratio(a: Controller, b: Controller, name: str) -> Controller:
    """a / b with common roots cancelled."""
    from convert.circuit.mna import _cancel

    zeros = np.concatenate([a.zeros(), b.poles()])
    poles = np.concatenate([a.poles(), b.zeros()])
    sizes = [abs(x) for x in np.concatenate([zeros, poles]) if abs(x) > 0]
    z2, p2, _ = _cancel(zeros, poles, 1e-6 * min(sizes, default=1.0))
    return Controller.from_zpk(z2, p2, a.gain / b.gain, name=name)


def _weights(pid, sp: Controller, f_hz: np.ndarray):
    """Setpoint weights (b, c) so that pid's weighted setpoint path equals ``sp``, or None."""
    s = 2j * np.pi * f_hz
    y = sp.frequency_response(f_hz, via="zpk") * pid.sign
    if pid.ki > 0:
        y = y - pid.ki / s
    cols, names = [], []
    if pid.kp > 0:
        cols.append(np.full_like(s, pid.kp)); names.append("b")
    if pid.kd > 0:
        cols.append(pid.kd * s / (pid.tf * s + 1.0)); names.append("c")
    weights = {"b": 1.0, "c": 1.0}
    if cols:
        A = np.stack(cols, axis=1)
        A_ri = np.concatenate([A.real, A.imag])
        y_ri = np.concatenate([y.real, y.imag])
        sol, *_ = np.linalg.lstsq(A_ri, y_ri, rcond=None)
        fit = A @ sol
        weights.update({n: float(v) for n, v in zip(names, sol)})
    else:
        fit = np.zeros_like(y)
    ref = np.abs(sp.frequency_response(f_hz, via="zpk"))
    err = np.max(np.abs(fit - y) / ref)
    if not err <= _WEIGHT_RTOL:
        return None
    for k in weights:
        if abs(weights[k]) < _WEIGHT_SNAP:
            weights[k] = 0.0
        if abs(weights[k] - 1.0) < _WEIGHT_SNAP:
            weights[k] = 1.0
    if weights["b"] < 0 or weights["c"] < 0:
        return None
    return weights


def _band(*controllers: Controller, floor_hz: float = 0.0) -> np.ndarray:
    """Two decades around the corners of ``controllers`` (Hz); corners below ``floor_hz`` (the
    pole of an integrator that leaks, far below the rest) are left out."""
    corners = []
    for c in controllers:
        cf = c.corner_frequencies_hz()
        corners += [f for f in cf["zeros"] + cf["poles"] if f >= floor_hz]
    lo, hi = (min(corners), max(corners)) if corners else (1.0, 1.0)
    return np.geomspace(lo / 100, hi * 100, 60)


def _leak_floor_hz(pid) -> float:
    """Frequencies below this are where a leaking integrator (see convert.pid.LEAK_RATIO) departs
    from the PID read from it; the weights are fitted above it."""
    from convert.pid import LEAK_RATIO

    cf = pid.to_controller().corner_frequencies_hz() if pid.kd == 0 or pid.tf > 0 else {"zeros": [], "poles": []}
    corners = cf["zeros"] + cf["poles"]
    if pid.ki > 0 and pid.kp > 0:
        corners.append(pid.ki / pid.kp / (2 * np.pi))
    return 10 * LEAK_RATIO * min(corners) if corners else 0.0


def setpoint_structure(h_sp: Controller, h_pv: Controller) -> SetpointStructure:
    """Express a two-input card (u = H_sp·r + H_pv·y) as C·(F·r − y), in PID terms where it fits."""
    from convert.pid import PidSettings, pid_from_controller

    feedback = h_pv.scaled(-1.0).with_name("feedback controller (error → output)")
    filt = _ratio(h_sp, feedback, "setpoint filter F = H_sp / C")
    pid = pid_from_controller(feedback)
    weighted = None
    if pid is not None:
        w = _weights(pid, h_sp, _band(h_sp, feedback, floor_hz=_leak_floor_hz(pid)))
        if w is not None:
            weighted = PidSettings(pid.kp, pid.ki, pid.kd, pid.tf, w["b"], w["c"], pid.action)
    if weighted is not None:
        if weighted.b == 1 and weighted.c == 1:
            text = ("setpoint and measurement meet as a plain error (setpoint − measurement): "
                    "b = 1, c = 1")
        else:
            d_on = "the measurement only" if weighted.c == 0 else f"the error weighted by c = {weighted.c:.6g}"
            text = (f"a {weighted.kind} with setpoint weight b = {weighted.b:.6g} on the proportional part"
                    + (f"; the derivative acts on {d_on}" if weighted.kd > 0 else ""))
    elif filt.order == 0 and len(filt.num) == 1 and abs(filt.num[0] - 1.0) <= _WEIGHT_RTOL:
        text = "setpoint and measurement meet as a plain error (setpoint − measurement): F(s) = 1"
    else:
        text = ("the setpoint path is not a weighted form of the feedback PID; the setpoint passes through the "
                f"general filter F(s) = {filt.expression()} before the error is formed")
    text += ". The firmware must reproduce this structure (not only the feedback controller)."
    return SetpointStructure(feedback, h_sp.with_name("setpoint path H_sp"), filt, weighted, text)


def analyze_card(netlist: Netlist, *, input: str = "VIN", output: str = "out",  # noqa: A002
                 setpoint: str | None = None, measurement: str | None = None,
                 with_sensitivities: bool = True) -> CardAnalysis:
    """Everything ``loopshift card`` reports about a netlist (names case-insensitive).

    Give either ``input`` (one input) or both ``setpoint`` and ``measurement``.
    """
    from convert.pid import pid_from_controller, why_not_pid

    if (setpoint is None) != (measurement is None):
        raise InputError("give both the setpoint and the measurement source, or neither", where="command line",
                         key="--setpoint/--measurement")
    inputs = (setpoint, measurement) if setpoint is not None else (input,)
    results = transfer_functions(netlist, inputs, output)
    names = [netlist.element(n).name for n in inputs]
    notes: list[str] = list(netlist.notes)
    for r in results.values():
        notes += r.notes
    structure = None
    if setpoint is not None:
        structure = setpoint_structure(results[names[0]].controller, results[names[1]].controller)
        controller = structure.feedback.with_name(netlist.title or netlist.source)
        pid = structure.pid
        if pid is None:
            pid = pid_from_controller(controller)
        reason = None if pid is not None else why_not_pid(controller)
    else:
        controller = results[names[0]].controller
        pid = pid_from_controller(controller)
        reason = None if pid is not None else why_not_pid(controller)
        if controller.gain < 0:
            notes.append("the card inverts (negative gain): fed with the measurement, it acts on the error "
                         "(setpoint − measurement) as −1 × this controller")
    leak_note = _leak_note(controller, pid)
    if leak_note:
        notes.append(leak_note)
    zeroed = [s.name for s in netlist.sources if s.name not in names]
    if zeroed:
        notes.append(f"source(s) {', '.join(zeroed)} set to zero (shorted) in the analysis")
    clamp_lines = clamp_notes(netlist)
    if clamp_lines:  # the per-clamp lines live in ``clamps``; the notes keep the summary and the instruction
        notes += [clamp_lines[0], clamp_lines[-1]]
    analysis = CardAnalysis(netlist, tuple(names), output, results, controller, pid, reason, structure,
                            find_clamps(netlist), tuple(notes), output_limits=output_limits(netlist, output))
    if not with_sensitivities:
        return analysis
    from dataclasses import replace

    return replace(analysis, sensitivities=tuple(card_sensitivities(netlist, inputs, output)))


def _leak_note(controller: Controller, pid) -> str | None:
    """A note when the PID read from the card has an integrator that leaks (finite op-amp gain)."""
    from convert.pid import leaky_integrator_pole

    p = leaky_integrator_pole(controller)
    if pid is None or p is None:
        return None
    return (f"the integrator leaks (pole at s = {p:.3g} rad/s, {abs(p) / (2 * np.pi):.3g} Hz, far below every "
            "other corner; an op-amp's finite gain does this): the PID values treat it as an integrator")


def setpoint_quantities(st: SetpointStructure) -> dict[str, float]:
    """Quantities of the setpoint side: the filter's DC gain and the setpoint path's
    high-frequency gain (positive numbers; absent where they do not exist)."""
    out = {}
    f0 = st.setpoint_filter.dc_gain()
    if f0 is not None and f0 != 0:
        out["setpoint filter DC gain"] = abs(f0)
    hf = st.setpoint_path.high_frequency_gain()
    if hf:
        out["setpoint high-frequency gain"] = abs(hf)
    return out


def card_quantities(netlist: Netlist, inputs, output: str) -> dict[str, float]:
    """The quantities ``loopshift card`` tracks for a card: gains, corners and PID parameters of the
    controller (the feedback controller of a two-input card, plus its setpoint quantities)."""
    from convert.circuit.sensitivity import controller_quantities
    from convert.pid import pid_from_controller

    res = transfer_functions(netlist, inputs, output)
    keys = [netlist.element(n).name for n in inputs]
    if len(keys) == 2:
        st = setpoint_structure(res[keys[0]].controller, res[keys[1]].controller)
        out = controller_quantities(st.feedback, st.pid or pid_from_controller(st.feedback))
        out.update(setpoint_quantities(st))
        return out
    c = res[keys[0]].controller
    return controller_quantities(c, pid_from_controller(c))


def card_sensitivities(netlist: Netlist, inputs, output: str):
    """Sensitivity rows for a card (see :mod:`convert.circuit.sensitivity`); two ``inputs``
    (setpoint, measurement) make it a two-input card."""
    from convert.circuit.sensitivity import sensitivities

    return sensitivities(netlist, lambda nl: card_quantities(nl, inputs, output))
