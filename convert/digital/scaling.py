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
from convert.controller import Controller
from convert.values import parse_value


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
    ``text`` the statement the output prints; ``input_map``/``output_map`` the maps it was made
    from (None where not given)."""

    gain: float
    inverted: bool
    text: str
    input_map: SignalMap | None = None
    output_map: SignalMap | None = None


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
    return Scaling(g, inverted, "; ".join(parts), input_map, output_map)


def scale_controller(controller, sc: Scaling):
    """The controller times g (a :class:`convert.controller.Controller`)."""
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


# ----------------------------------------------------------------------------- signals in case files
MAX_CONVERTER_BITS = 32


def _signal_value(raw, key: str) -> tuple[float, str]:
    """A signal value with its unit: volts or amperes (convert.values), e.g. "4 mA", "-10 V". A bare
    number is refused: 4 could be volts or milliamps, and a guess moves the gain 250-fold."""
    if _bare_number(raw):
        raise InputError(
            f'expected a voltage or a current with its unit (e.g. "4 mA", "-10 V"), found the bare number {raw!r}: '
            "volts or amperes?",
            key=key,
        )
    for kind in ("volt", "ampere"):
        try:
            return parse_value(raw, kind, field=key), kind
        except InputError:
            continue
    raise InputError(f'expected a voltage or a current with its unit (e.g. "4 mA", "-10 V"), found {raw!r}', key=key)


def _bare_number(raw) -> bool:
    if isinstance(raw, bool):
        return False
    if isinstance(raw, int | float):
        return True
    try:
        float(str(raw).strip())
    except ValueError:
        return False
    return True


def _signal_pair(raw, key: str) -> tuple[float, float, str]:
    if not isinstance(raw, list) or len(raw) != 2:
        raise InputError(f'expected [low, high] with units, e.g. ["4 mA", "20 mA"], found {raw!r}', key=key)
    (lo, u1), (hi, u2) = _signal_value(raw[0], key), _signal_value(raw[1], key)
    if u1 != u2:
        raise InputError(f"both ends need the same unit (volts or amperes), found {raw!r}", key=key)
    if not lo < hi:
        raise InputError(
            f"expected low < high, found {raw!r} (an inverted map goes into firmware, e.g. firmware = [100, 0])",
            key=key,
        )
    return lo, hi, u1


def signal_map(raw: dict, dotted: str, *, card_volts: bool) -> tuple[SignalMap, str]:
    """A :class:`SignalMap` from a case file's signal table (see docs/case-files.md): ``range``
    the signal at the card (volts or amperes); ``shunt`` the resistance that turns a current
    signal into the card's volts; the firmware values at the range's ends either as ``firmware``
    (engineering units, percent; may be inverted) or from a converter: ``bits`` and ``converter``
    (its span, default the signal's span at the converter). ``card_volts``: the controller works
    in volts (a card or netlist source), so a current range needs a shunt. Returns the map (in
    controller units) and a one-line description. Errors name ``dotted.key``."""

    def err(key: str, msg: str) -> InputError:
        return InputError(msg, key=f"{dotted}.{key}")

    if "range" not in raw:
        raise err("range", 'give the signal range at the card, e.g. range = ["4 mA", "20 mA"] or ["-10 V", "10 V"]')
    lo, hi, unit = _signal_pair(raw["range"], f"{dotted}.range")
    shunt = None
    if "shunt" in raw:
        shunt = parse_value(raw["shunt"], "ohm", field=f"{dotted}.shunt")
        if not shunt > 0:
            raise err("shunt", f"expected a positive resistance, found {raw['shunt']!r}")
        if unit != "ampere":
            raise err("shunt", "a shunt turns a current signal into volts; this range is already in volts")
    ctl_lo, ctl_hi, ctl_unit = (lo * shunt, hi * shunt, "volt") if shunt else (lo, hi, unit)
    if ctl_unit == "ampere" and card_volts:
        raise err(
            "range",
            f"a current range ({_fmt(lo * 1e3)} .. {_fmt(hi * 1e3)} mA) for the controller's input, which works in volts "
            "as a card's does: give "
            'shunt (e.g. shunt = "250 ohm") or the volts at the card',
        )
    sym = "V" if ctl_unit == "volt" else "A"
    if "firmware" in raw and "bits" in raw:
        raise err("bits", "give firmware = [LOW, HIGH] or bits (a converter), not both")
    if "firmware" in raw:
        fw = raw["firmware"]
        if not isinstance(fw, list) or len(fw) != 2:
            raise err("firmware", f"expected [value at low end, value at high end], found {fw!r}")
        f_lo, f_hi = (parse_value(v, "number", field=f"{dotted}.firmware") for v in fw)
        if f_lo == f_hi:
            raise err("firmware", f"the two ends need different firmware values, found {fw!r}")
        how = f"firmware {_fmt(f_lo)} .. {_fmt(f_hi)}"
    elif "bits" in raw:
        bits = raw["bits"]
        if isinstance(bits, bool) or not isinstance(bits, int) or not 1 <= bits <= MAX_CONVERTER_BITS:
            raise err(
                "bits", f"expected a whole number of converter bits from 1 to {MAX_CONVERTER_BITS}, found {bits!r}"
            )
        if "converter" in raw:
            c_lo, c_hi, c_unit = _signal_pair(raw["converter"], f"{dotted}.converter")
        else:
            c_lo, c_hi, c_unit = ctl_lo, ctl_hi, ctl_unit
        if c_unit != ctl_unit:
            have = "a current" if ctl_unit == "ampere" else "a voltage"
            raise err(
                "converter",
                f"{have} signal for a converter whose range is in {'volts' if c_unit == 'volt' else 'amperes'}"
                + (': give shunt (e.g. shunt = "250 ohm")' if ctl_unit == "ampere" else ""),
            )
        tol = 1e-9 * (c_hi - c_lo)
        if ctl_lo < c_lo - tol or ctl_hi > c_hi + tol:
            raise err(
                "converter",
                f"the signal ({_fmt(ctl_lo)} .. {_fmt(ctl_hi)} {sym}) goes beyond the converter's range "
                f"({_fmt(c_lo)} .. {_fmt(c_hi)} {sym}): it would clip",
            )
        top = (1 << bits) - 1
        f_lo = top * (ctl_lo - c_lo) / (c_hi - c_lo)
        f_hi = top * (ctl_hi - c_lo) / (c_hi - c_lo)
        how = f"{bits}-bit converter over {_fmt(c_lo)} .. {_fmt(c_hi)} {sym}: counts {_fmt(f_lo)} .. {_fmt(f_hi)}"
    else:
        raise err("firmware", "give firmware = [LOW, HIGH] (values at the range's ends) or bits = N (a converter)")
    shown = f"{_fmt(lo * 1e3)} .. {_fmt(hi * 1e3)} mA" if unit == "ampere" else f"{_fmt(lo)} .. {_fmt(hi)} V"
    if shunt:
        shown += f" across {_fmt(shunt)} ohm = {_fmt(ctl_lo)} .. {_fmt(ctl_hi)} V"
    return SignalMap(ctl_lo, ctl_hi, f_lo, f_hi), f"{shown} -> {how}"


def slope(m: SignalMap | None) -> float:
    """Firmware units per controller unit (1 without a map)."""
    return 1.0 if m is None else m.firmware_per_signal


def deviations_in_firmware(pair, m: SignalMap | None) -> tuple[float, float] | None:
    """A ``(low, high)`` pair in the controller's own units (output limits, an error's range),
    which are deviations from the operating point, in firmware units: times the map's slope only
    (offsets are the caller's), ends sorted (an inverted map swaps them). ``None`` stays ``None``;
    without a map the pair is returned unchanged. The one rule for the CLI and case files."""
    if pair is None:
        return None
    k = slope(m)
    lo, hi = sorted(float(v) * k + 0.0 for v in pair)  # + 0.0: no -0
    return (lo, hi)


def wide_limits_problem(limits_fw, m: SignalMap | None) -> str | None:
    """Why output limits in firmware units ``limits_fw`` look given in other units: they span
    more than the output signal's whole firmware range, so the clamp never acts (None when they
    do not, or without limits or a map)."""
    if not limits_fw or m is None:
        return None
    lo, hi = limits_fw
    span = abs(m.firmware_high - m.firmware_low)
    if hi - lo <= span * (1 + 1e-9):
        return None
    return (
        f"the output limits become {lo:.4g} .. {hi:.4g} in firmware units, {(hi - lo) / span:.3g} times the output "
        f"signal's whole range ({min(m.firmware_low, m.firmware_high):.4g} .. "
        f"{max(m.firmware_low, m.firmware_high):.4g}): a clamp that never acts. output limits are "
        "deviations of the card's output from its operating point, in the card's units"
    )


def action(sign: float) -> str:
    """A controller acting on the error e = setpoint − measurement with a positive gain is
    reverse acting (output falls as the measurement rises); negative: direct acting."""
    return "reverse" if sign > 0 else "direct"


def end_to_end(card_step, firmware_step, input_map, output_map, e: float, n: int = 32) -> tuple[float, float, float]:
    """The direction check through the maps: a constant error ``e`` (controller units) for ``n``
    samples into the card-unit model (``card_step(e) -> u``) and, mapped into firmware units, into
    the firmware model (``firmware_step(e_fw) -> u_fw``); the firmware output mapped back to card
    units. Returns (card output, firmware output in card units, largest difference)."""
    k_in, k_out = slope(input_map), slope(output_map)
    worst = 0.0
    u_card = u_back = 0.0
    for _ in range(n):
        u_card = float(card_step(e))
        u_back = float(firmware_step(e * k_in)) / k_out
        worst = max(worst, abs(u_card - u_back))
    return u_card, u_back, worst
