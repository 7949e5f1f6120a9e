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

import math
from dataclasses import dataclass, field, replace

import numpy as np

from convert.circuit.clamps import Clamp, clamp_notes, find_clamps, output_limits, unreached_clamp_note
from convert.circuit.mna import RationalResult, transfer_functions, _cancel
from convert.circuit.netlist import Netlist, GROUND
from convert.controller import Controller
from convert.errors import InputError
from convert.compare.frequency import compare_controllers, log_grid
from convert.pid import LEAK_RATIO, PidSettings, pid_from_controller, why_not_pid, leaky_integrator_pole
from convert.circuit.sensitivity import controller_quantities, sensitivities

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
    reduction: CardReduction | None = None  # the feedback controller's, where the op-amps are not ideal
    full_controller: Controller | None = None  # the controller before the reduction (None: no reduction)


# ----------------------------------------------------------------------------- reduction
#: A root more than this factor above the band's top (or below its bottom, for a leak) is far
#: outside the band: one decade, so that leaving out a single real pole there costs at most
#: 20·log10(√1.01) ≈ 0.043 dB and atan(0.1) ≈ 5.7° at the band's edge (common practice: a decade).
DECADE = 10.0
#: |gain| from which an E element is an op-amp's gain stage (idealized for the default band).
_E_OPAMP_GAIN = 1e3


@dataclass(frozen=True)
class CardReduction:
    """A card's controller separated from its op-amps' parasitics (issue 10 item 4).

    Rule: with the band of interest (low, high) in Hz and, where a digital target exists, its
    sample rate fs, the cut is ``min(DECADE · high, fs / 2)``. Every pole and zero above the cut
    is the op-amps' (or another parasitic's) and is left out, the gain kept at low frequency
    (each dropped factor (1 − s/r) counts as 1). Where the card has no integrator, a real pole
    below ``low / DECADE`` is a leaking integrator: it is read as an integrator (moved to s = 0,
    gain kept in the band) and the leak is stated. ``full`` is the card as computed;
    ``reduced`` is the controller handed to firmware or a new circuit.
    """

    full: Controller
    reduced: Controller
    band_hz: tuple[float, float]
    band_origin: str
    fs_hz: float | None
    cut_hz: float
    floor_hz: float
    dropped_poles: tuple[complex, ...]
    dropped_zeros: tuple[complex, ...]
    leaks: tuple[float, ...]  # poles (s, rad/s) read as integrators

    @property
    def changed(self) -> bool:
        return bool(self.dropped_poles or self.dropped_zeros or self.leaks)

    @property
    def rule(self) -> str:
        top = f"{DECADE:g} × the band's top ({self.band_hz[1]:.4g} Hz, {self.band_origin})"
        cut = f"above {self.cut_hz:.4g} Hz ({top}"
        cut += f", or fs/2 = {self.fs_hz / 2:.4g} Hz, whichever is lower)" if self.fs_hz else ")"
        return (
            f"poles and zeros {cut} are the op-amps' or parasitic and are left out; a real pole below "
            f"{self.floor_hz:.4g} Hz (the band's bottom / {DECADE:g}) on a card without an integrator is a "
            "leaking integrator, read as the integrator"
        )

    def error(self, f_hz) -> tuple[float, float]:
        """(max |gain error| dB, max |phase error| deg) of the reduced controller against the full
        card over ``f_hz`` (Hz): the cost of leaving the parasitics out."""
        e = compare_controllers(self.full, self.reduced, f_hz)
        return e.max_gain_error_db, e.max_phase_error_deg

    def as_dict(self) -> dict:
        """Plain data (JSON-ready): the rule and its numbers, the full card and the reduced
        controller (num/den descending s), the roots left out ({re, im}), the leaks (rad/s) and
        the error of leaving them out over the band (a log grid of 100 points per decade)."""
        gain_db, phase_deg = self.error(log_grid(*self.band_hz))

        def tf(c):
            return {"expression": c.expression(12), "num": list(c.num), "den": list(c.den)}

        return {
            "rule": self.rule,
            "band_hz": list(self.band_hz),
            "band_origin": self.band_origin,
            "cut_hz": self.cut_hz,
            "leak_floor_hz": self.floor_hz,
            "fs_hz": self.fs_hz,
            "changed": self.changed,
            "full_card": tf(self.full),
            "reduced": tf(self.reduced),
            "dropped_poles": [{"re": p.real, "im": p.imag} for p in self.dropped_poles],
            "dropped_zeros": [{"re": z.real, "im": z.imag} for z in self.dropped_zeros],
            "leaks_rad_s": list(self.leaks),
            "error_over_band": {"max_gain_error_db": gain_db, "max_phase_error_deg": phase_deg},
        }

    def notes(self) -> list[str]:
        if not self.changed:
            return [f"op-amp parasitics: nothing to leave out ({self.rule})"]
        out = [f"the controller handed on is the card without its op-amp parasitics: {self.rule}"]
        if self.dropped_poles or self.dropped_zeros:
            roots = [f"pole at {_hz_of(p)}" for p in _one_of_pair(self.dropped_poles)]
            roots += [f"zero at {_hz_of(z)}" for z in _one_of_pair(self.dropped_zeros)]
            out.append("left out as the op-amps' (far above the band): " + ", ".join(roots))
        for p in self.leaks:
            out.append(
                f"the integrator leaks: pole at s = {p:.3g} rad/s ({abs(p) / (2 * np.pi):.3g} Hz; finite op-amp "
                f"gain); read as an integrator, so the DC gain {abs(self.full.dc_gain() or 0):.4g} becomes "
                "unbounded in the reduced controller"
            )
        return out


