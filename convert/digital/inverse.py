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

import numpy as np

from convert.controller import Controller
from convert.digital import statespace as ss
from convert.digital.roots import RootForm
from convert.errors import InputError, UnrealizableError

INVERSE_METHODS: tuple[str, ...] = ("tustin", "zoh", "matched", "backward-euler")

_TOL = 1e-9


def _root_text(r: complex) -> str:
    r = complex(r)
    if abs(r.imag) <= 1e-12 * max(abs(r), 1e-300):
        return format(r.real, ".6g")
    return f"{r.real:.6g}{'+' if r.imag >= 0 else '-'}{abs(r.imag):.6g}j"


def _refuse_negative_axis(roots, what: str, method: str) -> None:
    for r in roots:
        if abs(r) <= _TOL:
            raise UnrealizableError(
                f"the {what} at z = 0 has no continuous equivalent under {method} (ln 0 is undefined); "
                "it is a pure delay or a finite-memory (FIR) term: keep that part digital, or account for it "
                "as computation delay (--delay) and convert the rest", key="controller")
        if r.real < 0 and abs(r.imag) <= _TOL * max(1.0, abs(r)):
            raise UnrealizableError(
                f"the {what} at z = {_root_text(r)} lies on the negative real axis; under {method} it has no real "
                "continuous equivalent (its logarithm is complex and has no conjugate partner). It oscillates at fs/2; "
                "remove it (it is usually ringing from a sampled design), or try --method tustin", key="controller")


def _delay_refusal(rd: int, method: str, extra: str) -> UnrealizableError:
    return UnrealizableError(
        f"the controller has {rd} sample{'s' if rd > 1 else ''} of pure delay (b0 = 0: more poles than zeros in z) "
        f"with no causal continuous equivalent under {method}{extra}; give it without the delay and pass the delay "
        "to the comparison (--delay 1sample), or use --method zoh", key="controller")


def _gain_by_point(analog_shape: RootForm, digital: RootForm, s_of_z) -> float:
    cands = np.exp(1j * np.linspace(0.05, 3.0, 41))
    z0 = ss.quiet_point(np.concatenate([np.asarray(digital.zeros), np.asarray(digital.poles)]), cands)
    s0 = s_of_z(z0)
    return float(np.real(digital.at(z0) / analog_shape.unit_gain_at(s0)))


def to_analog(digital: Controller, method: str, prewarp_hz: float | None = None, *,
              match_at_hz: float | None = None) -> Controller:
    """The analog controller whose ``method`` discretization is ``digital``.

    ``prewarp_hz`` (Hz) applies to ``tustin`` and must equal the one used going forward;
    ``match_at_hz`` (Hz) to ``matched`` (default: the forward method's rule). Raises
    :class:`UnrealizableError` naming the pole (or delay) when no real continuous equivalent exists.
    """
    if not isinstance(digital, Controller) or not digital.is_digital:
        raise InputError("to_analog needs a digital controller (an expression in z with a sample rate)",
                         key="controller")
    if method not in INVERSE_METHODS:
        raise InputError(f"no inverse for method {method!r}; expected one of {', '.join(INVERSE_METHODS)}",
                         key="method")
    if not digital.is_proper:
        raise InputError("the digital controller is improper (non-causal): it needs future inputs", key="controller")
    t = digital.sample_period_s
    fs = 1.0 / t
    if prewarp_hz is not None:
        if method != "tustin":
            raise InputError(f"a prewarp frequency applies to tustin only, not {method}", key="prewarp")
        if not (math.isfinite(prewarp_hz) and 0 < prewarp_hz < fs / 2):
            raise InputError(f"the prewarp frequency must lie between 0 and fs/2 = {fs / 2:.6g} Hz, found {prewarp_hz!r}",
                             key="prewarp")
    dz = RootForm.of(digital)
    name = f"{digital.name or 'controller'} (from {method})"
    if method == "tustin":
        return _from_tustin(dz, t, prewarp_hz).to_controller(name)
    if method == "backward-euler":
        return _from_backward(dz, t).to_controller(name)
    if method == "matched":
        return _from_matched(dz, t, match_at_hz).to_controller(name)
    return _from_zoh(digital, dz, t).to_controller(name)


