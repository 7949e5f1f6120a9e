"""The canonical controller: one SISO linear controller, analog or digital.

Conventions
-----------
* ``num`` and ``den`` are real coefficients in **descending** powers of the variable (``s``
  for analog, ``z`` for digital), as numpy and python-control write them. ``den`` is monic.
* A digital controller also offers ``b`` and ``a``: the firmware convention, ascending powers
  of z^-1 with ``a[0] == 1`` (both padded to the same length).
* The domain is explicit (``"analog"`` or ``"digital"``); a digital controller carries its
  sample period ``sample_period_s`` (seconds) — never a magic value.
* Sign: the transfer function is from error (setpoint − measurement) to output.
* Frequencies at every interface are in Hz; angular frequency ``w`` is rad/s.

The object is immutable. Heavy libraries are not imported here: python-control is loaded only
by :meth:`Controller.to_control` / :meth:`Controller.from_control`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import cached_property
from typing import Literal
from collections.abc import Sequence

import numpy as np

from convert.errors import InputError
from convert.polyroots import expand, Root, count_at, deflate, find_roots
from convert.expr import format_polynomial, parse_rational

Domain = Literal["analog", "digital"]


def _as_coefficients(values: Sequence[float], what: str) -> tuple[float, ...]:
    try:
        raw = np.atleast_1d(np.asarray(values))
    except (TypeError, ValueError):  # ragged nesting and the like
        raise InputError(f"expected a flat list of real numbers, found {values!r}", key=what) from None
    if np.iscomplexobj(raw):
        if np.any(raw.imag != 0):
            raise InputError(
                f"coefficients must be real numbers, found {[complex(x) for x in raw]}; a real controller has "
                "real coefficients (complex roots come in conjugate pairs)",
                key=what,
            )
        raw = raw.real
    try:
        arr = np.atleast_1d(np.asarray(raw, dtype=float))
    except (TypeError, ValueError):
        raise InputError(f"expected a flat list of real numbers, found {values!r}", key=what) from None
    if arr.ndim != 1 or arr.size == 0:
        raise InputError(f"expected a non-empty list of numbers, found {values!r}", key=what)
    if not np.all(np.isfinite(arr)):
        raise InputError(f"coefficients must be finite numbers, found {list(arr)}", key=what)
    nz = np.flatnonzero(arr)
    if nz.size == 0:
        raise InputError("the polynomial is identically zero", key=what)
    _check_range(arr, what)
    return tuple(float(x) for x in arr[nz[0] :])


_TINY = float(np.finfo(float).tiny)  # smallest normal double, about 2.2e-308


def _check_range(arr: np.ndarray, what: str, after: str = "") -> None:
    """Refuse coefficients that overflowed (inf) or sit below the normal range (subnormal: digits
    already lost, and the next operation underflows to 0)."""
    if not np.all(np.isfinite(arr)):
        raise InputError(
            f"a coefficient{after} is too large for a floating-point number (beyond about 1.8e308)", key=what
        )
    small = arr[(arr != 0) & (np.abs(arr) < _TINY)]
    if small.size:
        raise InputError(
            f"a coefficient{after} is too small for a floating-point number ({small[0]:.3g}, below "
            "about 2.2e-308); rescale the controller (time in other units) or drop the term",
            key=what,
        )


@dataclass(frozen=True)
class Controller:
    """A SISO linear controller, continuous (``analog``) or sampled (``digital``).

    Build one with :meth:`analog`, :meth:`digital`, :meth:`from_b_a`, :meth:`from_zpk` or
    :meth:`from_control` rather than the raw constructor; they validate and normalise.
    """

    num: tuple[float, ...]
    den: tuple[float, ...]
    domain: Domain = "analog"
    sample_period_s: float | None = None
    name: str = field(default="", compare=False)

    # ------------------------------------------------------------------ construction
    def __post_init__(self) -> None:
        if self.domain not in ("analog", "digital"):
            raise InputError(f"domain must be 'analog' or 'digital', found {self.domain!r}", key="domain")
        if self.domain == "digital":
            t = self.sample_period_s
            if t is None or not (isinstance(t, (int, float)) and math.isfinite(t) and t > 0):
                raise InputError(
                    f"a digital controller needs a positive sample period, found {t!r}", key="sample period"
                )
        elif self.sample_period_s is not None:
            raise InputError("an analog controller has no sample period", key="sample period")
        num = _as_coefficients(self.num, "numerator")
        den = _as_coefficients(self.den, "denominator")
        lead = den[0]
        # "+ 0.0" turns a negative zero (e.g. -0.0 / 1) into 0.0, so no "-0" is ever printed
        with np.errstate(all="ignore"):
            num_n = np.asarray(num) / lead
            den_n = np.asarray(den) / lead
        after = " (after dividing by the denominator's leading coefficient)"
        _check_range(num_n, "numerator", after)
        _check_range(den_n, "denominator", after)
        if not np.any(num_n):
            raise InputError(
                f"every numerator coefficient{after} is too small for a floating-point number", key="numerator"
            )
        object.__setattr__(self, "num", tuple(float(c) + 0.0 for c in num_n))
        object.__setattr__(self, "den", tuple(float(c) + 0.0 for c in den_n))

    @classmethod
    def analog(cls, num: Sequence[float], den: Sequence[float], name: str = "") -> Controller:
        """Analog controller from coefficients in descending powers of s."""
        return cls(tuple(num), tuple(den), "analog", None, name)

    @classmethod
    def digital(cls, num: Sequence[float], den: Sequence[float], sample_period_s: float, name: str = "") -> Controller:
        """Digital controller from coefficients in descending powers of z."""
        return cls(tuple(num), tuple(den), "digital", float(sample_period_s), name)

    @classmethod
    def from_b_a(cls, b: Sequence[float], a: Sequence[float], sample_period_s: float, name: str = "") -> Controller:
        """Digital controller from firmware coefficients: ascending powers of z^-1.

        ``C(z) = (b0 + b1 z^-1 + ...) / (a0 + a1 z^-1 + ...)``. Multiplying through by z^n
        (n = the longer length − 1) gives the descending-z form.
        """
        b_arr = np.asarray(b, dtype=float).ravel()
        a_arr = np.asarray(a, dtype=float).ravel()
        if a_arr.size == 0 or a_arr[0] == 0:
            raise InputError("a[0] must be non-zero (the coefficient of the newest output)", key="a")
        n = max(b_arr.size, a_arr.size)
        b_full = np.concatenate([b_arr, np.zeros(n - b_arr.size)])
        a_full = np.concatenate([a_arr, np.zeros(n - a_arr.size)])
        return cls.digital(tuple(b_full), tuple(a_full), sample_period_s, name)

    @classmethod
    def from_zpk(
        cls,
        zeros: Sequence[complex],
        poles: Sequence[complex],
        gain: float,
        domain: Domain = "analog",
        sample_period_s: float | None = None,
        name: str = "",
    ) -> Controller:
        """Controller from zeros, poles (complex pairs must be conjugate) and the zpk gain k."""
        num = np.real_if_close(gain * np.poly(np.asarray(zeros, dtype=complex)), tol=1e6)
        den = np.real_if_close(np.poly(np.asarray(poles, dtype=complex)), tol=1e6)
        if np.iscomplexobj(num) or np.iscomplexobj(den):
            raise InputError("complex zeros and poles must come in conjugate pairs", key="zeros/poles")
        return cls(tuple(np.atleast_1d(num)), tuple(np.atleast_1d(den)), domain, sample_period_s, name)

    # ------------------------------------------------------------------ basic properties
    @property
    def is_digital(self) -> bool:
        return self.domain == "digital"

    @property
    def fs_hz(self) -> float | None:
        """Sample rate in Hz (digital only)."""
        return None if self.sample_period_s is None else 1.0 / self.sample_period_s

    @property
    def variable(self) -> str:
        return "z" if self.is_digital else "s"

    @property
    def relative_degree(self) -> int:
        """Number of poles minus number of zeros (negative: improper)."""
        return (len(self.den) - 1) - (len(self.num) - 1)

    @property
    def is_proper(self) -> bool:
        return self.relative_degree >= 0

    @property
    def is_strictly_proper(self) -> bool:
        return self.relative_degree > 0

    @property
    def order(self) -> int:
        return len(self.den) - 1

    def zeros(self) -> np.ndarray:
        """Finite zeros (s or z plane), each repeated by its multiplicity, as a complex array (a
        fresh copy each call). See :meth:`zero_roots` for multiplicities and accuracies."""
        return expand(self.zero_roots())

    def poles(self) -> np.ndarray:
        """Poles (s or z plane), each repeated by its multiplicity, as a complex array (a fresh copy
        each call). See :meth:`pole_roots` for multiplicities and accuracies."""
        return expand(self.pole_roots())

    def zero_roots(self) -> tuple:
        """Distinct zeros as :class:`convert.polyroots.Root` (value, multiplicity, accuracy)."""
        return self._root_sets[0]

    def pole_roots(self) -> tuple:
        """Distinct poles as :class:`convert.polyroots.Root` (value, multiplicity, accuracy)."""
        return self._root_sets[1]

    @property
    def special_points(self) -> tuple[float, ...]:
        """Points whose roots are counted exactly: s = 0 (analog); z = 1 and z = −1 (digital)."""
        return (1.0, -1.0) if self.is_digital else (0.0,)

    @cached_property
    def _expanded_roots(self) -> tuple[tuple[complex, ...], tuple[complex, ...]]:
        """(zeros, poles) repeated by multiplicity, as the factors :meth:`frequency_response`
        multiplies in (kept once: the grid-free maxima evaluate one frequency at a time)."""
        return tuple(self.zeros()), tuple(self.poles())

    # The object is immutable, so its roots are computed once (conversions ask for them often).
    @cached_property
    def _root_sets(self) -> tuple[tuple, tuple]:
        """(zeros, poles) as Root tuples. Roots at the special points are counted by the relative
        rule of :func:`convert.polyroots.count_at` and divided out exactly (error 0); the rest are
        found with multiplicity (:func:`convert.polyroots.find_roots`)."""
        rough = {
            "num": np.roots(self.num) if len(self.num) > 1 else np.zeros(0),
            "den": np.roots(self.den) if len(self.den) > 1 else np.zeros(0),
        }
        out = []
        for part, other in (("num", "den"), ("den", "num")):
            p = np.asarray(getattr(self, part), dtype=float)
            exact = []
            for point in self.special_points:
                m = count_at(p, point, rough[other], rounding=self.is_digital)
                for _ in range(m):
                    p = deflate(p, point)
                if m:
                    exact.append(Root(complex(point), m, 0.0))
            out.append(tuple(exact) + find_roots(p))
        return out[0], out[1]

    @property
    def gain(self) -> float:
        """The zpk gain k: ratio of the leading coefficients (num[0] / den[0], den is monic)."""
        return self.num[0]

    def integrator_count(self) -> int:
        """Poles at s = 0 (analog) or z = 1 (digital), counted with multiplicity.

        "At" is decided relative to the controller's own scales, not by an absolute threshold: a
        pole counts when the denominator vanishes there exactly (digital: to within a few
        rounding errors), or when it is 10^12 times closer to the point than every other zero and
        pole (:func:`convert.polyroots.count_at`). So ``(s+1e-13)/(s+1e-14)`` is not integrating
        (its DC gain is 10)."""
        point = 1.0 if self.is_digital else 0.0
        return sum(r.multiplicity for r in self.pole_roots() if r.error == 0 and r.value == point)

    @property
    def is_integrating(self) -> bool:
        return self.integrator_count() > 0

    def dc_gain(self) -> float | None:
        """Gain at zero frequency, or ``None`` for an integrating controller (infinite)."""
        if self.is_integrating:
            return None
        point = 1.0 if self.is_digital else 0.0
        if any(r.error == 0 and r.value == point for r in self.zero_roots()):
            return 0.0
        return float(np.polyval(self.num, point) / np.polyval(self.den, point))

    def high_frequency_gain(self) -> float | None:
        """Gain as f -> infinity (analog, proper only): num[0]/den[0] when degrees match, 0 when
        strictly proper, ``None`` when improper (it grows without bound)."""
        if self.is_digital:
            raise InputError("high-frequency gain is defined here for analog controllers only")
        if not self.is_proper:
            return None
        if self.relative_degree > 0:
            return 0.0
        return float(self.num[0])

    # ------------------------------------------------------------------ firmware form
    @property
    def b(self) -> tuple[float, ...]:
        """Numerator in ascending powers of z^-1 (digital only), normalised so a[0] = 1."""
        return self._b_a()[0]

    @property
    def a(self) -> tuple[float, ...]:
        """Denominator in ascending powers of z^-1 (digital only), a[0] = 1."""
        return self._b_a()[1]

    def _b_a(self) -> tuple[tuple[float, ...], tuple[float, ...]]:
        if not self.is_digital:
            raise InputError("b/a coefficients exist for a digital controller only; convert it first")
        if not self.is_proper:
            raise InputError("this digital controller is improper (non-causal): it needs future inputs")
        n = len(self.den)
        b = (0.0,) * (n - len(self.num)) + self.num
        return tuple(b), tuple(self.den)

    # ------------------------------------------------------------------ responses
    def frequency_response(self, f_hz: Sequence[float] | float, *, via: Literal["poly", "zpk"] = "poly") -> np.ndarray:
        """Complex response at the frequencies ``f_hz`` (Hz).

        Analog: C(j 2π f). Digital: C(e^{j 2π f T}). ``via="zpk"`` evaluates the factored form,
        which stays accurate when coefficients span many decades (high fs / corner ratios).
        """
        f = np.asarray(f_hz, dtype=float)
        w = 2.0 * np.pi * f
        x = np.exp(1j * w * self.sample_period_s) if self.is_digital else 1j * w
        # Exactly at a pole on the axis (an integrator at f = 0) the response is infinite: inf is
        # the right answer there, not a warning.
        with np.errstate(divide="ignore", invalid="ignore"):
            if via == "zpk":
                zeros, poles = self._expanded_roots
                resp = np.full(x.shape, self.gain, dtype=complex)
                for zr in zeros:
                    resp = resp * (x - zr)
                for pl in poles:
                    resp = resp / (x - pl)
                return resp
            return np.polyval(self.num, x) / np.polyval(self.den, x)

    def corner_frequencies_hz(self) -> dict[str, list[float]]:
        """Corner frequencies in Hz of the non-integrating zeros and poles.

        Analog: |root| / 2π. Digital: |ln(root)| / (2π T) (the equivalent analog corner).
        Roots exactly at the origin (analog) or at z = 1 (digital) and at z = 0 are left out (see
        :meth:`integrator_count` for "exactly"). Complex pairs are listed once; a repeated root
        once per multiplicity.
        """
        return {label: list(values) for label, values in self._corners.items()}

    @cached_property
    def _corners(self) -> dict[str, list[float]]:
        out: dict[str, list[float]] = {}
        for label, roots in (("zeros", self.zero_roots()), ("poles", self.pole_roots())):
            values: list[float] = []
            for root in roots:
                r = root.value
                exact = root.error == 0
                if r.imag < 0 or (exact and r == (1.0 if self.is_digital else 0.0)) or (exact and r == 0):
                    continue
                if self.is_digital:
                    corner = abs(np.log(complex(r)) / self.sample_period_s) / (2 * np.pi)
                else:
                    corner = abs(r) / (2 * np.pi)
                values += [float(corner)] * root.multiplicity
            out[label] = sorted(values)
        return out

    # ------------------------------------------------------------------ python-control adapters
    def to_control(self):
        """The same controller as a python-control ``TransferFunction`` (dt = sample period
        for digital, 0 for analog)."""
        import control  # lazy: costs about a second

        dt = self.sample_period_s if self.is_digital else 0
        return control.tf(list(self.num), list(self.den), dt)

    @classmethod
    def from_control(cls, system, name: str = "") -> Controller:
        """Build from a python-control SISO ``TransferFunction`` (or anything with ``num``/``den``
        lists and ``dt``). ``dt = 0`` is analog; a positive ``dt`` is digital; ``dt = True``
        (unspecified period) is refused because the sample period matters."""
        try:
            num = np.asarray(system.num[0][0], dtype=float)
            den = np.asarray(system.den[0][0], dtype=float)
            dt = system.dt
        except (AttributeError, IndexError, TypeError) as exc:
            raise InputError(f"expected a SISO python-control TransferFunction, found {type(system).__name__}") from exc
        if getattr(system, "ninputs", 1) != 1 or getattr(system, "noutputs", 1) != 1:
            raise InputError("only single-input single-output systems are controllers here")
        if dt is None or dt == 0:
            return cls.analog(num, den, name)
        if dt is True:
            raise InputError("the system is discrete with an unspecified sample period (dt=True); give dt in seconds")
        return cls.digital(num, den, float(dt), name)

    # ------------------------------------------------------------------ small conveniences
    def with_name(self, name: str) -> Controller:
        return Controller(self.num, self.den, self.domain, self.sample_period_s, name)

    def scaled(self, factor: float) -> Controller:
        """The controller multiplied by a constant (e.g. -1 for the action sign)."""
        return Controller(tuple(factor * c for c in self.num), self.den, self.domain, self.sample_period_s, self.name)

    def series(self, other: Controller) -> Controller:
        """Product C·other (same domain and sample period)."""
        self._same_domain(other)
        return Controller(
            tuple(np.polymul(self.num, other.num)),
            tuple(np.polymul(self.den, other.den)),
            self.domain,
            self.sample_period_s,
            self.name,
        )

    def _same_domain(self, other: Controller) -> None:
        if self.domain != other.domain or self.sample_period_s != other.sample_period_s:
            raise InputError("both controllers must share a domain and sample period")

    def expression(self, digits: int = 6) -> str:
        """The transfer function as text the expression grammar reads back."""
        num = format_polynomial(self.num, self.variable, digits)
        den = format_polynomial(self.den, self.variable, digits)
        if den == "1":
            return num
        return f"({num}) / ({den})"


def _magnitude(value) -> str:
    """1e+400-style order of magnitude of an exact rational (it may be beyond any float)."""
    from fractions import Fraction

    v = abs(Fraction(value))
    exponent = len(str(v.numerator)) - len(str(v.denominator))
    return f"1e{exponent:+d}"


def from_expression(text: str, *, fs_hz: float | None = None, label: str = "expression", name: str = "") -> Controller:
    """Read a controller from an expression in ``s`` or in ``z`` / ``z^-1``.

    A ``z`` expression needs ``fs_hz`` (the sample rate in Hz). A constant expression is analog
    unless ``fs_hz`` is given.
    """
    parsed = parse_rational(text, label=label)
    # Normalise exactly (den monic, in rationals) so the floats below are the ones the controller
    # keeps; then a non-zero coefficient that is infinite, zero or subnormal in double is refused.
    lead = parsed.den[0]
    exact = [c / lead for c in parsed.num], [c / lead for c in parsed.den]
    converted = []
    for values in exact:
        row = []
        for c in values:
            try:
                f = float(c)
            except OverflowError:
                f = math.inf
            if not math.isfinite(f):
                raise InputError(
                    f"a coefficient is too large for a floating-point number (about {_magnitude(c)}, "
                    "beyond about 1.8e308, with the denominator's leading coefficient 1)",
                    where=label,
                )
            if c != 0 and abs(f) < _TINY:
                raise InputError(
                    f"a coefficient is too small for a floating-point number (about {_magnitude(c)}, "
                    "below about 2.2e-308, with the denominator's leading coefficient 1); rescale the "
                    "controller or drop the term",
                    where=label,
                )
            row.append(f)
        converted.append(row)
    num, den = converted
    if parsed.variable == "z" or (parsed.variable is None and fs_hz is not None):
        if fs_hz is None:
            raise InputError(
                "an expression in z needs a sample rate: give the sample rate fs in Hz",
                where=label,
                settings=("sample rate fs",),
            )
        if not (math.isfinite(fs_hz) and fs_hz > 0):
            raise InputError(f"the sample rate must be positive, found {fs_hz!r}", key="fs")
        return Controller.digital(num, den, 1.0 / fs_hz, name)
    return Controller.analog(num, den, name)