def _hz_of(r: complex) -> str:
    f = abs(r) / (2 * np.pi)
    kind = "" if abs(r.imag) == 0 else f" (pair, ζ = {-r.real / abs(r):.2g})"
    return f"{f:.4g} Hz{kind}"


def _one_of_pair(roots) -> list[complex]:
    return [r for r in roots if r.imag >= 0]


def reduce_controller(
    full: Controller, band_hz: tuple[float, float], *, fs_hz: float | None = None, band_origin: str = "given"
) -> CardReduction:
    """Separate ``full`` (an analog card controller) from its parasitics by the rule of
    :class:`CardReduction` (band in Hz; ``fs_hz`` the target's sample rate, if any)."""
    lo, hi = float(band_hz[0]), float(band_hz[1])
    cut = DECADE * hi if fs_hz is None else min(DECADE * hi, fs_hz / 2)
    floor = lo / DECADE
    zeros, poles = full.zeros(), full.poles()
    w_cut, w_floor = 2 * np.pi * cut, 2 * np.pi * floor
    # a right-half-plane pole is never an op-amp's parasitic nor a leak: it stays (and shows)
    drop_z, drop_p = np.abs(zeros) > w_cut, (np.abs(poles) > w_cut) & (poles.real <= 0)
    k = full.gain * np.prod(-zeros[drop_z]).real / np.prod(-poles[drop_p]).real
    kz, kp = zeros[~drop_z], poles[~drop_p]
    leaks: list[float] = []
    if full.integrator_count() == 0 and not np.any(np.abs(kz) < w_floor):
        slow = (np.abs(kp) < w_floor) & (kp.imag == 0) & (kp.real < 0)
        leaks = sorted(float(p.real) for p in kp[slow])
        kp = np.where(slow, 0.0, kp)
    if not (drop_z.any() or drop_p.any() or leaks):
        reduced = full
    else:
        reduced = Controller.from_zpk(kz, kp, float(k), name=full.name)
    return CardReduction(
        full,
        reduced,
        (lo, hi),
        band_origin,
        fs_hz,
        cut,
        floor,
        tuple(complex(p) for p in poles[drop_p]),
        tuple(complex(z) for z in zeros[drop_z]),
        tuple(leaks),
    )