def _from_tustin(dz: RootForm, t: float, prewarp_hz: float | None) -> RootForm:
    tw = t if prewarp_hz is None else 2 * math.tan(math.pi * prewarp_hz * t) / (2 * math.pi * prewarp_hz)
    if dz.relative_degree > 0:
        raise _delay_refusal(dz.relative_degree, "tustin", " (it would need right-half-plane zeros at s = 2/T)")
    for p in dz.poles:
        if abs(p + 1) <= _TOL:
            raise UnrealizableError("the pole at z = -1 maps to s = infinity under tustin: no proper continuous "
                                    "equivalent; remove it or use another method", key="controller")
    c2 = 2.0 / tw
    s_of = lambda z: c2 * (z - 1) / (z + 1)  # noqa: E731
    zeros = [s_of(z) for z in dz.zeros if abs(z + 1) > _TOL]
    poles = [s_of(p) for p in dz.poles]
    shape = RootForm(tuple(zeros), tuple(poles), 1.0, None)
    return RootForm(shape.zeros, shape.poles, _gain_by_point(shape, dz, s_of), None)


def _from_backward(dz: RootForm, t: float) -> RootForm:
    if dz.relative_degree > 0:
        raise _delay_refusal(dz.relative_degree, "backward-euler", " (it would need right-half-plane zeros at s = 1/T)")
    for p in dz.poles:
        if abs(p) <= _TOL:
            raise UnrealizableError("the pole at z = 0 maps to s = infinity under backward-euler: no proper "
                                    "continuous equivalent; keep that part digital or use another method",
                                    key="controller")
    s_of = lambda z: (z - 1) / (z * t)  # noqa: E731
    zeros = [s_of(z) for z in dz.zeros if abs(z) > _TOL]
    poles = [s_of(p) for p in dz.poles]
    shape = RootForm(tuple(zeros), tuple(poles), 1.0, None)
    return RootForm(shape.zeros, shape.poles, _gain_by_point(shape, dz, s_of), None)


def _from_matched(dz: RootForm, t: float, match_at_hz: float | None) -> RootForm:
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
    from scipy.linalg import expm, logm

    _refuse_negative_axis(dz.poles, "pole", "zoh")
    rd = dz.relative_degree
    if rd > 1:
        raise _delay_refusal(rd - 1, "zoh", " (a held analog controller gives at most one sample of lag)")
    phi, gam, c, d = ss.realize(digital.num, digital.den)
    n = phi.shape[0]
    if n == 0:
        return RootForm((), (), d, None)
    log_phi, _err = logm(phi, disp=False)
    a = np.real(log_phi) / t
    em = np.zeros((2 * n, 2 * n))
    em[:n, :n] = a * t
    em[:n, n:] = np.eye(n) * t
    m = expm(em)[:n, n:]
    try:
        b = np.linalg.solve(m, gam)
    except np.linalg.LinAlgError:
        raise UnrealizableError("the sampled controller's input matrix cannot be traced back to a continuous one "
                                "(singular hold integral); no zoh equivalent", key="controller") from None
    poles = np.array([np.log(complex(p)) / t for p in dz.poles])
    # relative degree of the continuous system from its Markov parameters C A^k B
    count = n
    if d == 0.0:
        count = n - 1
        ak = np.eye(n)
        for _ in range(n - 1):
            markov = abs((c @ ak @ b)[0, 0])
            scale = np.linalg.norm(c) * np.linalg.norm(ak) * np.linalg.norm(b)
            if markov > 1e-9 * scale:
                break
            count -= 1
            ak = ak @ a
    zeros = ss.transmission_zeros(a, b, c, d, count)
    shape = RootForm(tuple(zeros), tuple(poles), 1.0, None)
    # read the gain well away from s = 0, where a repeated pole's rounding scatter matters
    cands = 1j * np.logspace(np.log10(1.0 / t) - 3, np.log10(1.0 / t) - 0.5, 41)
    s0 = ss.quiet_point(np.concatenate([zeros, poles]), cands)
    value = ss.evaluate(a, b, c, d, [s0])[0]
    return RootForm(shape.zeros, shape.poles, float(np.real(value / shape.unit_gain_at(s0))), None)
