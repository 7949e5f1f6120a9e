"""Digital -> analog: the continuous controller a digital one came from, for the methods where a
real continuous equivalent can exist (``INVERSE_METHODS``), with specific refusals otherwise.

Maps (T = sample period; T' = T, or 2·tan(π f_p T)/(2π f_p) with a prewarp at f_p):

* ``tustin``: s = (2/T')·(z − 1)/(z + 1). Zeros at z = −1 go to infinity.
* ``zoh``: A = logm(Φ)/T and B from Γ = ∫₀ᵀ e^{Aσ}dσ·B, through a state-space realization.
* ``matched``: s = ln(z)/T for poles and finite zeros; zeros at z = −1 go to infinity; gain
  matched as in the forward method (DC, or a stated / default frequency).
* ``backward-euler``: s = (z − 1)/(zT). Zeros at z = 0 go to infinity.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from convert.controller import Controller
from convert.digital import statespace as ss
from convert.digital.roots import RootForm
from convert.errors import InputError, UnrealizableError
from convert.methods import INVERSE_METHODS
from convert.polyroots import format_root
from convert.digital.printed import printed_integrators
from convert.pid import pid_from_controller


_TOL = 1e-9


def _refuse_negative_axis(roots, what: str, method: str) -> None:
    for r in roots:
        if abs(r) <= _TOL:
            raise UnrealizableError(
                f"the {what} at z = 0 has no continuous equivalent under {method} (ln 0 is undefined); "
                "it is a pure delay or a finite-memory (FIR) term: keep that part digital, or account for it "
                "as computation delay and convert the rest; a PID whose derivative is a backward "
                "difference has this pole: read it with the conversion method backward-euler",
                key="controller",
                settings=("computation delay", "conversion method"),
            )
        if r.real < 0 and abs(r.imag) <= _TOL * max(1.0, abs(r)):
            raise UnrealizableError(
                f"the {what} at z = {format_root(r)} lies on the negative real axis; under {method} it has no real "
                "continuous equivalent (its logarithm is complex and has no conjugate partner). It oscillates at fs/2; "
                "remove it (it is usually ringing from a sampled design), or try the conversion method tustin",
                key="controller",
                settings=("conversion method",),
            )


def _delay_refusal(rd: int, method: str, extra: str) -> UnrealizableError:
    return UnrealizableError(
        f"the controller has {rd} sample{'s' if rd > 1 else ''} of pure delay (b0 = 0: more poles than zeros in z) "
        f"with no causal continuous equivalent under {method}{extra}; give it without the delay and pass the delay "
        "to the comparison as computation delay (1 sample), or use the conversion method zoh",
        key="controller",
        settings=("computation delay", "conversion method"),
    )


@dataclass(frozen=True)
class AnalogReading:
    """The analog controller read back from a digital one, and what was read into it: poles
    within the rounding of the printed coefficients of z = 1 taken as integrators; a derivative
    without filter (a backward difference: a pole at z = 0 under backward-euler)."""

    controller: Controller
    notes: tuple[str, ...] = ()


@ss.small_dense
def to_analog(
    digital: Controller,
    method: str,
    prewarp_hz: float | None = None,
    *,
    match_at_hz: float | None = None,
    den_radius=None,
) -> Controller:
    """The analog controller whose ``method`` discretization is ``digital``.

    ``prewarp_hz`` (Hz) applies to ``tustin`` and must equal the one used going forward;
    ``match_at_hz`` (Hz) to ``matched`` (default: the forward method's rule). Poles within the
    rounding of the printed coefficients of z = 1 are read as integrators (see
    :mod:`convert.digital.printed`; ``den_radius`` gives that rounding when the caller has the
    text). Raises :class:`UnrealizableError` naming the pole (or delay) when no real continuous
    equivalent exists. :func:`read_analog` returns the same controller with the notes.
    """
    return read_analog(digital, method, prewarp_hz, match_at_hz=match_at_hz, den_radius=den_radius).controller


def read_analog(
    digital: Controller,
    method: str,
    prewarp_hz: float | None = None,
    *,
    match_at_hz: float | None = None,
    den_radius=None,
) -> AnalogReading:
    """:func:`to_analog` with the notes of what was read into the result (see
    :class:`AnalogReading`)."""
    if not isinstance(digital, Controller) or not digital.is_digital:
        raise InputError(
            "to_analog needs a digital controller (an expression in z with a sample rate)", key="controller"
        )
    if method not in INVERSE_METHODS:
        raise InputError(
            f"no inverse for method {method!r}; expected one of {', '.join(INVERSE_METHODS)}", key="method"
        )
    if not digital.is_proper:
        raise InputError("the digital controller is improper (non-causal): it needs future inputs", key="controller")
    t = digital.sample_period_s
    fs = 1.0 / t
    if prewarp_hz is not None:
        if method != "tustin":
            raise InputError(f"a prewarp frequency applies to tustin only, not {method}", key="prewarp")
        if not (math.isfinite(prewarp_hz) and 0 < prewarp_hz < fs / 2):
            raise InputError(
                f"the prewarp frequency must lie between 0 and fs/2 = {fs / 2:.6g} Hz, found {prewarp_hz!r}",
                key="prewarp",
            )

    digital, notes = printed_integrators(digital, den_radius)
    dz = RootForm.of(digital)
    name = f"{digital.name or 'controller'} (from {method})"
    if method == "tustin":
        analog = _from_tustin(dz, t, prewarp_hz).to_controller(name)
        hint = _backward_difference_hint(dz, t, analog)
        if hint:
            notes.append(hint)
    elif method == "backward-euler":
        analog = _from_backward(dz, t).to_controller(name)
        at_zero = sum(1 for p in dz.poles if abs(p) <= _TOL)
        if at_zero:
            notes.append(_unfiltered_note(analog, at_zero))
    elif method == "matched":
        analog = _from_matched(dz, t, match_at_hz).to_controller(name)
    else:
        analog = _from_zoh(digital, dz, t).to_controller(name)
    return AnalogReading(analog, tuple(notes))


def _backward_difference_hint(dz: RootForm, t: float, analog: Controller) -> str | None:
    """Under tustin a pole at z = 0 becomes a pole at s = −2/T (a filter at fs/π). When the
    controller read by backward-euler is a PID, that pole is most likely a backward-difference
    derivative, not a filter: say so and what the backward-euler reading is."""
    if not any(abs(p) <= _TOL for p in dz.poles) or dz.relative_degree > 0:
        return None

    try:
        backward = _from_backward(dz, t).to_controller()
    except (InputError, UnrealizableError):  # pragma: no cover - rd > 0 is excluded above
        return None
    pid = pid_from_controller(backward) if backward.relative_degree == -1 else None
    if pid is None or pid.kd <= 0:
        return None
    sign = -1 if pid.action == "direct" else 1
    return (
        f"the pole at z = 0 reads under tustin as a derivative filter with time constant T/2 = {t / 2:.3g} s (a "
        f"pole at fs/pi = {1 / (math.pi * t):.4g} Hz); it is what a backward-difference derivative gives: read with "
        f"--method backward-euler this is the unfiltered PID kp = {sign * pid.kp:.6g}, ki = {sign * pid.ki:.6g} /s, "
        f"kd = {sign * pid.kd:.6g} s"
    )


def _unfiltered_note(analog: Controller, count: int) -> str:
    """What a pole at z = 0 under backward-euler means: a backward difference, i.e. a derivative
    with no filter; the analog equivalent is improper and says which filter it lacks."""
    pid = pid_from_controller(analog) if analog.relative_degree == -1 else None
    if pid is not None and pid.kd > 0:
        ideal = pid.table().get("ideal", {})
        td = ideal.get("td_s")
        sign = -1 if pid.action == "direct" else 1
        text = f"kp = {sign * pid.kp:.6g}, ki = {sign * pid.ki:.6g} /s, kd = {sign * pid.kd:.6g} s" + (
            f" (Td = {td:.4g} s)" if td else ""
        )
        filt = f"; e.g. N = 10 would give Tf = Td/10 = {td / 10:.3g} s" if td else ""
        return (
            f"the pole at z = 0 is a backward difference: the derivative has no filter, and the analog equivalent "
            f"is the unfiltered PID {text}. It lacks a derivative filter (Tf = 0): a circuit, or this controller "
            f"under another method, needs one added (--derivative-filter N){filt}"
        )
    extra = analog.relative_degree * -1
    return (
        f"{count} pole{'s' if count > 1 else ''} at z = 0 {'are' if count > 1 else 'is a'} backward "
        f"difference{'s' if count > 1 else ''}: the analog equivalent has {extra} more zero{'s' if extra > 1 else ''} "
        "than poles (unfiltered derivative action); a circuit or another method needs a derivative filter added"
    )


def _from_tustin(dz: RootForm, t: float, prewarp_hz: float | None) -> RootForm:
    tw = t if prewarp_hz is None else 2 * math.tan(math.pi * prewarp_hz * t) / (2 * math.pi * prewarp_hz)
    if dz.relative_degree > 0:
        raise _delay_refusal(dz.relative_degree, "tustin", " (it would need right-half-plane zeros at s = 2/T)")
    for p in dz.poles:
        if abs(p + 1) <= _TOL:
            raise UnrealizableError(
                "the pole at z = -1 maps to s = infinity under tustin: no proper continuous "
                "equivalent; remove it or use another method",
                key="controller",
            )
    half = tw / 2
    return _substituted(dz, -1.0, np.array([half, 1.0]), np.array([-half, 1.0]))


def _from_backward(dz: RootForm, t: float) -> RootForm:
    """A pole at z = 0 (a backward difference: z − 0 = 1/(1 − sT)) goes to s = infinity, so the
    result has one more zero than poles per such pole: an unfiltered derivative, read as it is."""
    if dz.relative_degree > 0:
        raise _delay_refusal(dz.relative_degree, "backward-euler", " (it would need right-half-plane zeros at s = 1/T)")
    poles = tuple(0.0 if abs(p) <= _TOL else p for p in dz.poles)
    dz = RootForm(dz.zeros, poles, dz.gain, dz.sample_period_s)
    return _substituted(dz, 0.0, np.array([1.0]), np.array([-t, 1.0]))


def _substituted(dz: RootForm, special: float, n_s, d_s) -> RootForm:
    """Substitute z = N(s)/D(s) (N, D of degree <= 1, descending powers of s) into the digital
    controller. Roots exactly at z = 1 (integrators, washouts) and at z = ``special`` are taken out
    first and mapped by their exact images: (z − c) = (N − c·D)/D, where N − D is a multiple of s
    (z = 1 goes to s = 0 exactly, so an integrator stays an integrator) and N − special·D a
    constant (z = ``special`` goes to s = infinity). The rest is substituted into the coefficients
    directly (a linear map: no root finding in s, so repeated poles stay accurate)."""
    exact = (1.0, special)

    def split(roots):
        rest = [r for r in roots if not any(r == e for e in exact)]
        counts = [sum(1 for r in roots if r == e) for e in exact]
        return rest, counts

    rest_zeros, k_zeros = split(dz.zeros)
    rest_poles, k_poles = split(dz.poles)
    num_z = np.real(dz.gain * np.poly(np.asarray(rest_zeros, complex))) if rest_zeros else np.array([dz.gain])
    den_z = np.real(np.poly(np.asarray(rest_poles, complex))) if rest_poles else np.array([1.0])
    m_n, m_d = len(num_z) - 1, len(den_z) - 1
    images = [np.trim_zeros(np.polysub(n_s, e * np.asarray(d_s)), "f") for e in exact]

    def subst(coeffs, m, extra):
        out = np.zeros(1)
        for i, c in enumerate(coeffs):
            term = np.array([c])
            for _ in range(m - i):
                term = np.polymul(term, n_s)
            for _ in range(i + extra):
                term = np.polymul(term, d_s)
            out = np.polyadd(out, term)
        return out

    num_s = subst(num_z, m_n, dz.relative_degree)
    den_s = subst(den_z, m_d, 0)
    for image, kz, kp in zip(images, k_zeros, k_poles):
        for _ in range(kz):
            num_s = np.polymul(num_s, image)
        for _ in range(kp):
            den_s = np.polymul(den_s, image)
    return RootForm.of(Controller.analog(np.trim_zeros(num_s, "f") if np.any(num_s) else [0.0], den_s))


def _from_matched(dz: RootForm, t: float, match_at_hz: float | None) -> RootForm:
    # imported here, not at the top: import cycle (convert.digital.inverse -> convert.digital.forward -> convert.digital -> convert.digital.inverse)
    from convert.digital.forward import default_match_frequency_hz

    if dz.relative_degree > 1:
        raise _delay_refusal(dz.relative_degree, "matched", " beyond the one sample matched can keep")
    finite = [z for z in dz.zeros if abs(z + 1) > _TOL]
    _refuse_negative_axis(dz.poles, "pole", "matched")
    _refuse_negative_axis(finite, "zero", "matched")
    zeros = tuple(np.log(complex(z)) / t for z in finite)
    poles = tuple(np.log(complex(p)) / t for p in dz.poles)
    shape = RootForm(zeros, poles, 1.0, None)
    every = list(zeros) + list(poles)
    scale = max([1.0] + [abs(x) for x in every])
    at_origin = any(abs(x) <= 1e-12 * scale for x in every)
    if match_at_hz is None and not at_origin:
        return RootForm(zeros, poles, float(np.real(dz.at(1.0) / shape.unit_gain_at(0.0))), None)
    if match_at_hz is None:
        match_at_hz = default_match_frequency_hz(shape, 1.0 / t)[0]
    w = 2 * math.pi * match_at_hz
    ratio = dz.at(np.exp(1j * w * t)) / shape.unit_gain_at(1j * w)
    return RootForm(zeros, poles, float(abs(ratio) * (1.0 if np.real(ratio) >= 0 else -1.0)), None)


def _from_zoh(digital: Controller, dz: RootForm, t: float) -> RootForm:
    """ZOH inverse, root-wise: the poles of a step-invariant equivalent are exactly e^{pT}, so the
    analog poles are ln(z)/T; the analog numerator is the one whose ZOH equivalent matches the
    digital response. For fixed poles that map is linear in the numerator: with an all-pole
    cascade realization (A, B) of 1/den(s) and Φ = e^{AT}, Γ = ∫₀ᵀ e^{Aσ}dσ·B, the analog
    controller C(sI − A)⁻¹B + D samples to C(zI − Φ)⁻¹Γ + D, so (C, D) come from a linear
    least-squares fit (relative weights) of the digital response on the unit circle.

    Why not A = logm(Φ) of a realization of the digital controller: a double pole makes that Φ
    nearly defective; the logarithm is backward stable but splits the pair by ~sqrt(eps), its
    eigenvalues then disagree with ln(z)/T, and the numerator lost ~1e-8 relative (measured)."""
    _refuse_negative_axis(dz.poles, "pole", "zoh")
    rd = dz.relative_degree
    if rd > 1:
        raise _delay_refusal(rd - 1, "zoh", " (a held analog controller gives at most one sample of lag)")
    n = len(dz.poles)
    if n == 0:
        return RootForm((), (), dz.gain, None)
    poles = np.array([np.log(complex(p)) / t for p in dz.poles])
    a, b, _, _ = ss.cascade((), poles, 1.0)
    phi, gam = ss.zoh_matrices(a, b, t)
    # Fit points: the unit circle from well below the lowest pole angle up to just below fs/2.
    roots = np.asarray([r for r in dz.zeros + dz.poles if r != 0], complex)
    logs = np.abs(np.log(roots))
    low = float(np.min(np.concatenate([logs[logs > 0], [1.0]]))) / 10
    theta = np.geomspace(min(low, 0.1), 0.999 * math.pi, 8 * n + 16)
    zk = np.exp(1j * theta)
    target = dz.at(zk)
    basis = np.empty((zk.size, n + 1), dtype=complex)
    for i, z in enumerate(zk):
        basis[i, :n] = np.linalg.solve(z * np.eye(n) - phi, gam)[:, 0]
    basis[:, n] = 1.0
    weight = 1.0 / np.maximum(np.abs(target), 1e-300 + 1e-12 * np.max(np.abs(target)))
    lhs = basis * weight[:, None]
    rhs = target * weight
    lhs = np.vstack([lhs.real, lhs.imag])
    rhs = np.concatenate([rhs.real, rhs.imag])
    scale = np.maximum(np.linalg.norm(lhs, axis=0), 1e-300)
    sol = np.linalg.lstsq(lhs / scale, rhs, rcond=None)[0] / scale
    c = sol[:n].reshape(1, n)
    d = float(sol[n])
    # The numerator follows from C(s)·den(s) sampled on a circle |s| = rho and transformed by an
    # FFT (a unitary, well-conditioned interpolation); its degree (the continuous relative degree
    # is not known beforehand) is where the scaled coefficients (x = s/rho) fall below 1e-6 of the largest.
    mags = np.abs(poles[np.abs(poles) > 0])
    rho = float(np.exp(np.mean(np.log(mags)))) if mags.size else 2 * math.pi / t / 100
    count = 2 * n + 2
    x = np.exp(2j * math.pi * (np.arange(count) + 0.5) / count)
    sk = rho * x
    vals = ss.evaluate(a, b, c, d, sk) * np.prod(sk[:, None] - poles[None, :], axis=1)
    coef = np.array([np.mean(vals * x ** (-k)) for k in range(n + 1)])  # ascending powers of s/rho
    coef = np.real(coef)
    keep = np.flatnonzero(np.abs(coef) > 1e-6 * np.max(np.abs(coef)))  # below: rounding noise of the fit
    top = int(keep[-1]) if keep.size else 0
    num = coef[: top + 1] / rho ** np.arange(top + 1)
    return RootForm.of(Controller.analog(num[::-1], np.real(np.poly(poles))))