def ideal_opamp_netlist(netlist: Netlist) -> Netlist | None:
    """A copy of ``netlist`` with every op-amp ideal (a nullor), or ``None`` when the card has no
    op-amp of finite gain. Recognized as an op-amp's gain stage (as in subcircuit models): a
    single-pole built-in; an E element of |gain| ≥ 1000 with its output referred to ground; a G
    element from ground into a node with a resistor R to ground and |gm|·R ≥ 1000 (the
    transconductance single-pole model ``loopshift circuit --opamp-gbw`` writes)."""
    to_ground: dict[str, list[float]] = {}
    for e in netlist.of_kind("R"):
        if GROUND in e.nodes and e.nodes[0] != e.nodes[1]:
            to_ground.setdefault(e.nodes[1] if e.nodes[0] == GROUND else e.nodes[0], []).append(e.value)

    def nullor(e, out):
        return replace(e, kind="OPAMP", nodes=(e.nodes[2], e.nodes[3], out), value=None, params=())

    out, changed = [], False
    for e in netlist.elements:
        if e.kind == "OPAMP" and e.param("gbw") is not None:
            e, changed = replace(e, params=()), True
        elif e.kind == "E" and e.nodes[1] == GROUND and e.value is not None and abs(e.value) >= _E_OPAMP_GAIN:
            e, changed = nullor(e, e.nodes[0]), True
        elif e.kind == "G" and GROUND in e.nodes[:2] and e.value is not None:
            node = e.nodes[1] if e.nodes[0] == GROUND else e.nodes[0]
            if node != GROUND and any(abs(e.value) * r >= _E_OPAMP_GAIN for r in to_ground.get(node, [])):
                e, changed = nullor(e, node), True
        out.append(e)
    return Netlist(netlist.title, netlist.source, tuple(out), netlist.notes) if changed else None


def default_band(netlist: Netlist, inputs, output: str) -> tuple[float, float] | None:
    """The band of interest of a card with finite-gain op-amps when none is given: from its
    lowest to its highest corner with ideal op-amps (Hz), widened about its geometric centre to
    span at least one decade (a PI has a single corner). ``None`` when the card has no
    finite-gain op-amp, the ideal card cannot be solved, or it has no corner (a pure gain)."""
    ideal = ideal_opamp_netlist(netlist)
    if ideal is None:
        return None
    try:
        res = transfer_functions(ideal, inputs, output)
    except (InputError, ValueError, ArithmeticError):
        return None
    corners = []
    for r in res.values():
        cf = r.controller.corner_frequencies_hz()
        corners += [f for f in cf["zeros"] + cf["poles"] if f > 0]
    if not corners:
        return None
    lo, hi = min(corners), max(corners)
    if hi < DECADE * lo:
        centre = math.sqrt(lo * hi)
        lo, hi = centre / math.sqrt(DECADE), centre * math.sqrt(DECADE)
    return lo, hi


def _reduce_paths(netlist: Netlist, inputs, output: str, results: dict, band_hz, fs_hz):
    """(reductions by path name, None) for a card whose op-amps are not ideal; ({}, None) for one
    whose op-amps are; ({}, reason) when no band was given and none was found."""
    if ideal_opamp_netlist(netlist) is None:
        return {}, None  # ideal op-amps: the card is its controller
    origin = "given"
    if band_hz is None:
        band_hz = default_band(netlist, inputs, output)
        if band_hz is None:
            return {}, (
                "the op-amps have finite gain or bandwidth, but no band of interest was found (the card has no "
                "corner with ideal op-amps): give the band to separate the controller from their poles"
            )
        origin = "the card's corners with ideal op-amps"
    return {
        name: reduce_controller(r.controller, band_hz, fs_hz=fs_hz, band_origin=origin) for name, r in results.items()
    }, None


def _ratio(a: Controller, b: Controller, name: str) -> Controller:
    """a / b with common roots cancelled."""
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
        cols.append(np.full_like(s, pid.kp))
        names.append("b")
    if pid.kd > 0:
        cols.append(pid.kd * s / (pid.tf * s + 1.0))
        names.append("c")
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
    cf = pid.to_controller().corner_frequencies_hz() if pid.kd == 0 or pid.tf > 0 else {"zeros": [], "poles": []}
    corners = cf["zeros"] + cf["poles"]
    if pid.ki > 0 and pid.kp > 0:
        corners.append(pid.ki / pid.kp / (2 * np.pi))
    return 10 * LEAK_RATIO * min(corners) if corners else 0.0


