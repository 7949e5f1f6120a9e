"""Realizing a structure in a word format: the stored coefficients and, for fixed point, the
scaling of every node.

Fixed-point scaling rule (stated in the generated code and the report):

* the input word's full scale is the stated input range R (the largest |input|, user units);
* the output of section i is scaled so that its full scale S_i covers its peak-gain bound:
  S_i = R · 2^ceil(log2(1.01 · ‖h_i‖₁)) where ‖h_i‖₁ is the L1 norm of the impulse response
  from the input to that node (the exact bound on |node| for any input within ±R), the larger of
  the design's and the stored words' own (quantization moves the poles; a pole moved towards the
  unit circle raises the bound, so S_i is doubled until the stored words fit it too);
* a node with no such bound (after an integrator, ‖h‖₁ infinite) takes the output level U
  (the largest |output limit|) as its full scale, so it saturates there; only the last
  section may hold such poles (the section order puts them last), otherwise the realization
  is refused;
* section i then realizes (S_{i−1}/S_i)·H_i in word units: its numerator is multiplied by
  S_{i−1}/S_i before quantization;
* coefficients of a section share one headroom shift k ≥ 0: the smallest k with every stored
  integer within the word and 2^(W−1)·(Σ|c_int| + n_b + 1) + 2^(W−2) < 2^(A−1) (A the accumulator
  bits, n_b the numerator length: room for the numerator's rounding below), so
  the accumulator never overflows whatever the state words hold;
* the numerator then takes e ≥ 0 extra fraction bits, as many as keep its integers within the
  word and its sum within the accumulator: the feed-forward sum is rounded down by e bits
  (half up) before the feedback terms are subtracted. A section with a large gain has a small
  scaled numerator; without these bits it would keep only a few significant bits.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from convert.digital.structures import Layout, Section, z_poly_roots, delta_roots
from convert.digital.wordformats import WordFormat, quantize_coefficient
from convert.errors import InputError, UnrealizableError

#: most samples of an impulse response summed for a peak-gain bound
MAX_IMPULSE = 2_000_000


@dataclass(frozen=True)
class StoredSection:
    """A section as stored: ``b``/``a`` the values the stored words stand for (float64, exact),
    and for fixed point the integers and the right shift after accumulation."""

    b: tuple[float, ...]
    a: tuple[float, ...]
    b_int: tuple[int, ...] | None = None
    a_int: tuple[int, ...] | None = None
    shift: int = 0
    b_shift: int = 0
    p_int: tuple[int, ...] = ()
    level_int: tuple[int, ...] = ()
    b_shifts: tuple[int, ...] = ()
    level_shift: int = 0


@dataclass(frozen=True)
class Realized:
    """A layout in a word format. ``node_scales`` (fixed point): full scale of the input and of
    each section's output, user units; ``node_bounds``: peak-gain bound ‖h‖₁·R of each section
    output (inf after an integrator), user units; ``input_range`` R and ``output_level`` U."""

    layout: Layout
    word: WordFormat
    sections: tuple[StoredSection, ...]
    input_range: float
    output_level: float
    node_scales: tuple[float, ...] = ()
    node_bounds: tuple[float, ...] = ()
    state_scales: tuple[tuple[float, ...], ...] = ()
    state_bounds: tuple[tuple[float, ...], ...] = ()

    @property
    def structure(self) -> str:
        return self.layout.structure

    @property
    def form(self) -> str:
        return self.layout.form

    def model(self):
        # imported here, not at the top: import cycle (convert.digital.fixedpoint -> convert.digital.arithmetic -> convert.digital.fixedpoint)
        from convert.digital.arithmetic import model_of

        return model_of(self)


# ----------------------------------------------------------------------------- peak-gain bounds
def z_equivalent(layout: Layout, s: Section) -> tuple[np.ndarray, np.ndarray]:
    """The float64 z-domain b/a of a section (a δ-section mapped back through its roots)."""
    if layout.form != "delta":
        return np.asarray(s.b, float), np.asarray(s.a, float)
    b = np.trim_zeros(np.asarray(s.b, float), "f")
    lead = b[0] if b.size else 0.0
    g = lead * layout.delta_step ** (len(s.poles) - len(s.zeros))
    m = len(s.poles)
    bz = np.real(np.poly(s.zeros)) if s.zeros else np.array([1.0])
    bb = np.concatenate([np.zeros(m - len(s.zeros)), g * bz]) if m else np.array([g])
    aa = np.real(np.poly(s.poles)) if m else np.array([1.0])
    return bb, aa


def sos_rows(layout: Layout) -> np.ndarray:
    """The sections of ``sections``/``delta`` as z-domain rows [b0, b1, b2, 1, a1, a2] (float64;
    δ-sections mapped back through their roots), the layout ``scipy.signal.sosfilt`` takes."""
    rows = []
    for s in layout.sections:
        b, a = z_equivalent(layout, s)
        rows.append(np.concatenate([np.pad(b, (0, 3 - len(b))), np.pad(a, (0, 3 - len(a)))]))
    return np.array(rows)


def _keeps_integrator(layout: Layout, s: Section) -> bool:
    """A second-order z-section of the ``sections`` structure holding a designed pole at z = 1:
    its coefficients are stored so that 1 + a1 + a2 = 0 holds exactly in the word format
    (a2 first, a1 = −(1 + a2)), so the integrator survives quantization."""
    return layout.structure == "sections" and s.order == 2 and any(p == 1 for p in s.poles)


def _is_marginal(poles) -> bool:
    return any(abs(p) >= 1 - 1e-12 for p in poles)


def impulse_length(radius: float) -> int:
    """Samples of an impulse response summed for a peak-gain bound: until the slowest pole
    (``radius`` = its |z|) has decayed by e^-30, at least 1000, at most :data:`MAX_IMPULSE`."""
    return int(min(MAX_IMPULSE, max(1000, math.ceil(30.0 / max(1.0 - radius, 1e-300)))))


def peak_gains(layout: Layout) -> list[float]:
    """‖h_i‖₁ from the input to each section's output (inf once a pole on the unit circle is
    passed): the impulse response in float64 summed over :func:`impulse_length` samples of the
    slowest pole, plus the bound on the rest that :meth:`convert.digital.impulse.Cascade.l1`
    states (agrees with the sum of a long-double closed form to about 1e-11, tests)."""
    from convert.digital.impulse import Cascade

    finite = []
    radius = 0.0
    for s in layout.sections:
        if _is_marginal(s.poles):
            break
        finite.append(z_equivalent(layout, s))
        radius = max([radius] + [abs(p) for p in s.poles])
    gains = Cascade(finite).l1(impulse_length(radius)) if finite else []
    return gains + [math.inf] * (len(layout.sections) - len(finite))


# ----------------------------------------------------------------------------- realize
def realize(
    layout: Layout, word: WordFormat, *, input_range: float | None = None, output_level: float | None = None
) -> Realized:
    """Store ``layout`` in ``word``. Fixed point needs ``input_range`` (largest |input|, user
    units) and, for an integrating controller, ``output_level`` (largest |output|)."""
    r = float(input_range) if input_range else 1.0
    u = float(output_level) if output_level else 1.0
    if not word.is_fixed:
        cast = np.float32 if word.bits == 32 else np.float64
        secs = []
        for s in layout.sections:
            a = [float(cast(v)) for v in s.a]
            if _keeps_integrator(layout, s):
                # 1 + a2 on the format's grid, then a1 = −(1 + a2) exactly: the pole stays at z = 1
                one_plus = float(cast(1.0 + s.a[2]))
                a = [1.0, -one_plus, one_plus - 1.0]
            secs.append(StoredSection(tuple(float(cast(v)) for v in s.b), tuple(a)))
        return Realized(layout, word, tuple(secs), r, u)
    if not input_range or not math.isfinite(r) or r <= 0:
        raise InputError(
            f"{word.name} needs the input range (largest |error|, in controller input units) to scale "
            "its words, e.g. input_range = [-10, 10]",
            key="input_range",
        )
    if layout.form != "df1":
        # imported here, not at the top: import cycle (convert.digital.fixedpoint -> convert.digital.statewords -> convert.digital.fixedpoint)
        from convert.digital.statewords import realize_state_form

        return realize_state_form(layout, word, r, u if output_level else None)
    gains = peak_gains(layout)
    scales = [r]
    bounds = []
    for i, g in enumerate(gains):
        if math.isinf(g):
            if i != len(gains) - 1:
                raise UnrealizableError(
                    f"section {i + 1} of {len(gains)} follows a pole on the unit circle: its words have no bound from "
                    f"the input range; {word.name} cannot hold it (two integrators?)",
                    key="structure",
                )
            if not output_level:
                raise InputError(
                    f"{word.name}: the controller integrates, so its output has no bound from the input "
                    "range; give output limits (the integrator saturates there)",
                    key="output_limits",
                )
            scales.append(u)
            bounds.append(math.inf)
        else:
            bounds.append(g * r)
            scales.append(r * 2.0 ** math.ceil(math.log2(max(1.01 * g, 1e-300))))
    stored: list[StoredSection] = []
    for i, s in enumerate(layout.sections):
        while True:
            section = _store_section(layout, s, i, scales[i] / scales[i + 1], word)
            if math.isinf(bounds[i]):
                break
            # the stored words' own bound: quantization moves the poles, and a pole moved towards
            # the unit circle raises ‖h‖₁ above the design's (by 20 % on a resonant Q15 section)
            held = stored_gain(stored + [section], scales) * r
            if not math.isfinite(held):  # stored poles on or outside the unit circle: the analysis says so
                break
            bounds[i] = max(bounds[i], held)
            if 1.01 * held <= scales[i + 1]:
                break
            scales[i + 1] *= 2.0
        stored.append(section)
    return Realized(layout, word, tuple(stored), r, u, tuple(scales), tuple(bounds))


def _store_section(layout: Layout, s: Section, i: int, ratio: float, word: WordFormat) -> StoredSection:
    """Section ``i`` as df1 words: its numerator times ``ratio`` (S_(i−1)/S_i), the headroom
    shift and the numerator's extra bits of the module doc."""
    w = word.bits
    coefs_b = [v * ratio for v in s.b]
    coefs_a = list(s.a[1:])
    k = 0
    while True:
        frac = w - 1 - k
        if frac < 1:
            raise UnrealizableError(
                f"section {i + 1}: coefficients up to {max(map(abs, coefs_b + coefs_a)):.3g} "
                f"do not fit {word.name} words",
                key="word_format",
            )
        bi = [quantize_coefficient(c, frac) for c in coefs_b]
        ai = [quantize_coefficient(c, frac) for c in coefs_a]
        if _keeps_integrator(layout, s):
            ai[0] = -((1 << frac) + ai[1])  # 1 + a1 + a2 = 0 exactly: the pole stays at z = 1
        allc = bi + ai
        if max(abs(c) for c in allc) <= word.word_max and (1 << (w - 1)) * (sum(abs(c) for c in allc) + len(bi) + 1) + (
            1 << (w - 2)
        ) < (1 << (word.accumulator_bits - 1)):
            break
        k += 1
    # extra numerator bits: the feed-forward sum is formed at 2^(frac+e) and rounded down by e
    # before the feedback terms join it (a section with a large gain has a small scaled numerator)
    e = 0
    while e < w:
        nb = [quantize_coefficient(c, frac + e + 1) for c in coefs_b]
        if not (
            max(map(abs, nb)) <= word.word_max
            and (1 << (w - 1)) * sum(map(abs, nb)) + (1 << (frac + e)) < (1 << (word.accumulator_bits - 1))
        ):
            break
        e += 1
        bi = nb
    den = float(1 << frac)
    return StoredSection(
        tuple(c / float(1 << (frac + e)) for c in bi),
        (1.0,) + tuple(c / den for c in ai),
        tuple(bi),
        (1 << frac,) + tuple(ai),
        frac,
        e,
    )


def stored_gain(sections, scales) -> float:
    """‖h‖₁ (user units in and out) from the input to the last of the stored df1 ``sections``:
    the words' own impulse response (normalized units) times S_last/S_0; inf when a stored pole
    lies on or outside the unit circle."""
    poles = [p for sec in sections for p in z_poly_roots(sec.a)[0]]
    if _is_marginal(poles):
        return math.inf
    from convert.digital.impulse import Cascade

    radius = max((abs(p) for p in poles), default=0.0)
    cascade = Cascade([(np.asarray(sec.b, float), np.asarray(sec.a, float)) for sec in sections])
    return cascade.l1(impulse_length(radius))[-1] * scales[len(sections)] / scales[0]


def realized_poles(real: Realized) -> list[tuple[list[complex], int]]:
    """Per section: the poles in z of the stored coefficients, and how many sit exactly at 1."""
    out = []
    for s in real.sections:
        if real.form == "delta":
            d = real.layout.delta_step
            if real.word.bits == 32 and not real.word.is_fixed:
                d = float(np.float32(d))
            out.append(delta_roots(s.a, d))
        else:
            out.append(z_poly_roots(s.a))
    return out
