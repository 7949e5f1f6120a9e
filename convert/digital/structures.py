"""Structures: how a digital controller's arithmetic is arranged, one small definition each.

Every structure splits the controller into *sections* (one section of full order for the
direct forms; first- and second-order sections otherwise) and names the arithmetic of a
section:

* ``direct1`` — direct form I on the expanded polynomial b/a (one section): states are the
  last inputs and outputs. ``direct`` is accepted as its earlier name.
* ``direct2t`` — direct form II transposed on b/a (one section): one state per order.
* ``sections`` — cascaded second-order sections, each in direct form I, built from the
  zeros/poles/gain (never from the expanded polynomial).
* ``delta`` — the same sections written in the delta operator δ = (z − 1)/Δ with Δ the sample
  period, each in transposed form: for sample rates far above the corners, where z-domain
  poles crowd at z = 1 and their coefficients lose digits.

Pairing and ordering rule for sections (the usual one): poles are taken in order of their
distance to the unit circle, nearest first — a complex pole with its conjugate, a real pole
with the next real pole, an integrator (a pole exactly at z = 1) alone; each complex pair of zeros goes to the two-pole section whose pole is
nearest, then each real zero to the nearest section with a free place. The sections are then
run in the opposite order: the poles nearest the unit circle (integrators, slow lags) come last.
The gain goes into the first section (word formats with a fixed range rescale every section,
see :mod:`convert.digital.fixedpoint`).

Coefficients of a z-section are in ascending powers of z^-1, ``a[0] = 1``; of a δ-section in
descending powers of δ, ``a[0] = 1``: ``H(δ) = (b0 δ^m + … + bm) / (δ^m + a1 δ^(m-1) + … + am)``.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from convert.errors import InputError

#: Structure name -> one-line description (the CLI and the report print these).
STRUCTURES: dict[str, str] = {
    "direct1": "direct form I on the expanded polynomial b/a",
    "direct2t": "direct form II transposed on the expanded polynomial b/a",
    "sections": "cascaded second-order sections (direct form I each) from the zeros/poles/gain",
    "delta": "cascaded second-order sections in the delta operator (transposed form each)",
}
ALIASES = {"direct": "direct1"}
#: The arithmetic of a section in each structure.
SECTION_FORM = {"direct1": "df1", "direct2t": "df2t", "sections": "df1", "delta": "delta"}


def structure_name(name: str, *, key: str = "structure") -> str:
    n = ALIASES.get(str(name).lower(), str(name).lower())
    if n not in STRUCTURES:
        raise InputError(f"unknown structure {name!r}; expected one of {', '.join(STRUCTURES)}", key=key)
    return n


@dataclass(frozen=True)
class Section:
    """One section in float64: coefficients (see module doc for the operator), and its zeros and
    poles in z (the directly mapped roots, for the analysis)."""

    b: tuple[float, ...]
    a: tuple[float, ...]
    zeros: tuple[complex, ...] = ()
    poles: tuple[complex, ...] = ()

    @property
    def order(self) -> int:
        return len(self.a) - 1


@dataclass(frozen=True)
class Layout:
    """A controller arranged in a structure (float64 coefficients). ``delta_step`` is Δ (s)
    for the delta form; ``sample_period_s`` the sample period T (s)."""

    structure: str
    sections: tuple[Section, ...]
    sample_period_s: float
    delta_step: float | None = None

    @property
    def form(self) -> str:
        return SECTION_FORM[self.structure]

    @property
    def order(self) -> int:
        return sum(s.order for s in self.sections)


# ----------------------------------------------------------------------------- building
def _is_real(r: complex) -> bool:
    return abs(r.imag) <= 1e-12 * max(abs(r), 1e-300)


def _groups(roots) -> list[list[complex]]:
    """Roots as real singles and conjugate pairs [r, conj(r)] (imaginary part > 0 first)."""
    reals = [complex(r.real) for r in roots if _is_real(r)]
    upper = [complex(r) for r in roots if not _is_real(r) and r.imag > 0]
    return [[r] for r in reals] + [[r, r.conjugate()] for r in upper]


def _distance_to_circle(r: complex) -> float:
    return abs(1.0 - abs(r))


def pair_sections(zeros, poles, gain: float) -> list[tuple[list[complex], list[complex], float]]:
    """(zeros, poles, gain) per section by the rule in the module doc, in run order."""
    groups = _groups(poles)
    complex_p = sorted([g for g in groups if len(g) == 2], key=lambda g: _distance_to_circle(g[0]))
    real_p = sorted([g[0] for g in groups if len(g) == 1 and g[0] != 1], key=_distance_to_circle)
    # an integrator (pole exactly at z = 1) runs alone in a first-order section: paired with a
    # pole near 1, rounding can keep a fixed-point section moving with zero input
    sections: list[dict] = [{"p": [g[0]], "z": []} for g in groups if len(g) == 1 and g[0] == 1]
    # nearest-first over all poles: complex pairs and pairs of real poles compete by distance
    while complex_p or real_p:
        dc = _distance_to_circle(complex_p[0][0]) if complex_p else np.inf
        dr = _distance_to_circle(real_p[0]) if real_p else np.inf
        if dc <= dr:
            ps = complex_p.pop(0)
        else:
            ps = [real_p.pop(0)]
            if real_p:
                ps.append(real_p.pop(0))
        sections.append({"p": ps, "z": []})
    if not sections:
        sections.append({"p": [], "z": []})
    zgroups = _groups(zeros)
    for zc in [g for g in zgroups if len(g) == 2]:
        free = [s for s in sections if len(s["p"]) - len(s["z"]) >= 2] or [s for s in sections if len(s["p"]) == 2]
        if not free:
            raise InputError(
                "a complex pair of zeros found no second-order section (more zeros than poles?)", key="controller"
            )
        best = min(free, key=lambda s: min(abs(zc[0] - p) for p in s["p"]) if s["p"] else np.inf)
        best["z"].extend(zc)
    for zr in [g[0] for g in zgroups if len(g) == 1]:
        free = [s for s in sections if len(s["z"]) < max(len(s["p"]), 0)]
        if not free:
            raise InputError("more zeros than poles in z: the controller is not causal", key="controller")
        best = min(free, key=lambda s: min(abs(zr - p) for p in s["p"]))
        best["z"].append(zr)
    sections.reverse()  # nearest to the unit circle last
    out = []
    for i, s in enumerate(sections):
        out.append((s["z"], s["p"], float(gain) if i == 0 else 1.0))
    return out


def _z_section(zeros, poles, gain) -> Section:
    m = len(poles)
    nz = len(zeros)
    bz = np.real(np.poly(zeros)) if nz else np.array([1.0])
    b = np.concatenate([np.zeros(m - nz), gain * bz]) if m else np.array([gain])
    a = np.real(np.poly(poles)) if m else np.array([1.0])
    return Section(tuple(float(v) for v in b), tuple(float(v) for v in a), tuple(zeros), tuple(poles))


def _delta_section(zeros, poles, gain, delta: float) -> Section:
    """H(z) = g Π(z − zi)/Π(z − pi) with z = 1 + Δδ: H = g Δ^(nz−np) Π(δ − ζi)/Π(δ − πi),
    ζ = (z − 1)/Δ; zeros at infinity in z (nz < np) stay as lower numerator order in δ."""
    m = len(poles)
    dz = [(complex(z) - 1.0) / delta for z in zeros]
    dp = [(complex(p) - 1.0) / delta for p in poles]
    g = gain * delta ** (len(zeros) - m)
    bz = np.real(np.poly(dz)) if dz else np.array([1.0])
    b = np.concatenate([np.zeros(m - len(dz)), g * bz]) if m else np.array([g])
    a = np.real(np.poly(dp)) if m else np.array([1.0])
    return Section(tuple(float(v) for v in b), tuple(float(v) for v in a), tuple(zeros), tuple(poles))


def build_layout(structure: str, roots, b=None, a=None) -> Layout:
    """Arrange a digital controller in ``structure``. ``roots`` is its
    :class:`~convert.digital.roots.RootForm` in z (directly mapped roots); ``b``/``a`` the expanded
    polynomial (used by the direct forms only; built from the roots when omitted)."""
    structure = structure_name(structure)
    t = roots.sample_period_s
    if not t:
        raise InputError("a structure needs a digital controller (a sample period)", key="controller")
    if structure in ("direct1", "direct2t"):
        if b is None or a is None:
            c = roots.to_controller()
            b, a = c.b, c.a
        n = max(len(b), len(a))
        bb = tuple(float(v) for v in b) + (0.0,) * (n - len(b))
        aa = tuple(float(v) for v in a) + (0.0,) * (n - len(a))
        return Layout(structure, (Section(bb, aa, tuple(roots.zeros), tuple(roots.poles)),), t)
    parts = pair_sections(roots.zeros, roots.poles, roots.gain)
    if structure == "sections":
        return Layout(structure, tuple(_z_section(*p) for p in parts), t)
    return Layout(structure, tuple(_delta_section(*p, t) for p in parts), t, delta_step=t)


# ----------------------------------------------------------------------------- exact helpers
def _shift_to_w(coefs) -> list[Fraction]:
    """Coefficients c of P(z) = Σ c_k z^(m−k) (ascending powers of z^-1, times z^m), rewritten
    exactly as a polynomial in w = z − 1, descending powers of w."""
    from math import comb

    c = [Fraction(float(v)) for v in coefs]
    m = len(c) - 1
    out = [Fraction(0)] * (m + 1)
    for k, ck in enumerate(c):
        d = m - k  # ck z^d = ck Σ_j comb(d, j) w^j
        if ck == 0:
            continue
        for j in range(d + 1):
            out[m - j] += ck * comb(d, j)
    return out


def w_of(f_hz, t: float) -> np.ndarray:
    """w = e^{jωT} − 1 computed without cancellation: 2j·sin(ωT/2)·e^{jωT/2}."""
    half = np.pi * np.asarray(f_hz, dtype=float) * t
    return 2j * np.sin(half) * np.exp(1j * half)


@functools.lru_cache(maxsize=256)
def _shifted_floats(coefs: tuple[float, ...]) -> tuple[float, ...]:
    """:func:`_shift_to_w` rounded to floats, kept per coefficient tuple (the grid-free maxima
    evaluate one section at one frequency at a time, thousands of times)."""
    return tuple(float(v) for v in _shift_to_w(coefs))


def z_poly_response(b, a, f_hz, t: float) -> np.ndarray:
    """B(z^-1)/A(z^-1) at z = e^{j2πfT}, evaluated in w = z − 1 from exactly shifted
    coefficients (accurate where z-domain roots crowd at 1)."""
    n = max(len(b), len(a))
    bw = list(_shifted_floats(tuple(float(v) for v in b) + (0.0,) * (n - len(b))))
    aw = list(_shifted_floats(tuple(float(v) for v in a) + (0.0,) * (n - len(a))))
    w = w_of(f_hz, t)
    return np.polyval(bw, w) / np.polyval(aw, w)


def _roots_beside_zero(coefs) -> tuple[np.ndarray, int]:
    """Roots of a polynomial (descending powers) with leading zeros dropped and roots exactly at
    0 divided out exactly and counted: (other roots, count at 0)."""
    c = list(coefs)
    while len(c) > 1 and c[0] == 0:
        c = c[1:]
    exact = 0
    while len(c) > 1 and c[-1] == 0:
        c = c[:-1]
        exact += 1
    return (np.roots([float(v) for v in c]) if len(c) > 1 else np.zeros(0)), exact


def z_poly_roots(coefs) -> tuple[list[complex], int]:
    """Roots in z of Σ c_k z^(m−k) computed in w = z − 1 (exact shift); roots exactly at z = 1
    are divided out exactly and counted. Returns (roots, count at exactly 1)."""
    rest, exact = _roots_beside_zero(_shift_to_w(coefs))
    return [complex(1.0)] * exact + [1.0 + complex(r) for r in rest], exact


def delta_roots(coefs, delta: float) -> tuple[list[complex], int]:
    """Roots in z of a δ-polynomial (descending powers of δ): z = 1 + Δδ; exact δ = 0 counted."""
    rest, exact = _roots_beside_zero([float(v) for v in coefs])
    return [complex(1.0)] * exact + [1.0 + delta * complex(r) for r in rest], exact


def section_response(form: str, b, a, f_hz, t: float, delta: float | None) -> np.ndarray:
    """Response of one section with the given (stored) coefficients."""
    if form == "delta":
        d = w_of(f_hz, t) / delta
        return np.polyval(b, d) / np.polyval(a, d)
    return z_poly_response(b, a, f_hz, t)


def section_zeros(form: str, b, delta: float | None) -> list[complex]:
    bb = [float(v) for v in b]
    while bb and bb[0] == 0:
        bb = bb[1:]
    if len(bb) <= 1:
        return []
    if form == "delta":
        return [1.0 + delta * complex(r) for r in np.roots(bb)]
    # numerator in z^-1 with leading zeros removed: zeros of Σ b_k z^(m'-k)
    return z_poly_roots(bb)[0]