def setpoint_structure(h_sp: Controller, h_pv: Controller) -> SetpointStructure:
    """Express a two-input card (u = H_sp·r + H_pv·y) as C·(F·r − y), in PID terms where it fits."""
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
            text = "setpoint and measurement meet as a plain error (setpoint − measurement): b = 1, c = 1"
        else:
            d_on = "the measurement only" if weighted.c == 0 else f"the error weighted by c = {weighted.c:.6g}"
            text = f"a {weighted.kind} with setpoint weight b = {weighted.b:.6g} on the proportional part" + (
                f"; the derivative acts on {d_on}" if weighted.kd > 0 else ""
            )
    elif filt.order == 0 and len(filt.num) == 1 and abs(filt.num[0] - 1.0) <= _WEIGHT_RTOL:
        text = "setpoint and measurement meet as a plain error (setpoint − measurement): F(s) = 1"
    else:
        text = (
            "the setpoint path is not a weighted form of the feedback PID; the setpoint passes through the "
            f"general filter F(s) = {filt.expression()} before the error is formed"
        )
    text += ". The firmware must reproduce this structure (not only the feedback controller)."
    return SetpointStructure(feedback, h_sp.with_name("setpoint path H_sp"), filt, weighted, text)


#: The finite-gain model each op-amp gets in turn for the feedback-sign check (OPAMP1P's defaults:
#: a0 = 1e5, gbw = 1 MHz; a general-purpose op-amp, common practice).
_CHECK_OPAMP = (("gbw", 1e6), ("a0", 1e5))
#: More op-amps than this are checked all at once (one solve) rather than one by one.
_CHECK_ONE_BY_ONE = 16


def _rhp_poles(netlist: Netlist, inputs, output: str) -> list[complex]:
    """Poles in the right half-plane of every path of ``netlist`` (beyond each root's accuracy
    and 1e-12 of the largest pole's magnitude)."""
    out = []
    for r in transfer_functions(netlist, inputs, output).values():
        roots = r.controller.pole_roots()
        scale = max((abs(x.value) for x in roots), default=0.0)
        out += [complex(x.value) for x in roots if x.value.real > max(x.error, 1e-12 * scale)]
    return out


def check_feedback_sign(netlist: Netlist, inputs, output: str) -> None:
    """Refuse a card whose op-amp feedback is positive (inputs swapped). With ideal op-amps
    (nullors) the transfer function cannot show it: a nullor forces its inputs equal whichever
    way round they are wired. So each op-amp in turn is given a finite gain with one pole
    (:data:`_CHECK_OPAMP`, or its own single-pole model) and the card solved again: negative
    feedback keeps every pole in the left half-plane, positive feedback puts one in the right
    half-plane (the output runs to a rail). Raises :class:`InputError` naming the op-amp and its line."""
    amps = [e for e in netlist.elements if e.kind == "OPAMP"]
    if not amps:
        return

    def finite(e):
        return e if e.param("gbw") is not None else replace(e, params=_CHECK_OPAMP)

    groups = [[e] for e in amps] if len(amps) <= _CHECK_ONE_BY_ONE else [amps]
    for group in groups:
        names = {e.name for e in group}
        trial = Netlist(
            netlist.title,
            netlist.source,
            tuple(finite(e) if e.name in names else e for e in netlist.elements),
            netlist.notes,
        )
        try:
            rhp = _rhp_poles(trial, inputs, output)
        except (InputError, ValueError, ArithmeticError):
            continue  # the card's own reading reports what cannot be solved
        if rhp:
            worst = max(rhp, key=lambda p: p.real)
            who = group[0] if len(group) == 1 else None
            text = (
                f"{who.name}'s feedback is positive: are its inputs swapped?"
                if who is not None
                else "an op-amp's feedback is positive: are the inputs of one swapped?"
            )
            at = f"{worst.real:.4g}" + (f"{worst.imag:+.4g}j" if worst.imag else "")
            raise InputError(
                f"{text} With a finite-gain op-amp model (one pole) the card has a pole at "
                f"s = {at} rad/s in the right half-plane: its output would "
                "run to a rail; the ideal-op-amp transfer function cannot show this",
                where=(who or group[0]).where,
                key=(who or group[0]).name,
            )


