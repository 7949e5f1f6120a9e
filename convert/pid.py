"""PID controllers: the three forms, their exact conversions, plant units and the action sign.

The canonical object is :class:`PidSettings`, the **parallel** form in SI units::

    C(s) = sign · ( kp + ki/s + kd·s/(tf·s + 1) )        (error -> output)

* ``kp`` (dimensionless), ``ki`` (1/s), ``kd`` (s), ``tf`` (s): the derivative filter time
  constant; ``tf = 0`` means no filter. The filter acts on the derivative term only.
* ``b`` and ``c``: setpoint weights on the P and D terms (two-degree-of-freedom PID)::

      u = sign · ( kp·(b·r − y) + ki/s·(r − y) + kd·s/(tf·s + 1)·(c·r − y) )

  ``c = 0`` is derivative on measurement. The weights change only the setpoint path
  (:meth:`PidSettings.setpoint_controller`); the feedback path is :meth:`PidSettings.to_controller`.
* ``action``: ``"reverse"`` (default; output rises when the measurement falls below the
  setpoint: ``sign = +1``) or ``"direct"`` (output rises when the measurement rises:
  ``sign = −1``, the controller is negated). Gains are always non-negative; the sign lives
  in the action and is carried unchanged through every conversion.

The other forms (all exact, in closed form):

* **ideal** (standard, non-interacting): ``Kc·(1 + 1/(Ti·s) + Td·s/((Td/N)·s + 1))``, so
  ``kp = Kc``, ``ki = Kc/Ti``, ``kd = Kc·Td`` and ``tf = Td/N`` (N applies to the ideal Td).
* **series** (interacting): ``K'·(1 + 1/(Ti'·s))·(1 + Td'·s)/((Td'/N')·s + 1)``; here the
  filter pole multiplies the whole controller and ``tf = Td'/N'`` (N' applies to the series
  Td'). Both forms have the same poles (0 and −1/tf), so the conversion is exact::

      ki = K'/Ti'     kp = K'·(Ti' + Td' − tf)/Ti'     kd = K'·Td' − kp·tf

  Without a filter these are the relations of Åström & Hägglund, *PID Controllers: Theory,
  Design, and Tuning*, 2nd ed., 1995, section 3.4 (from memory)::

      Kc = K'·(Ti' + Td')/Ti'    Ti = Ti' + Td'    Td = Ti'·Td'/(Ti' + Td')

  and the inverse needs ``Ti ≥ 4·Td`` (otherwise the zeros are complex and no real series set
  exists). The inverse picks ``Ti' ≥ Td'``: Ti' = Ti/2·(1 + √(1 − 4Td/Ti)), Td' = Ti/2·(1 − √(1 − 4Td/Ti)),
  K' = Kc/2·(1 + √(1 − 4Td/Ti)). With a filter, the condition becomes
  ``(kp + ki·tf)² ≥ 4·ki·(kp·tf + kd)``.

Plant units accepted by :func:`pid_from_words` / :func:`pid_from_mapping`: proportional band
``pb`` in % (Kc = 100/PB), integral time in s or min (minutes per repeat), reset rate in
repeats per minute (Ti = 1/reset), derivative time in s or min. See docs/pid.md.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any
from collections.abc import Mapping, Sequence

from convert.errors import InputError, UnrealizableError

ACTIONS = ("reverse", "direct")
FORMS = ("parallel", "ideal", "series")
FORM_ALIASES = {"standard": "ideal", "noninteracting": "ideal", "non-interacting": "ideal", "interacting": "series"}

#: Every key ``--pid`` and a case file's pid table accept, with a one-line description.
PID_KEYS: dict[str, str] = {
    "form": "parallel, ideal (also: standard) or series (also: interacting); default: parallel when kp/ki/kd are given, else ideal",
    "kp": "parallel proportional gain, e.g. kp=2",
    "ki": "parallel integral gain in 1/s, e.g. ki=0.1, ki=0.1/s, ki=6/min",
    "kd": "parallel derivative gain in s, e.g. kd=10s, kd=0.2min",
    "kc": "controller gain of the ideal or series form, e.g. kc=2",
    "pb": "proportional band in % instead of kc (Kc = 100/PB), e.g. pb=50%",
    "ti": "integral time (minutes or seconds per repeat), e.g. ti=30s, ti=0.5min; bare numbers are seconds",
    "reset": "reset rate instead of ti (Ti = 1/reset), e.g. reset=2/min, reset=0.05/s; bare numbers are repeats per minute",
    "td": "derivative time, e.g. td=5s, td=0.1min; bare numbers are seconds",
    "n": "derivative filter ratio N of the chosen form (tf = Td/N; parallel: tf = kd/(kp·N)), e.g. n=10",
    "tf": "derivative filter time constant instead of n, e.g. tf=0.5s",
    "b": "setpoint weight on the proportional term, default 1, e.g. b=0.5",
    "c": "setpoint weight on the derivative term, default 1; c=0 is derivative on measurement",
    "action": "reverse (default: output rises when the measurement falls below setpoint) or direct (output rises with the measurement)",
}

_PARALLEL_KEYS = ("kp", "ki", "kd")
_FORM_KEYS = ("kc", "pb", "ti", "reset", "td")


def _check_number(value: float, name: str, *, minimum: float | None = 0.0, strict: bool = False) -> float:
    value = float(value)
    if not math.isfinite(value):
        raise InputError(f"expected a finite number, found {value!r}", key=name)
    if minimum is not None and (value < minimum or (strict and value == minimum)):
        bound = "positive" if strict else "zero or positive"
        raise InputError(f"must be {bound}, found {value:g}", key=name)
    return value


def _fmt(x: float | None) -> str:
    return "none" if x is None else f"{x:.6g}"


# ============================================================================ other forms
@dataclass(frozen=True)
class _GainTimesForm:
    """Fields and plant-unit views shared by the ideal and the series forms (Kc, Ti, Td, Tf).

    ``ti_s`` is ``None`` when there is no integral action; ``td_s`` is 0 without derivative;
    ``tf_s`` is the derivative filter time constant (0: none), ``N = Td/Tf``. Times in seconds.
    ``b``, ``c`` and ``action`` have the meaning given in :class:`PidSettings`.
    """

    kc: float
    ti_s: float | None
    td_s: float
    tf_s: float = 0.0
    b: float = 1.0
    c: float = 1.0
    action: str = "reverse"

    @property
    def n(self) -> float | None:
        """Filter ratio N = Td/Tf of this form, or None without a filter."""
        return self.td_s / self.tf_s if self.tf_s > 0 and self.td_s > 0 else None

    @property
    def pb_percent(self) -> float:
        """Proportional band in % (100/Kc)."""
        return 100.0 / self.kc

    @property
    def reset_per_min(self) -> float:
        """Reset rate in repeats per minute (60/Ti with Ti in s); 0 without integral action."""
        return 0.0 if self.ti_s is None else 60.0 / self.ti_s

    def as_dict(self) -> dict[str, Any]:
        return {
            "kc": self.kc,
            "pb_percent": self.pb_percent,
            "ti_s": self.ti_s,
            "ti_min": None if self.ti_s is None else self.ti_s / 60.0,
            "reset_per_min": self.reset_per_min,
            "td_s": self.td_s,
            "td_min": self.td_s / 60.0,
            "tf_s": self.tf_s,
            "n": self.n,
        }


@dataclass(frozen=True)
class IdealForm(_GainTimesForm):
    """Ideal (standard, non-interacting) PID: ``Kc·(1 + 1/(Ti·s) + Td·s/((Td/N)·s + 1))``
    (fields: see :class:`_GainTimesForm`)."""

    def to_settings(self) -> PidSettings:
        return PidSettings.from_ideal(
            self.kc, self.ti_s, self.td_s, tf_s=self.tf_s, b=self.b, c=self.c, action=self.action
        )


@dataclass(frozen=True)
class SeriesForm(_GainTimesForm):
    """Series (interacting) PID: ``K'·(1 + 1/(Ti'·s))·(1 + Td'·s)/((Td'/N')·s + 1)``.

    Same field meanings as :class:`IdealForm` but for the series parameters; the filter pole
    (time constant ``tf_s``) multiplies the whole controller and ``N' = Td'/Tf``. Conventionally
    ``Ti' ≥ Td'``.
    """

    def to_settings(self) -> PidSettings:
        return PidSettings.from_series(
            self.kc, self.ti_s, self.td_s, tf_s=self.tf_s, b=self.b, c=self.c, action=self.action
        )


# ============================================================================ canonical settings
@dataclass(frozen=True)
class PidSettings:
    """A PID controller in the parallel form, SI units (see the module docstring).

    ``kp`` ≥ 0, ``ki`` ≥ 0 (1/s), ``kd`` ≥ 0 (s), ``tf`` ≥ 0 (s), at least one gain positive;
    ``b``, ``c`` ≥ 0; ``action`` "reverse" or "direct". A filter without a derivative term is
    dropped (``tf`` becomes 0 when ``kd`` is 0).
    """

    kp: float = 0.0
    ki: float = 0.0
    kd: float = 0.0
    tf: float = 0.0
    b: float = 1.0
    c: float = 1.0
    action: str = "reverse"
    #: (Ti′, Td′) in seconds as given in the series form; :meth:`series` keeps that assignment of
    #: the two zeros (the other one is the same transfer function) while it still fits this set.
    given_series: tuple[float, float] | None = field(default=None, compare=False, repr=False)

    def __post_init__(self) -> None:
        for name in ("kp", "ki", "kd", "tf", "b", "c"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, (int, float)):
                raise InputError(f"expected a number, found {value!r}", key=name)
            object.__setattr__(self, name, _check_number(value, name))
        for name in ("kp", "ki", "kd"):
            if getattr(self, name) < 0:  # pragma: no cover - _check_number refuses first
                raise InputError("gains are non-negative; give the sign with action=direct", key=name)
        if self.kp == 0 and self.ki == 0 and self.kd == 0:
            raise InputError("a PID needs at least one non-zero gain (kp, ki or kd)", key="kp")
        if self.action not in ACTIONS:
            raise InputError(f"expected reverse or direct, found {self.action!r}", key="action")
        if self.kd == 0 and self.tf != 0:
            object.__setattr__(self, "tf", 0.0)

    # ------------------------------------------------------------------ descriptions
    @property
    def sign(self) -> int:
        """+1 for reverse action, −1 for direct action."""
        return 1 if self.action == "reverse" else -1

    @property
    def kind(self) -> str:
        """ "P", "PI", "PD", "PID", "I", "ID" or "D" by which gains are non-zero."""
        return "".join(letter for letter, k in (("P", self.kp), ("I", self.ki), ("D", self.kd)) if k > 0)

    # ------------------------------------------------------------------ transfer functions
    def _polys(self, p_weight: float, d_weight: float) -> tuple[list[float], list[float]]:
        """num/den (descending s) of kp·bw + ki/s + kd·dw·s/(tf·s + 1), times the action sign."""
        import numpy as np

        integral = self.ki > 0
        has_d = self.kd * d_weight != 0
        filt = [self.tf, 1.0] if (has_d and self.tf > 0) else [1.0]
        s_i = [1.0, 0.0] if integral else [1.0]
        den = np.polymul(s_i, filt)
        num = np.polymul([self.kp * p_weight], den)
        if integral:
            num = np.polyadd(num, np.polymul([self.ki], filt))
        if has_d:
            num = np.polyadd(num, np.polymul([self.kd * d_weight, 0.0], s_i))
        num = self.sign * np.asarray(num, dtype=float)
        return list(num), list(den)

    def to_controller(self, name: str = ""):
        """The feedback controller (error -> output, action sign included) as a
        :class:`convert.controller.Controller`. Without a filter and with kd > 0 it is improper."""
        # imported here, not at the top: `loopshift --help` imports this module; at the top it would add convert.controller, convert.expr, convert.limits, convert.polyroots to the help's start-up
        from convert.controller import Controller

        num, den = self._polys(1.0, 1.0)
        return Controller.analog(num, den, name or f"{self.kind} ({self.action})")

    def setpoint_controller(self, name: str = ""):
        """The setpoint -> output path with the weights: sign·(kp·b + ki/s + kd·c·s/(tf·s + 1))."""
        # imported here, not at the top: `loopshift --help` imports this module; at the top it would add convert.controller, convert.expr, convert.limits, convert.polyroots to the help's start-up
        from convert.controller import Controller

        num, den = self._polys(self.b, self.c)
        if not any(num):
            raise UnrealizableError("the setpoint path is zero (b = 0, c = 0 and no integral action)", key="b")
        return Controller.analog(num, den, name or f"{self.kind} setpoint path ({self.action})")

    # ------------------------------------------------------------------ other forms
    def ideal(self) -> IdealForm:
        """The ideal (standard) form. Raises :class:`UnrealizableError` when kp = 0."""
        if self.kp <= 0:
            raise UnrealizableError(
                f"the ideal form needs a proportional gain; this {self.kind} set has kp = 0", key="kp"
            )
        ti = None if self.ki == 0 else self.kp / self.ki
        return IdealForm(self.kp, ti, self.kd / self.kp, self.tf, self.b, self.c, self.action)

    def series(self) -> SeriesForm:
        """The series (interacting) form, exact; Ti' ≥ Td' is chosen.

        Raises :class:`UnrealizableError` when kp = 0 or when the zeros are complex
        (Ti < 4·Td without a filter; ``(kp + ki·tf)² < 4·ki·(kp·tf + kd)`` with one).
        """
        if self.kp <= 0:
            raise UnrealizableError(
                f"the series form needs a proportional gain; this {self.kind} set has kp = 0", key="kp"
            )
        tf = self.tf
        if self.ki == 0:
            td = self.kd / self.kp + tf if self.kd > 0 else 0.0
            return SeriesForm(self.kp, None, td, tf, self.b, self.c, self.action)
        quad = self.kp * tf + self.kd  # coefficient of s² over 1: K'·Td'
        lin = self.kp + self.ki * tf  # K'·(Ti' + Td')/Ti'
        disc = lin * lin - 4.0 * quad * self.ki
        if disc < 0:
            if disc < -1e-12 * lin * lin:
                ideal = self.ideal()
                extra = ""
                if tf > 0:
                    extra = f"; with the filter tf = {tf:.6g} s the condition is (Ti + Tf)² ≥ 4·Ti·(Td + Tf)"
                raise UnrealizableError(
                    "the series form cannot represent this set (Ti < 4·Td gives complex zeros): "
                    f"Ti = {_fmt(ideal.ti_s)} s, Td = {ideal.td_s:.6g} s{extra}",
                    key="form",
                )
            disc = 0.0
        root = math.sqrt(disc)
        ti_series = (lin + root) / (2.0 * self.ki)
        td_series = 2.0 * quad / (lin + root)
        if self.given_series is not None and td_series > 0:
            g_ti, g_td = self.given_series
            if math.isclose(g_ti, td_series, rel_tol=1e-6) and math.isclose(g_td, ti_series, rel_tol=1e-6):
                ti_series, td_series = td_series, ti_series  # the assignment the user gave (Ti′ < Td′)
        return SeriesForm(self.ki * ti_series, ti_series, td_series, tf, self.b, self.c, self.action)

    def table(self) -> dict[str, Any]:
        """All forms as plain numbers (JSON-ready; ``None`` where a value does not exist).

        Keys: ``kind``, ``action``, ``b``, ``c``, ``derivative_on`` ("error", "measurement",
        "weighted error" or None), ``parallel`` {kp, ki_per_s, kd_s, tf_s}, ``ideal`` and
        ``series`` {kc, pb_percent, ti_s, ti_min, reset_per_min, td_s, td_min, tf_s, n} or
        {"unavailable": reason}.
        """
        derivative_on = None
        if self.kd > 0:
            derivative_on = "measurement" if self.c == 0 else ("error" if self.c == 1 else "weighted error")
        out: dict[str, Any] = {
            "kind": self.kind,
            "action": self.action,
            "b": self.b,
            "c": self.c,
            "derivative_on": derivative_on,
            "parallel": {"kp": self.kp, "ki_per_s": self.ki, "kd_s": self.kd, "tf_s": self.tf},
        }
        for label, method in (("ideal", self.ideal), ("series", self.series)):
            try:
                out[label] = method().as_dict()
            except UnrealizableError as exc:
                out[label] = {"unavailable": exc.message}
        return out

    # ------------------------------------------------------------------ constructors from forms
    @classmethod
    def from_ideal(
        cls,
        kc: float,
        ti_s: float | None = None,
        td_s: float = 0.0,
        *,
        n: float | None = None,
        tf_s: float | None = None,
        b: float = 1.0,
        c: float = 1.0,
        action: str = "reverse",
    ) -> PidSettings:
        """From the ideal form; ``ti_s=None`` means no integral action. Give the filter as ``n``
        (tf = Td/N) or ``tf_s``, not both."""
        kc = _check_number(kc, "kc", strict=True)
        td = _check_number(td_s, "td")
        ti = None if ti_s is None else _check_number(ti_s, "ti", strict=True)
        tf = _filter_time(td, n, tf_s)
        return cls(kc, 0.0 if ti is None else kc / ti, kc * td, tf, b, c, action)

    @classmethod
    def from_series(
        cls,
        kc: float,
        ti_s: float | None = None,
        td_s: float = 0.0,
        *,
        n: float | None = None,
        tf_s: float | None = None,
        b: float = 1.0,
        c: float = 1.0,
        action: str = "reverse",
    ) -> PidSettings:
        """From the series form (K', Ti', Td', filter N' = Td'/Tf or ``tf_s``); exact.

        Raises :class:`UnrealizableError` when the parallel gains would be negative: kd < 0 when
        Tf lies between Td' and Ti' (kd = K'·(Td' − Tf)·(Ti' − Tf)/Ti'), kp < 0 when
        Tf > Ti' + Td'. A filter slower than both Td' and Ti' but faster than their sum still gives
        a PID (all gains ≥ 0), e.g. K' = 1, Ti' = Td' = 1 s, Tf = 1.5 s -> kp 0.5, ki 1, kd 0.25.
        """
        k = _check_number(kc, "kc", strict=True)
        td = _check_number(td_s, "td")
        ti = None if ti_s is None else _check_number(ti_s, "ti", strict=True)
        tf = _filter_time(td, n, tf_s)
        if ti is None:
            kp, ki, kd = k, 0.0, k * (td - tf)
        else:
            ki = k / ti
            kp = k * (ti + td - tf) / ti
            kd = k * (td - tf) * (ti - tf) / ti  # = K'·Td' − kp·tf, factored to avoid cancellation
        if kd < 0 or kp < 0:
            raise UnrealizableError(
                f"in the series form the filter (tf = {tf:.6g} s) must be faster than Td' = {td:.6g} s and Ti' = {_fmt(ti)} s "
                "(N' ≥ 1); otherwise it is not a PID",
                key="n",
            )
        return cls(kp, ki, kd, tf, b, c, action, given_series=None if ti is None else (ti, td))


def _filter_time(td: float, n: float | None, tf_s: float | None) -> float:
    if n is not None and tf_s is not None:
        raise InputError("give the derivative filter as n or as tf, not both", key="n")
    if n is not None:
        n = _check_number(n, "n", strict=True)
        if td == 0:
            raise InputError("a derivative filter needs a derivative time (td)", key="n")
        return td / n
    if tf_s is not None:
        tf = _check_number(tf_s, "tf")
        if tf > 0 and td == 0:
            raise InputError("a derivative filter needs a derivative time (td)", key="tf")
        return tf
    return 0.0


# ============================================================================ lead and lag
def lead_lag(gain: float, zero_hz: float, pole_hz: float, *, name: str = ""):
    """``gain·(s/wz + 1)/(s/wp + 1)`` with wz = 2π·zero_hz, wp = 2π·pole_hz (Hz in, rad/s inside).

    ``gain`` is the DC gain (may be negative). A lead has zero_hz < pole_hz, a lag the opposite.
    """
    # imported here, not at the top: `loopshift --help` imports this module; at the top it would add convert.controller, convert.expr, convert.limits, convert.polyroots to the help's start-up
    from convert.controller import Controller

    gain = _check_number(gain, "gain", minimum=None)
    if gain == 0:
        raise InputError("must be non-zero", key="gain")
    wz = 2 * math.pi * _check_number(zero_hz, "zero_hz", strict=True)
    wp = 2 * math.pi * _check_number(pole_hz, "pole_hz", strict=True)
    return Controller.analog([gain / wz, gain], [1.0 / wp, 1.0], name)


def lead(gain: float, zero_hz: float, pole_hz: float, *, name: str = "lead"):
    """Phase lead ``gain·(s/wz + 1)/(s/wp + 1)``, zero below the pole (``zero_hz < pole_hz``)."""
    if not zero_hz < pole_hz:
        raise InputError(
            f"a lead has its zero below its pole; found zero {zero_hz:g} Hz, pole {pole_hz:g} Hz", key="zero_hz"
        )
    return lead_lag(gain, zero_hz, pole_hz, name=name)


def lag(gain: float, zero_hz: float, pole_hz: float, *, name: str = "lag"):
    """Phase lag ``gain·(s/wz + 1)/(s/wp + 1)``, pole below the zero (``pole_hz < zero_hz``)."""
    if not pole_hz < zero_hz:
        raise InputError(
            f"a lag has its pole below its zero; found zero {zero_hz:g} Hz, pole {pole_hz:g} Hz", key="pole_hz"
        )
    return lead_lag(gain, zero_hz, pole_hz, name=name)


# ============================================================================ from a controller
def pid_from_controller(controller) -> PidSettings | None:
    """The PID settings of ``controller`` when it is one (P, PI, PD, PID; with or without a
    derivative filter; either action), else ``None`` — :func:`why_not_pid` says why.

    Setpoint weights are not visible in a feedback controller: the result has b = c = 1.
    """
    return _fit(controller)[0]


def why_not_pid(controller) -> str | None:
    """Why ``controller`` is not a PID in the parallel form here, or ``None`` when it is."""
    return _fit(controller)[1]


#: A real pole closer to the origin than this fraction of every other corner (rad/s) is read as
#: the PID's integrator: an integrator that leaks (an op-amp's finite open-loop gain puts the pole
#: at about ω_i/A; the high-gain amplifier our netlists write, A = 1e9, puts it ~9 decades down).
LEAK_RATIO = 1e-6


def leaky_integrator_pole(controller) -> float | None:
    """The pole (s, rad/s) of an integrator that leaks, or ``None``: an analog controller without
    a pole at s = 0 whose smallest pole is real and at most :data:`LEAK_RATIO` times the size of
    every other non-zero pole and zero. :func:`pid_from_controller` reads it as the integrator."""
    import numpy as np

    if controller.is_digital or controller.integrator_count() > 0 or controller.order < 1:
        return None
    poles = controller.poles()
    i = int(np.argmin(np.abs(poles)))
    p = poles[i]
    others = np.abs(np.concatenate([np.delete(poles, i), controller.zeros()]))
    others = others[others > 0]
    if abs(p.imag) > 0 or others.size == 0 or not abs(p) <= LEAK_RATIO * others.min():
        return None
    return float(p.real)


def without_leak(controller):
    """``controller`` with the pole of a leaking integrator (:func:`leaky_integrator_pole`) moved
    to s = 0; the controller itself when it has none."""
    import numpy as np

    if leaky_integrator_pole(controller) is None:
        return controller
    # imported here, not at the top: `loopshift --help` imports this module; at the top it would add convert.controller, convert.expr, convert.limits, convert.polyroots to the help's start-up
    from convert.controller import Controller

    poles = controller.poles()
    rest = np.delete(poles, int(np.argmin(np.abs(poles))))
    den = np.real(np.poly(np.concatenate([rest, [0.0]])))
    return Controller.analog(controller.num, den, controller.name)


def _fit(controller) -> tuple[PidSettings | None, str | None]:
    import numpy as np

    if controller.is_digital:
        return None, "PID forms are read from analog controllers; this one is digital"
    controller = without_leak(controller)  # a leaking integrator is read as the integrator
    den = np.asarray(controller.den, dtype=float)
    num = np.asarray(controller.num, dtype=float)
    integrators = controller.integrator_count()
    if integrators > 1:
        return None, f"it has {integrators} integrators; a PID has at most one"
    rest = den
    if integrators == 1:
        rest, _ = np.polydiv(den, [1.0, 0.0])
    if len(rest) > 2:
        return None, f"it has {len(den) - 1} poles; a PID has an integrator and at most one filter pole"
    if len(rest) == 2:
        p = rest[1] / rest[0]
        if not p > 0:
            return None, f"its pole at s = {-p:.6g} is not a stable real filter pole"
        tf = 1.0 / p
    else:
        tf = 0.0
    # num has at most integrators + 2 coefficients (an unfiltered derivative makes it improper).
    max_num = integrators + 2
    if len(num) > max_num:
        return None, f"its numerator has degree {len(num) - 1}; this PID structure allows {max_num - 1}"
    # Exact match of sign·(kp + ki/s + kd·s/(tf·s+1)) with num/den (den monic):
    a = np.concatenate([np.zeros(max_num - len(num)), num])[::-1]  # ascending
    if integrators == 1 and tf > 0:
        ki = a[0] * tf
        kp, kp_size = (a[1] * tf - ki * tf), (abs(a[1]) * tf + abs(ki) * tf)
        kd, kd_size = (a[2] - kp) * tf, (abs(a[2]) + abs(kp)) * tf
    elif integrators == 1:
        ki, kp, kd = a[0], a[1], (a[2] if len(a) > 2 else 0.0)
        kp_size, kd_size = abs(kp), abs(kd)
    elif tf > 0:
        ki = 0.0
        kp, kp_size = a[0] * tf, abs(a[0]) * tf
        kd, kd_size = (a[1] - kp) * tf, (abs(a[1]) + abs(kp)) * tf
    else:
        ki = 0.0
        kp, kd = a[0], (a[1] if len(a) > 1 else 0.0)
        kp_size, kd_size = abs(kp), abs(kd)
    # Rounding noise from the subtraction is not a sign.
    kp = 0.0 if abs(kp) <= 1e-9 * kp_size else float(kp)
    kd = 0.0 if abs(kd) <= 1e-9 * kd_size else float(kd)
    ki = float(ki)
    gains = {"kp": kp, "ki": ki, "kd": kd}
    if all(g >= 0 for g in gains.values()):
        action = "reverse"
    elif all(g <= 0 for g in gains.values()):
        action = "direct"
        gains = {k: abs(g) for k, g in gains.items()}  # abs, not negation: no -0.0 in the settings
    elif tf > 0 and kd < 0 <= min(kp, ki) and kp + ki > 0:
        return None, (
            f"its derivative gain would be negative (kd = {kd:.6g} s): a P or PI followed by a low-pass "
            f"(tf = {tf:.6g} s), not a PID with a derivative filter"
        )
    else:
        listed = ", ".join(f"{k} = {v:.6g}" for k, v in gains.items())
        return None, f"its parallel gains have mixed signs ({listed}); a PID has one action (is it a lag or lead-lag?)"
    if tf > 0 and gains["kd"] == 0:
        return None, f"it has a filter pole (tf = {tf:.6g} s) but no derivative term (a PI or P with a low-pass)"
    try:
        return PidSettings(gains["kp"], gains["ki"], gains["kd"], tf, 1.0, 1.0, action), None
    except InputError as exc:  # pragma: no cover - guarded above
        return None, exc.message


# ============================================================================ words and mappings
def pid_from_words(words: Sequence[str], where: str = "pid") -> PidSettings:
    """Read ``--pid`` words such as ``["kc=2", "ti=30s", "td=5s", "n=10"]`` (keys in :data:`PID_KEYS`).

    Every problem raises :class:`InputError` naming ``where`` and the key.
    """
    mapping: dict[str, str] = {}
    for word in words:
        if "=" not in word:
            hint = "; a value with a space must be quoted, e.g. 'ti=30 s'" if mapping else ""
            raise InputError(f"expected KEY=VALUE (e.g. kc=2), found {word!r}{hint}", where=where)
        key, _, value = word.partition("=")
        key = key.strip().lower()
        if not key:
            raise InputError(f"expected KEY=VALUE, found {word!r} with no key", where=where)
        if key in mapping:
            raise InputError(f"given twice ({key}={mapping[key]} and {key}={value})", where=where, key=key)
        if value.strip() == "":
            raise InputError(
                f"no value after '=' (write it without spaces, e.g. {key}=2, or quote it)", where=where, key=key
            )
        mapping[key] = value
    return pid_from_mapping(mapping, where)


def pid_from_mapping(mapping: Mapping[str, Any], where: str = "pid") -> PidSettings:
    """Read PID settings from a mapping with the keys of :data:`PID_KEYS` (values as text with
    units, e.g. ``"30s"``, or as numbers in the key's default unit). Used by case files."""
    if not isinstance(mapping, Mapping):
        raise InputError(f"expected a table of PID settings, found {type(mapping).__name__}", where=where)
    data: dict[str, Any] = {}
    for raw_key, value in mapping.items():
        key = str(raw_key).strip().lower()
        if key not in PID_KEYS:
            import difflib

            close = difflib.get_close_matches(key, PID_KEYS, n=1, cutoff=0.5)
            hint = f"; did you mean {close[0]}?" if close else ""
            raise InputError(f"unknown key{hint} (keys: {', '.join(PID_KEYS)})", where=where, key=key)
        if key in data:
            raise InputError("given twice", where=where, key=key)
        if isinstance(value, bool) or value is None:
            raise InputError(f"expected a value, found {value!r}", where=where, key=key)
        data[key] = value
    if not data:
        raise InputError("no PID settings given; e.g. kc=2 ti=30s td=5s", where=where)
    try:
        return _settings_from(data, where)
    except InputError as exc:
        if exc.where:
            raise
        raise InputError(exc.message, where=where, key=exc.key) from None


def _value(data: Mapping[str, Any], key: str, kind: str, where: str) -> float:
    # imported here, not at the top: `loopshift --help` imports this module; at the top it would add convert.limits, convert.values to the help's start-up
    from convert.values import parse_value

    try:
        if kind == "fraction":  # a percentage field: "50 %" or a fraction; a bare 50 is refused (both readings)
            # imported here, not at the top: `loopshift --help` imports this module; at the top it would add convert.limits, convert.values to the help's start-up
            from convert.values import parse_fraction

            return parse_fraction(data[key], field=key)
        value = parse_value(data[key], kind, field=key)
        if kind == "percent" and not str(data[key]).strip().endswith("%") and 0 < value <= 1:
            # a bare number is a percentage here; at or below 1 it may be a fraction meant as 100x that
            raise InputError(
                f"{str(data[key]).strip()} is ambiguous: as a percentage it is {value:g} %, as a fraction "
                f"{value * 100:g} %; write {key}={value:g}% or {key}={value * 100:g}%",
                key=key,
            )
        return value
    except InputError as exc:
        raise InputError(exc.message, where=where, key=key) from None


def _rate(data: Mapping[str, Any], key: str, bare_per_s: float, where: str) -> float:
    """A rate in 1/s from ``"2/min"``, ``"0.1/s"``, ``"2 repeats/min"`` or a bare number (× bare_per_s)."""
    import re

    # imported here, not at the top: `loopshift --help` imports this module; at the top it would add convert.limits, convert.values to the help's start-up
    from convert.values import parse_value

    text = data[key]
    try:
        if isinstance(text, str) and "/" in text:
            left, _, right = text.partition("/")
            if key != "reset" and re.search(r"repeats?\s*$", left.strip()):
                # repeats per minute is a reset rate (1/Ti); as ki it would silently drop the gain
                raise InputError(
                    f"'repeats' belong to a reset rate; write reset={text.strip()} (Ti = 1/reset) "
                    f"or ki as a gain per time, e.g. ki=6/min",
                    key=key,
                )
            left = re.sub(r"\s*repeats?\s*$", "", left.strip())
            count = parse_value(left, "number", field=key)
            right = right.strip()
            period = parse_value(
                right if right[:1].isdigit() or right[:1] == "." else f"1 {right}", "second", field=key
            )
            if period <= 0:
                raise InputError(f"the time after '/' must be positive, found {right!r}", key=key)
            return count / period
        return parse_value(text, "number", field=key) * bare_per_s
    except InputError as exc:
        raise InputError(exc.message, where=where, key=key) from None


def _positive(value: float, key: str, where: str, *, allow_zero: bool = False, hint: str = "") -> float:
    if value < 0 or (value == 0 and not allow_zero):
        bound = "zero or positive" if allow_zero else "positive"
        raise InputError(f"must be {bound}, found {value:g}{hint}", where=where, key=key)
    return value


_SIGN_HINT = "; gains are positive and the sign is set by action=direct"


def _settings_from(data: dict[str, Any], where: str) -> PidSettings:
    form = None
    if "form" in data:
        text = str(data["form"]).strip().lower()
        text = FORM_ALIASES.get(text, text)
        if text not in FORMS:
            import difflib

            close = difflib.get_close_matches(text, list(FORMS) + list(FORM_ALIASES), n=1)
            hint = f"; did you mean {close[0]}?" if close else ""
            raise InputError(
                f"expected parallel, ideal or series, found {data['form']!r}{hint}", where=where, key="form"
            )
        form = text
    action = "reverse"
    if "action" in data:
        action = str(data["action"]).strip().lower()
        if action not in ACTIONS:
            raise InputError(f"expected reverse or direct, found {data['action']!r}", where=where, key="action")

    par = [k for k in _PARALLEL_KEYS if k in data]
    std = [k for k in _FORM_KEYS if k in data]
    if par and std:
        raise InputError(
            f"{par[0]} belongs to the parallel form and {std[0]} to the ideal/series forms; use one form's keys",
            where=where,
            key=par[0],
        )
    if form is None:
        form = "parallel" if par else "ideal"
    if form == "parallel" and std:
        raise InputError(
            f"form=parallel takes kp, ki, kd; {std[0]} belongs to the ideal/series forms", where=where, key=std[0]
        )
    if form != "parallel" and par:
        raise InputError(
            f"form={form} takes kc (or pb), ti (or reset), td; {par[0]} belongs to the parallel form",
            where=where,
            key=par[0],
        )
    for a, b_ in (("kc", "pb"), ("ti", "reset"), ("n", "tf")):
        if a in data and b_ in data:
            raise InputError(f"conflicting: give {a} or {b_}, not both", where=where, key=b_)

    b = _positive(_value(data, "b", "fraction", where), "b", where, allow_zero=True) if "b" in data else 1.0
    c = _positive(_value(data, "c", "fraction", where), "c", where, allow_zero=True) if "c" in data else 1.0
    n = _positive(_value(data, "n", "number", where), "n", where) if "n" in data else None
    tf = _positive(_value(data, "tf", "second", where), "tf", where, allow_zero=True) if "tf" in data else None

    if form == "parallel":
        if not par:
            raise InputError(
                "missing gains: give at least one of kp, ki, kd (e.g. kp=2 ki=0.1/s)", where=where, key="kp"
            )
        kp = (
            _positive(_value(data, "kp", "number", where), "kp", where, allow_zero=True, hint=_SIGN_HINT)
            if "kp" in data
            else 0.0
        )
        ki = (
            _positive(_rate(data, "ki", 1.0, where), "ki", where, allow_zero=True, hint=_SIGN_HINT)
            if "ki" in data
            else 0.0
        )
        kd = (
            _positive(_value(data, "kd", "second", where), "kd", where, allow_zero=True, hint=_SIGN_HINT)
            if "kd" in data
            else 0.0
        )
        if kp == 0 and ki == 0 and kd == 0:
            raise InputError("all gains are zero; a PID needs at least one non-zero gain", where=where, key=par[0])
        filter_key = "n" if n is not None else ("tf" if tf else None)
        if filter_key and kd == 0:
            raise InputError("a derivative filter needs a derivative gain (kd)", where=where, key=filter_key)
        if n is not None:
            if kp == 0:
                raise InputError(
                    "n in the parallel form means tf = kd/(kp·n) and needs kp > 0; give tf instead",
                    where=where,
                    key="n",
                )
            tf_s = kd / (kp * n)
        else:
            tf_s = tf or 0.0
        return PidSettings(kp, ki, kd, tf_s, b, c, action)

    if "kc" in data:
        kc = _positive(_value(data, "kc", "number", where), "kc", where, hint=_SIGN_HINT)
    elif "pb" in data:
        kc = 100.0 / _positive(_value(data, "pb", "percent", where), "pb", where, hint=_SIGN_HINT)
    else:
        raise InputError(f"missing the gain of the {form} form: give kc=... or pb=...%", where=where, key="kc")
    ti = None
    if "ti" in data:
        ti = _positive(_value(data, "ti", "second", where), "ti", where, hint="; leave ti out for no integral action")
    elif "reset" in data:
        rate = _positive(
            _rate(data, "reset", 1.0 / 60.0, where), "reset", where, hint="; leave reset out for no integral action"
        )
        ti = 1.0 / rate
    td = _positive(_value(data, "td", "second", where), "td", where, allow_zero=True) if "td" in data else 0.0
    if (n is not None or tf) and td == 0:
        raise InputError(
            "a derivative filter needs a derivative time (td)", where=where, key="n" if n is not None else "tf"
        )
    builder = PidSettings.from_ideal if form == "ideal" else PidSettings.from_series
    try:
        return builder(kc, ti, td, n=n, tf_s=tf if n is None else None, b=b, c=c, action=action)
    except (InputError, UnrealizableError) as exc:
        raise InputError(exc.message, where=where, key=exc.key) from None


def describe_keys() -> str:
    """Help text listing every --pid key (for argparse epilogs and docs)."""
    return "\n".join(f"  {key:<7} {text}" for key, text in PID_KEYS.items())
