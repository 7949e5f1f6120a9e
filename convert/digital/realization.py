"""``discretize``: an analog controller turned into a digital one by a named method, with the
warnings a firmware engineer needs.

Coefficient convention: ascending powers of z^-1 with a[0] = 1 (the firmware form),
``C(z) = (b0 + b1 z^-1 + ...) / (1 + a1 z^-1 + ...)``. The difference equation is
``u[n] = b0·e[n] + b1·e[n−1] + ... − a1·u[n−1] − ...`` with e the error input and u the output.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np

from convert.controller import Controller
from convert.digital import forward
from convert.digital import statespace as ss
from convert.digital.roots import RootForm
from convert.errors import InputError, UnrealizableError
from convert.jsonable import roots_json
from convert.methods import METHODS
from convert.polyroots import format_root
from convert.compare.frequency import comparison_grid, default_band_hz


# The direct-form polynomial is said to lose accuracy when its response departs from the
# zeros/poles form by more than this relative amount anywhere in the default band.
POLY_ACCURACY_LIMIT = 1e-6


@dataclass(frozen=True)
class DigitalRealization:
    """A digital controller made from an analog one.

    ``controller`` is the digital :class:`Controller` (its ``b``/``a`` are the firmware
    coefficients); ``zeros_z``/``poles_z``/``gain_z`` are its zeros, poles and zpk gain in z,
    computed directly by the method (accurate even where ``b``/``a`` lose digits). ``warnings``
    are things to act on; ``notes`` say what was chosen for the user (e.g. where matched gain
    was matched). ``fs_hz`` in Hz; ``prewarp_hz`` / ``match_at_hz`` in Hz or None.
    """

    controller: Controller
    method: str
    fs_hz: float
    prewarp_hz: float | None
    warnings: tuple[str, ...]
    source: Controller
    roots: RootForm
    notes: tuple[str, ...] = ()
    match_at_hz: float | None = None
    keep_delay: bool = False
    filter_note: str | None = field(default=None, compare=False)

    @property
    def b(self) -> tuple[float, ...]:
        return self.controller.b

    @property
    def a(self) -> tuple[float, ...]:
        return self.controller.a

    @property
    def zeros_z(self) -> tuple[complex, ...]:
        return self.roots.zeros

    @property
    def poles_z(self) -> tuple[complex, ...]:
        return self.roots.poles

    @property
    def gain_z(self) -> float:
        return self.roots.gain

    @property
    def difference_equation(self) -> str:
        return difference_equation(self.b, self.a)

    def frequency_response(self, f_hz, *, via: str = "roots") -> np.ndarray:
        """C_d(e^{j2πfT}) at f_hz (Hz): ``via="roots"`` from the directly mapped zeros/poles,
        ``"poly"`` from b/a as firmware would compute it, ``"zpk"`` from roots of b/a."""
        if via == "roots":
            return self.roots.frequency_response(f_hz)
        return self.controller.frequency_response(f_hz, via=via)

    def summary(self) -> dict:
        """Plain data for JSON: method, fs_hz, b, a, prewarp_hz (when used), roots, text."""
        out = {"method": self.method, "fs_hz": self.fs_hz, "b": list(self.b), "a": list(self.a)}
        if self.prewarp_hz is not None and self.method == "tustin":
            out["prewarp_hz"] = self.prewarp_hz
        if self.match_at_hz is not None:
            out["match_at_hz"] = self.match_at_hz
        out.update(
            {
                "zeros_z": roots_json(self.roots.zeros),
                "poles_z": roots_json(self.roots.poles),
                "gain_z": self.roots.gain,
                "difference_equation": self.difference_equation,
                "warnings": list(self.warnings),
                "notes": list(self.notes),
            }
        )
        return out


def _fmt(x: float) -> str:
    return format(float(x), ".12g")


def difference_equation(b, a, input_name: str = "e", output_name: str = "u") -> str:
    """``u[n] = b0 e[n] + b1 e[n-1] ... - a1 u[n-1] ...`` (terms with a zero coefficient left out)."""
    terms = []
    for k, coef in enumerate(b):
        if coef != 0:
            terms.append((coef, f"{input_name}[n]" if k == 0 else f"{input_name}[n-{k}]"))
    for k, coef in enumerate(a[1:], start=1):
        if coef != 0:
            terms.append((-coef, f"{output_name}[n-{k}]"))
    if not terms:
        return f"{output_name}[n] = 0"
    text = ""
    for i, (coef, sym) in enumerate(terms):
        if i == 0:
            text = f"{_fmt(coef)}*{sym}"
        else:
            text += f" {'-' if coef < 0 else '+'} {_fmt(abs(coef))}*{sym}"
    return f"{output_name}[n] = {text}"


def _check_rate(value, key: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(f"expected a positive frequency in Hz, found {value!r}", key=key) from None
    if not (math.isfinite(v) and v > 0):
        raise InputError(f"expected a positive frequency in Hz, found {value!r}", key=key)
    return v


# e^x overflows a double for x > 709.78; a pole whose sampled image e^{pT} is near that has no
# finite digital form (and is far outside any sensible controller at this rate).
_MAX_EXPONENT = 700.0


def _refuse_overflowing_poles(controller: Controller, t: float) -> None:
    for p in controller.poles():
        if p.real * t > _MAX_EXPONENT:
            raise UnrealizableError(
                f"the pole at s = {p.real:.6g}{p.imag:+.6g}j rad/s grows by e^{p.real * t:.4g} per sample at this "
                "sample rate, beyond any finite number; check the expression (a sign?) or raise the sample rate",
                key="controller",
            )


def _refuse_periods_beyond_precision(controller: Controller, fs: float) -> None:
    """A sample period longer than the controller's slowest time constant by more than the
    precision of a double (1/eps ≈ 4.5e15: ``--fs 1e-300Hz`` on 1/(s+1)) says nothing about the
    controller in floating point: e^{pT} of every pole is 0 by a margin of 1e15 in the exponent.
    Refused naming fs (it used to surface as NaN from the matrix exponential's overflow)."""
    t = 1.0 / fs
    corners = [abs(complex(r)) for r in (*controller.poles(), *controller.zeros()) if r != 0]
    if corners and min(corners) * t > 1.0 / np.finfo(float).eps:
        raise InputError(
            f"at fs = {fs:.6g} Hz the sample rate is too far from the controller's corners (one sample period is "
            f"{min(corners) * t:.3g} times its slowest time constant, beyond the precision of a floating-point "
            "number); choose a sample rate near its corners",
            key="fs",
        )


@ss.small_dense
def discretize(
    controller: Controller,
    fs_hz: float,
    method: str,
    *,
    prewarp_hz: float | None = None,
    match_at_hz: float | None = None,
    keep_delay: bool = False,
) -> DigitalRealization:
    """The digital form of an analog ``controller`` at sample rate ``fs_hz`` (Hz) by ``method``
    (one of :data:`METHODS`). ``prewarp_hz`` (Hz) is used by ``tustin`` only; ``match_at_hz`` and
    ``keep_delay`` by ``matched`` only; giving them to another method adds a warning.

    Raises :class:`UnrealizableError` for an improper controller (more zeros than poles, e.g. an
    ideal PD): add a derivative filter first (:func:`convert.digital.add_derivative_filter`).
    """
    if not isinstance(controller, Controller):
        raise InputError(f"expected a Controller, found {type(controller).__name__}", key="controller")
    if controller.is_digital:
        raise InputError("the controller is already digital; give an analog controller", key="controller")
    fs = _check_rate(fs_hz, "fs")
    if method not in METHODS:
        raise InputError(f"unknown method {method!r}; expected one of {', '.join(METHODS)}", key="method")
    if not controller.is_proper:
        extra = -controller.relative_degree
        raise UnrealizableError(
            f"the controller is improper ({extra} more zero{'s' if extra > 1 else ''} than poles, e.g. an ideal PD/PID) "
            "and has no causal sampled form; add a derivative filter N, e.g. 10 "
            "(add_derivative_filter(controller, 10) from Python)",
            key="controller",
            settings=("derivative filter N",),
        )
    t = 1.0 / fs
    _refuse_overflowing_poles(controller, t)
    _refuse_periods_beyond_precision(controller, fs)
    warnings: list[str] = []
    if prewarp_hz is not None:
        prewarp_hz = _check_rate(prewarp_hz, "prewarp")
        if method == "tustin" and not prewarp_hz < fs / 2:
            raise InputError(
                f"the prewarp frequency must be below fs/2 = {fs / 2:.6g} Hz, found {prewarp_hz:.6g} Hz", key="prewarp"
            )
        if method != "tustin":
            warnings.append(f"{method}: prewarp {prewarp_hz:.6g} Hz ignored (only tustin uses a prewarp frequency)")
    if match_at_hz is not None:
        match_at_hz = _check_rate(match_at_hz, "match_at_hz")
        if method == "matched" and not match_at_hz < fs / 2:
            raise InputError(
                f"the gain-match frequency must be below fs/2 = {fs / 2:.6g} Hz, found {match_at_hz:.6g} Hz",
                key="match_at_hz",
            )
        if method != "matched":
            warnings.append(f"{method}: match_at_hz ignored (only matched uses it)")
    if keep_delay and method != "matched":
        warnings.append(f"{method}: keep_delay ignored (only matched uses it)")

    src = RootForm.of(controller)
    # an overflow or 0/0 here (fs far from every corner) shows as a non-finite root or gain,
    # refused just below with one line naming fs, not as a numpy warning before it
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        if method == "tustin":
            roots, notes = forward.tustin(controller, src, t, prewarp_hz)
        elif method == "matched":
            roots, notes = forward.matched(controller, src, t, match_at_hz, keep_delay)
        else:
            fn = {
                "zoh": forward.zoh,
                "foh": forward.foh,
                "impulse": forward.impulse,
                "forward-euler": forward.forward_euler,
                "backward-euler": forward.backward_euler,
            }[method]
            roots, notes = fn(controller, src, t)
    used_match = None
    if method == "matched" and (match_at_hz is not None or notes and "gain is matched at" in notes[-1]):
        used_match = match_at_hz if match_at_hz is not None else forward.default_match_frequency_hz(src, fs)[0]
    _refuse_non_finite(roots, fs, method)
    digital = roots.to_controller(name=f"{controller.name or 'controller'} ({method}, fs = {fs:.6g} Hz)")
    warnings.extend(_corner_warnings(controller, fs, method))
    warnings.extend(_stability_warnings(src, roots, fs, method))
    warnings.extend(_accuracy_warnings(controller, digital, roots, fs))
    return DigitalRealization(
        digital,
        method,
        fs,
        prewarp_hz if method == "tustin" else None,
        tuple(warnings),
        controller,
        roots,
        tuple(notes),
        used_match,
        keep_delay if method == "matched" else False,
    )


def _refuse_non_finite(roots, fs: float, method: str) -> None:
    """A sample rate so far from the controller's scales that the sampled form is not finite in
    floating point (``--fs 1e-300Hz``) is refused naming fs, not reported as NaN coefficients."""
    values = [complex(r) for r in (*roots.zeros, *roots.poles)] + [complex(roots.gain)]
    if all(math.isfinite(v.real) and math.isfinite(v.imag) for v in values) and roots.gain != 0:
        return
    raise InputError(
        f"at fs = {fs:.6g} Hz the {method} form of this controller is not a finite number in floating "
        "point (the sample rate is too far from the controller's corners); choose a sample rate "
        "near its corners",
        key="fs",
    )


def _corner_warnings(controller: Controller, fs: float, method: str) -> list[str]:
    out = []
    corners = controller.corner_frequencies_hz()
    for kind in ("zeros", "poles"):
        high = [f for f in corners.get(kind, []) if f > fs / 4]
        for f in high:
            out.append(
                f"{method}: {kind[:-1]} corner at {f:.6g} Hz is above fs/4 = {fs / 4:.6g} Hz; the digital form "
                "departs from the analog one near it (raise fs, or expect a large method error there)"
            )
    return out


def _stability_warnings(src: RootForm, roots: RootForm, fs: float, method: str) -> list[str]:
    analog_marginal = sum(1 for p in src.poles if p.real >= -1e-12 * max(1.0, abs(p)))
    outside = [p for p in roots.poles if abs(p) >= 1 - 1e-12]
    if len(outside) <= analog_marginal:
        return []
    new = [p for p in outside if abs(p - 1) > 1e-9]
    shown = ", ".join(format_root(p) for p in (new or outside))
    text = (
        f"{method}: pole at z = {shown} lies on or outside the unit circle although the analog controller's "
        "matching pole is stable; the sampled controller is unstable"
    )
    if method == "forward-euler":
        need = max((abs(p) ** 2 / (2 * -p.real) for p in src.poles if p.real < 0), default=0.0)
        text += f"; use another method or raise fs above {need:.6g} Hz"
    return [text]


@lru_cache(maxsize=64)
def _check_grid(controller: Controller, fs: float) -> np.ndarray:
    """The grid (Hz) on which :func:`_accuracy_warnings` checks the direct form: the default band
    at 20 points per decade, the same for every method at one rate (read-only, shared)."""
    f = comparison_grid(default_band_hz(controller, fs), fs, points_per_decade=20)
    f.setflags(write=False)
    return f


def _accuracy_warnings(controller: Controller, digital: Controller, roots: RootForm, fs: float) -> list[str]:
    f = _check_grid(controller, fs)
    exact = roots.frequency_response(f)
    poly = digital.frequency_response(f, via="poly")
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = np.abs(poly / exact - 1)
    rel = np.nan_to_num(rel, nan=np.inf)
    worst = int(np.argmax(rel))
    if rel[worst] <= POLY_ACCURACY_LIMIT:
        return []
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = poly[worst] / exact[worst]
        db = 20 * np.log10(abs(ratio)) if abs(ratio) > 0 else -np.inf
        deg = np.degrees(np.angle(ratio))
    return [
        f"direct-form coefficients lose accuracy at this fs/corner ratio: evaluated from b/a the response departs "
        f"from the zeros/poles form by {db:.3g} dB, {deg:.3g} deg near {f[worst]:.4g} Hz (relative {rel[worst]:.2g}); "
        "implement it as cascaded first/second-order sections or lower fs"
    ]