def analyze_card(
    netlist: Netlist,
    *,
    input: str = "VIN",
    output: str = "out",  # noqa: A002
    setpoint: str | None = None,
    measurement: str | None = None,
    with_sensitivities: bool = True,
    band_hz: tuple[float, float] | None = None,
    fs_hz: float | None = None,
) -> CardAnalysis:
    """Everything ``loopshift card`` reports about a netlist (names case-insensitive).

    Give either ``input`` (one input) or both ``setpoint`` and ``measurement``. ``band_hz``
    (low, high) is the band of interest and ``fs_hz`` a digital target's sample rate: they set
    where the op-amps' parasitic roots are cut off (:class:`CardReduction`). Without a band, a
    card whose op-amps are not ideal is cut at a decade above its highest corner with ideal
    op-amps (:func:`default_band`); a card with ideal op-amps is taken as it is.
    ``controller`` is the reduced controller; ``full_controller`` the card as computed.
    """
    if (setpoint is None) != (measurement is None):
        raise InputError("give both the setpoint and the measurement source, or neither", key="setpoint/measurement")
    inputs = (setpoint, measurement) if setpoint is not None else (input,)
    results = transfer_functions(netlist, inputs, output)
    check_feedback_sign(netlist, inputs, output)
    names = [netlist.element(n).name for n in inputs]
    notes: list[str] = list(netlist.notes)
    for r in results.values():
        notes += r.notes
    reductions, why_not_reduced = _reduce_paths(netlist, inputs, output, results, band_hz, fs_hz)
    if why_not_reduced:
        notes.append(why_not_reduced)
    paths = {n: (reductions[n].reduced if n in reductions else results[n].controller) for n in names}
    structure = None
    reduction = reductions.get(names[-1])
    if setpoint is not None:
        structure = setpoint_structure(paths[names[0]], paths[names[1]])
        controller = structure.feedback.with_name(netlist.title or netlist.source)
        if reduction is not None:  # the feedback controller is −H_pv
            reduction = replace(reduction, full=reduction.full.scaled(-1.0), reduced=reduction.reduced.scaled(-1.0))
        pid = structure.pid
        if pid is None:
            pid = pid_from_controller(controller)
        reason = None if pid is not None else why_not_pid(controller)
    else:
        controller = paths[names[0]]
        pid = pid_from_controller(controller)
        reason = None if pid is not None else why_not_pid(controller)
        if controller.gain < 0:
            notes.append(
                "the card inverts (negative gain): fed with the measurement, it acts on the error "
                "(setpoint − measurement) as −1 × this controller"
            )
    if reduction is not None:
        notes += reduction.notes()
        sp = reductions.get(names[0]) if setpoint is not None else None
        if sp is not None and sp.changed:
            notes += [f"setpoint path: {n}" for n in sp.notes()[1:]]
    leak_note = _leak_note(controller, pid)
    if leak_note:
        notes.append(leak_note)
    zeroed = [s.name for s in netlist.sources if s.name not in names]
    if zeroed:
        notes.append(f"source(s) {', '.join(zeroed)} set to zero (shorted) in the analysis")
    clamp_lines = clamp_notes(netlist)
    if clamp_lines:  # the per-clamp lines live in ``clamps``; the notes keep the summary and the instruction
        notes += [clamp_lines[0], clamp_lines[-1]]
        unreached = unreached_clamp_note(netlist, output)
        if unreached:
            notes.append(unreached)
    analysis = CardAnalysis(
        netlist,
        tuple(names),
        output,
        results,
        controller,
        pid,
        reason,
        structure,
        find_clamps(netlist),
        tuple(notes),
        output_limits=output_limits(netlist, output),
        reduction=reduction,
        full_controller=None if reduction is None else reduction.full.with_name(controller.name),
    )
    if not with_sensitivities:
        return analysis
    band = None if reduction is None else reduction.band_hz
    return replace(
        analysis, sensitivities=tuple(card_sensitivities(netlist, inputs, output, band_hz=band, fs_hz=fs_hz))
    )


def _leak_note(controller: Controller, pid) -> str | None:
    """A note when the PID read from the card has an integrator that leaks (finite op-amp gain)."""
    p = leaky_integrator_pole(controller)
    if pid is None or p is None:
        return None
    return (
        f"the integrator leaks (pole at s = {p:.3g} rad/s, {abs(p) / (2 * np.pi):.3g} Hz, far below every "
        "other corner; an op-amp's finite gain does this): the PID values treat it as an integrator"
    )


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


