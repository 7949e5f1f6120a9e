"""Signal scaling: a card's controller, which works in its signals (volts, milliamps), moved to
the firmware's units (converter counts, engineering units, percent).

A map is four numbers: the signal range at the card (``signal_low``, ``signal_high``, e.g. 1 V
and 5 V for a 4–20 mA transmitter across 250 Ω, or 4 mA and 20 mA) and the firmware values at
those ends (``firmware_low``, ``firmware_high``, e.g. 0 and 4095 counts of a 12-bit converter,
or 0 and 5 m of a level transmitter's range). A map may be inverted (firmware high at the signal's
low end).

The controller acts on deviations, so offsets cancel in the error; only the slopes matter:
``C_firmware = g · C_card`` with
``g = (Δsignal_in / Δfirmware_in) · (Δfirmware_out / Δsignal_out)``. A negative g means one map
is inverted: the firmware controller's sign flips so the plant sees the same action — the
direction is checked end to end (card action, maps, firmware action) and stated.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from convert.errors import InputError


@dataclass(frozen=True)
class SignalMap:
    """Card signal range ↔ firmware range (units are the user's; only slopes are used)."""

    signal_low: float
    signal_high: float
    firmware_low: float
    firmware_high: float

    def __post_init__(self):
        for name in ("signal_low", "signal_high", "firmware_low", "firmware_high"):
            v = getattr(self, name)
            if not (isinstance(v, (int, float)) and math.isfinite(v)):
                raise InputError(f"expected a finite number, found {v!r}", key=name)
        if self.signal_low == self.signal_high or self.firmware_low == self.firmware_high:
            raise InputError("a scale needs two different ends on both sides, e.g. 1V 5V 0 4095", key="scale")

    @property
    def firmware_per_signal(self) -> float:
        return (self.firmware_high - self.firmware_low) / (self.signal_high - self.signal_low)


@dataclass(frozen=True)
class Scaling:
    """``gain`` g applied to the controller; ``inverted`` whether the firmware's sign flips;
    ``text`` the statement the output prints."""

    gain: float
    inverted: bool
    text: str


def scaling(input_map: SignalMap | None, output_map: SignalMap | None) -> Scaling:
    """The factor g between the card's controller and the firmware's (see the module doc)."""
    g_in = 1.0 / input_map.firmware_per_signal if input_map else 1.0
    g_out = output_map.firmware_per_signal if output_map else 1.0
    g = g_in * g_out
    inverted = g < 0
    parts = []
    if input_map:
        parts.append(f"input: {_fmt(1 / g_in)} firmware units per signal unit")
    if output_map:
        parts.append(f"output: {_fmt(g_out)} firmware units per signal unit")
    parts.append(f"controller gain × {_fmt(g)}")
    if inverted:
        parts.append(
            "one map is inverted: the firmware controller has the opposite sign in firmware units, so the "
            "plant sees the card's action unchanged"
        )
    return Scaling(g, inverted, "; ".join(parts))


def scale_controller(controller, sc: Scaling):
    """The controller times g (a :class:`convert.controller.Controller`)."""
    from convert.controller import Controller

    if controller.is_digital:
        return Controller.from_b_a(
            [sc.gain * v for v in controller.b], controller.a, controller.sample_period_s, controller.name
        )
    return Controller.analog([sc.gain * v for v in controller.num], controller.den, controller.name)


def scale_pid(settings, sc: Scaling):
    """PID settings in firmware units: gains × |g|, the action flipped when g < 0."""
    from dataclasses import replace

    k = abs(sc.gain)
    action = settings.action
    if sc.inverted:
        action = "direct" if action == "reverse" else "reverse"
    return replace(settings, kp=settings.kp * k, ki=settings.ki * k, kd=settings.kd * k, action=action)


def _fmt(x: float) -> str:
    return format(x, ".6g")