def card_quantities(
    netlist: Netlist, inputs, output: str, *, band_hz: tuple[float, float] | None = None, fs_hz: float | None = None
) -> dict[str, float]:
    """The quantities ``loopshift card`` tracks for a card: gains, corners and PID parameters of the
    controller (the feedback controller of a two-input card, plus its setpoint quantities). With
    ``band_hz`` the op-amps' parasitics are left out first (:func:`reduce_controller`)."""
    res = transfer_functions(netlist, inputs, output)
    keys = [netlist.element(n).name for n in inputs]
    paths = {k: res[k].controller for k in keys}
    if band_hz is not None:
        paths = {k: reduce_controller(c, band_hz, fs_hz=fs_hz).reduced for k, c in paths.items()}
    if len(keys) == 2:
        st = setpoint_structure(paths[keys[0]], paths[keys[1]])
        out = controller_quantities(st.feedback, st.pid or pid_from_controller(st.feedback))
        out.update(setpoint_quantities(st))
        return out
    c = paths[keys[0]]
    return controller_quantities(c, pid_from_controller(c))


def card_sensitivities(
    netlist: Netlist, inputs, output: str, *, band_hz: tuple[float, float] | None = None, fs_hz: float | None = None
):
    """Sensitivity rows for a card (see :mod:`convert.circuit.sensitivity`); two ``inputs``
    (setpoint, measurement) make it a two-input card; ``band_hz``/``fs_hz`` as in
    :func:`card_quantities`."""
    return sensitivities(netlist, lambda nl: card_quantities(nl, inputs, output, band_hz=band_hz, fs_hz=fs_hz))


_SETPOINT_WORDS = ("sp", "set", "ref", "cmd", "demand", "target")
_MEASUREMENT_WORDS = ("pv", "meas", "fb", "feedback", "sens", "process", "tx")


def input_candidates(netlist) -> tuple[list, tuple[str, str] | None]:
    """The voltage sources that look like signal inputs (one end on ground), and a guess
    ``(setpoint, measurement)`` from their names and nodes (``SP``/``set``/``ref`` against
    ``PV``/``meas``/``fb``), or ``None`` when the names do not tell which is which.

    Used when a card is read without ``setpoint``/``measurement`` to say which sources look
    like the two inputs; a guess from names is only ever offered, never used silently."""
    found = [e for e in netlist.sources if "0" in e.nodes and e.nodes[0] != e.nodes[1]]

    def score(e, words) -> bool:
        text = " ".join([e.name.lower(), *e.nodes])
        return any(w in text for w in words)

    sp = [e for e in found if score(e, _SETPOINT_WORDS) and not score(e, _MEASUREMENT_WORDS)]
    pv = [e for e in found if score(e, _MEASUREMENT_WORDS) and not score(e, _SETPOINT_WORDS)]
    guess = (sp[0].name, pv[0].name) if len(found) == 2 and len(sp) == 1 and len(pv) == 1 else None
    return found, guess


def two_input_hint(
    netlist, given_input: str | None, *, spelling: str = "setpoint {sp} and measurement {pv}"
) -> str | None:
    """One sentence naming the sources that look like a two-input card's inputs, or None when
    the card has fewer than two. ``given_input``: the input source the user asked for (if any);
    ``spelling``: how the front end names the two settings (command-line options, case keys)."""
    found, guess = input_candidates(netlist)
    if len(found) < 2:
        return None
    listed = ", ".join(f"{e.name} (node {next(n for n in e.nodes if n != '0')})" for e in found)
    if guess:
        how = f"give {spelling.format(sp=guess[0], pv=guess[1])} (guessed from the names: check it)"
    else:
        how = f"give {spelling.format(sp='NAME', pv='NAME')} (the names do not tell which is which)"
    others = [e.name for e in found if e.name != (given_input or "").upper()]
    held = f"; {', '.join(others)} held at zero in this reading" if given_input and len(others) < len(found) else ""
    return f"{len(found)} sources look like inputs: {listed}; for a two-input card {how}{held}"
