"""Fixed point (Q15, Q31) for the structures whose states are sums of products: direct form II
transposed (``direct2t``) and the delta-operator sections (``delta``). Their scaling, stored
words, bit-true model and the zero-input searches of the analysis.

Scaling (per node, from the stated input range R, as for the direct-form-I structures):

* every section output y and every state s_k is a node with its own full scale; a node's word
  ``v`` stands for ``v / 2^(W−1)`` of that full scale;
* a node with a finite peak-gain bound (the L1 norm ‖h‖₁ of the impulse response from the
  controller input to that node, computed in float64 from the structure's own recursions, plus a
  geometric bound on the tail) gets the full scale ``R · 2^ceil(log2(1.01 · ‖h‖₁))``: no input
  within ±R overflows it;
* the last section may hold an integrator (a pole at z = 1): its output takes the output level U
  (the largest |output limit|) as full scale and saturates there; its states are bounded through
  that saturated output — direct form II transposed: |s_k| ≤ Σ_{j>k} (|b_j|·S_in + |a_j|·U)
  (a state is a partial sum of past inputs and outputs); delta: the integrator runs alone in a
  first-order section, |s_0| ≤ U + |b_0|·S_in, and that state saturates at 1.01 times this bound
  (its windup is limited to it).

Arithmetic of one section (m states, F fraction bits of the section's coefficients, words x in,
y out; every update is one exact sum of products in the accumulator, then shifted right by F with
rounding half up — add 2^(F−1), floor — and saturated to the word):

* direct form II transposed: ``y = sat(rnd(B0·x + P0·s0))``;
  ``s_k = sat(rnd(B_{k+1}·x − A_{k+1}·y + P_{k+1}·s_{k+1}))`` for k = 0 … m−1 in ascending order
  (``s_{k+1}`` still the previous sample's; no P term for the last state);
* delta: ``y = sat(rnd(B0·x + P0·s0))``;
  ``s_k = sat(rnd(2^F·s_k + D·B_{k+1}·x − D·A_{k+1}·y + D·P_{k+1}·s_{k+1}))``: the increment
  Δ·w_k of the float form, with Δ folded into the stored words.

Stored words: ``B = round(b·S_in/S_node·2^F)``, ``A = round(a·S_y/S_node·2^F)``,
``P = round(S_next/S_node·2^F)`` (delta: each times Δ), ties away from zero. F is the largest
value with every stored word (and 2^F for delta) within the word and
``2^(W−1)·Σ|words| + 2^F < 2^(A−1)`` for every update (A the accumulator bits), so the
accumulator cannot overflow whatever the words hold. ``set_output`` (bumpless transfer): the
state words of the last section are ``sat(rnd(L_k·u))`` with L_k = −Σ_{j>k} a_j·S_y/S_k (direct
form II transposed) or L_0 = S_y/S_0, L_k = a_k·S_y/S_k (delta), u the output word.

The delta form's gain at high sample rates (common practice; Middleton & Goodwin, *Digital
Control and Estimation: A Unified Approach*, 1990, from memory): its stored coefficients are
about Δ·ω (ω a corner in rad/s) and keep their relative precision, where the z-domain
coefficients of poles near z = 1 differ from their neighbours only in digits below (Δ·ω)².
"""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np

from convert.digital.fixedpoint import (
    Realized,
    StoredSection,
    _is_marginal,
    impulse_length,
    z_equivalent,
)
from convert.digital.structures import Layout
from convert.digital.wordformats import WordFormat, quantize_coefficient
from convert.errors import InputError, UnrealizableError


# ----------------------------------------------------------------------------- node bounds
def _l1(h: np.ndarray, radius: float) -> float:
    tail = abs(h[-1]) * radius / max(1.0 - radius, 1e-300) * 2 if h.size else 0.0
    return float(np.sum(np.abs(h)) + tail)


def _delayed(v: np.ndarray, d: int) -> np.ndarray:
    if d == 0:
        return v
    out = np.zeros_like(v)
    out[d:] = v[:-d]
    return out


def state_responses(layout: Layout, s, h_in: np.ndarray, h_y: np.ndarray) -> list[np.ndarray]:
    """The responses of a section's states to the section input ``h_in`` (with output ``h_y``),
    by the structure's own recursions in float64 (see the module doc)."""
    m = s.order
    b = np.concatenate([np.zeros(m + 1 - len(s.b)), np.asarray(s.b, float)])
    a = np.asarray(s.a, float)
    if layout.form == "df2t":
        # s_k[n] = Σ_{j>k} b_j x[n−(j−k)] − a_j y[n−(j−k)]
        return [sum(_delayed(b[j] * h_in - a[j] * h_y, j - k) for j in range(k + 1, m + 1)) for k in range(m)]
    d = layout.delta_step
    out: list[np.ndarray] = [np.zeros(0)] * m
    nxt = None
    for k in range(m - 1, -1, -1):  # δ s_k = b_{k+1} x − a_{k+1} y + s_{k+1}
        w = b[k + 1] * h_in - a[k + 1] * h_y + (nxt if nxt is not None else 0.0)
        sk = np.concatenate([[0.0], d * np.cumsum(w)[:-1]])
        out[k] = sk
        nxt = sk
    return out


def node_bounds(layout: Layout, r: float, u: float | None, word: WordFormat):
    """Per section: (output bound, [state bounds]) in user units for inputs within ±R; the last
    section may integrate (bounds through the output level U, see the module doc). Returns
    (bounds, marginal flags)."""
    from convert.digital.impulse import Cascade

    out = []
    flags = []
    n_sec = len(layout.sections)
    finite = []
    radius = 0.0
    for i, s in enumerate(layout.sections):
        if _is_marginal(s.poles):
            if i != n_sec - 1:
                raise UnrealizableError(
                    f"section {i + 1} of {n_sec} follows a pole on the unit circle: its words have no bound from "
                    f"the input range; {word.name} cannot hold it (two integrators?)",
                    key="structure",
                )
            if u is None:
                raise InputError(
                    f"{word.name}: the controller integrates, so its output has no bound from the input "
                    "range; give output limits (the integrator saturates there)",
                    key="output_limits",
                )
            break
        finite.append(z_equivalent(layout, s))
        radius = max([radius] + [abs(p) for p in s.poles])
    h_all = Cascade(finite).impulse(impulse_length(radius)) if finite else None
    radius = 0.0
    for i, s in enumerate(layout.sections[: len(finite)]):
        radius = max([radius] + [abs(p) for p in s.poles])
        length = impulse_length(radius)
        h_y = h_all[i, :length]
        if i:
            h_in = h_all[i - 1, :length]
        else:
            h_in = np.zeros(length)
            h_in[0] = 1.0
        states = state_responses(layout, s, h_in, h_y)
        out.append((_l1(h_y, radius) * r, [_l1(v, radius) * r for v in states]))
        flags.append(False)
    if len(finite) < n_sec:
        out.append(None)
        flags.append(True)
    return out, flags


def _power_scale(r: float, bound: float) -> float:
    """R · 2^ceil(log2(1.01·bound/R)) (a node that never moves gets R·2^-20)."""
    g = max(1.01 * bound / r, 2.0**-20)
    return r * 2.0 ** math.ceil(math.log2(g))


# ----------------------------------------------------------------------------- realize
def _section_words(form: str, s, s_in: float, s_y: float, s_st: list[float], delta: float | None):
    """The exact (float) values of a section's stored words before quantization: per update, a
    list of (kind, value) — kind "b" (times x), "a" (times −y), "p" (times the next state),
    "q" (delta: times the state itself, exactly 1) — and the level factors."""
    m = s.order
    b = [0.0] * (m + 1 - len(s.b)) + [float(v) for v in s.b]
    a = [float(v) for v in s.a]
    d = delta if form == "delta" else 1.0
    ups = [[("b", b[0] * s_in / s_y)] + ([("p", s_st[0] / s_y)] if m else [])]
    for k in range(m):
        up = [("b", d * b[k + 1] * s_in / s_st[k]), ("a", d * a[k + 1] * s_y / s_st[k])]
        if k + 1 < m:
            up.append(("p", d * s_st[k + 1] / s_st[k]))
        if form == "delta":
            up.append(("q", 1.0))
        ups.append(up)
    if form == "delta":
        level = [s_y / s_st[0]] + [a[k] * s_y / s_st[k] for k in range(1, m)] if m else []
    else:
        level = [-sum(a[k + 1 :]) * s_y / s_st[k] for k in range(m)]
    return ups, level


def realize_state_form(layout: Layout, word: WordFormat, r: float, u: float | None) -> Realized:
    """Store a ``direct2t`` or ``delta`` layout in a fixed-point word (see the module doc)."""
    bounds, flags = node_bounds(layout, r, u, word)
    scales = [r]
    st_scales = []
    st_bounds = []
    out_bounds = []
    for s, bnd, marginal in zip(layout.sections, bounds, flags):
        s_in = scales[-1]
        m = s.order
        if marginal:
            s_y = u
            if layout.form == "delta":
                if m != 1 or s.a[1] != 0:
                    raise UnrealizableError(
                        f"{word.name} delta: a section with a pole on the unit circle must be a lone integrator",
                        key="structure",
                    )
                sb = [u + abs(s.b[0]) * s_in]
            else:
                b = [0.0] * (m + 1 - len(s.b)) + [float(v) for v in s.b]
                sb = [sum(abs(b[j]) * s_in + abs(s.a[j]) * u for j in range(k + 1, m + 1)) for k in range(m)]
            st = [1.01 * v if v > 0 else r * 2.0**-20 for v in sb]
            out_bounds.append(math.inf)
        else:
            y_bound, sb = bnd
            s_y = _power_scale(r, y_bound)
            st = [_power_scale(r, v) for v in sb]
            out_bounds.append(y_bound)
        scales.append(s_y)
        st_scales.append(tuple(st))
        st_bounds.append(tuple(sb))
    stored = []
    w = word.bits
    limit = 1 << (word.accumulator_bits - 1)
    for i, s in enumerate(layout.sections):
        ups, level = _section_words(layout.form, s, scales[i], scales[i + 1], list(st_scales[i]), layout.delta_step)
        biggest = max(abs(v) for up in ups for _, v in up)
        frac = w - 1
        while frac >= 1 and biggest * 2.0**frac > word.word_max + 0.5:
            frac -= 1
        while True:
            if frac < 1:
                raise UnrealizableError(
                    f"section {i + 1}: stored values up to {biggest:.3g} do not fit {word.name} words",
                    key="word_format",
                )
            q = [[(kind, quantize_coefficient(v, frac)) for kind, v in up] for up in ups]
            fits = all(abs(c) <= word.word_max for up in q for _, c in up) and all(
                (1 << (w - 1)) * (sum(abs(c) for _, c in up) + 1) + (1 << frac) < limit for up in q
            )
            if fits:
                break
            frac -= 1
        lf = frac  # set_output: L_k·u in the accumulator, as many fraction bits as fit
        while lf > 1 and any(abs(quantize_coefficient(v, lf)) * (1 << (w - 1)) + (1 << lf) >= limit for v in level):
            lf -= 1
        lv = [quantize_coefficient(v, lf) for v in level]
        # extra bits for each update's input term (rounded down to F bits before the rest joins):
        # a section with a large output scale has small input words
        bq, es = [], []
        for up in ups:
            v = dict(up)["b"]
            e = 0
            while e < w and abs(quantize_coefficient(v, frac + e + 1)) <= word.word_max:
                e += 1
            bq.append(quantize_coefficient(v, frac + e))
            es.append(e)
        aq = [dict(up).get("a", 0) for up in q]
        pq = [dict(up).get("p", 0) for up in q[: s.order]]
        eff_b, eff_a = _effective(layout.form, bq, es, aq, pq, frac, layout.delta_step)
        stored.append(
            StoredSection(
                eff_b,
                eff_a,
                tuple(bq),
                (1 << frac,) + tuple(aq[1:]),
                frac,
                0,
                tuple(pq),
                tuple(lv),
                tuple(es),
                lf,
            )
        )
    return Realized(
        layout,
        word,
        tuple(stored),
        r,
        u if u is not None else 1.0,
        tuple(scales),
        tuple(out_bounds),
        tuple(st_scales),
        tuple(st_bounds),
    )


def _effective(form: str, bq, es, aq, pq, frac: int, delta: float | None):
    """The coefficients the stored words stand for, in the section's operator (z^-1 ascending
    for direct2t, δ descending for delta), word units in and out: the states rescaled by the
    products of the coupling words make it the plain form (see the module doc). Exact rationals,
    rounded once to float64."""
    one = Fraction(1 << frac)
    d = Fraction(delta) if form == "delta" else Fraction(1)
    m = len(pq)
    b = [Fraction(bq[0]) / one / (1 << es[0])]
    a = [Fraction(1)]
    c = Fraction(pq[0]) / one if m else Fraction(1)
    for k in range(m):
        b.append(c * Fraction(bq[k + 1]) / one / (1 << es[k + 1]) / d)
        a.append(c * Fraction(aq[k + 1]) / one / d)
        if k + 1 < m:
            c = c * Fraction(pq[k + 1]) / one / d
    return tuple(float(v) for v in b), tuple(float(v) for v in a)


# ----------------------------------------------------------------------------- the model
def words_of(x, scale: float, full: int, lo: int, hi: int) -> np.ndarray:
    """Values (user units, an array) as saturated words of a node with full scale ``scale``:
    floor(x / scale · 2^(W−1) + 0.5), the models' scalar rounding elementwise."""
    v = np.floor(np.asarray(x, dtype=float) / scale * full + 0.5)
    return np.clip(v, lo, hi).astype(np.int64)


def step_section(sec, x, s: list, clip):
    """One sample of one section on words (Python ints or int64 arrays, vectorized over trials):
    updates the state list ``s`` in place and returns the output word. ``sec`` is
    (F, B, A, P, delta?, E) with B/A/E indexed by update (A[0] unused), ``clip`` saturates."""
    frac, bq, aq, pq, is_delta, es = sec
    half = 1 << (frac - 1)
    m = len(s)
    e = es[0]
    acc = ((bq[0] * x + (1 << (e - 1))) >> e if e else bq[0] * x) + (pq[0] * s[0] if m else 0)
    y = clip((acc + half) >> frac)
    one = 1 << frac
    for k in range(m):
        e = es[k + 1]
        acc = ((bq[k + 1] * x + (1 << (e - 1))) >> e if e else bq[k + 1] * x) - aq[k + 1] * y
        if k + 1 < m:
            acc = acc + pq[k + 1] * s[k + 1]
        if is_delta:
            acc = acc + one * s[k]
        s[k] = clip((acc + half) >> frac)
    return y


class FixedStateModel:
    """The bit-true model of ``direct2t``/``delta`` in Q15/Q31: ``reset``, ``step``/``run`` (user
    units), ``step_int``/``run_int`` (words), ``set_level``/``set_level_word`` (bumpless transfer),
    ``load`` (states in user units)."""

    def __init__(self, real: Realized):
        self.real = real
        w = real.word
        self.lo, self.hi = w.word_min, w.word_max
        self.full = 1 << (w.bits - 1)
        delta = real.form == "delta"
        self.secs = [
            (s.shift, list(s.b_int), [0] + list(s.a_int[1:]), list(s.p_int), delta, list(s.b_shifts))
            for s in real.sections
        ]
        self.reset()

    def _clip(self, v: int) -> int:
        return self.lo if v < self.lo else self.hi if v > self.hi else v

    def reset(self) -> None:
        self.state = [[0] * len(sec[3]) for sec in self.secs]

    def _word(self, v: float, scale: float) -> int:
        if isinstance(v, np.ndarray):  # one value per trial (step_batch)
            return words_of(v, scale, self.full, self.lo, self.hi)
        return self._clip(math.floor(float(v) / scale * self.full + 0.5))

    def to_word(self, x: float) -> int:
        return self._word(x, self.real.input_range)

    def from_word(self, v) -> float:
        return float(v) * self.real.node_scales[-1] / self.full

    def load(self, states) -> None:
        """Per-section state lists in user values, rounded to the words of each state node."""
        self.state = [[self._word(v, sc) for v, sc in zip(st, scs)] for st, scs in zip(states, self.real.state_scales)]

    def set_level(self, u: float) -> None:
        self.set_level_word(self._word(u, self.real.node_scales[-1]))

    def set_level_word(self, v: int) -> None:
        """The last section's states holding output word ``v`` with zero input (the generated
        code's ``set_output``): ``sat(rnd(L_k·v))``."""
        self.reset()
        s = self.real.sections[-1]
        half = 1 << (s.level_shift - 1)
        self.state[-1] = [self._clip((c * int(v) + half) >> s.level_shift) for c in s.level_int]

    def step_int(self, v: int) -> int:
        for sec, st in zip(self.secs, self.state):
            v = step_section(sec, int(v), st, self._clip)
        return v

    def step(self, x: float) -> float:
        return self.from_word(self.step_int(self.to_word(x)))

    def step_batch(self, x: np.ndarray) -> np.ndarray:
        """:meth:`step` vectorized over trials (``x`` one input per trial, user units; the states
        loaded as arrays by :meth:`load`): :func:`step_section` on int64 words."""
        v = self._word(np.asarray(x, dtype=float), self.real.input_range)
        lo, hi = self.lo, self.hi
        for sec, st in zip(self.secs, self.state):
            v = step_section(sec, v, st, lambda w: np.clip(w, lo, hi))
        return v.astype(float) * (self.real.node_scales[-1] / self.full)

    def run_int(self, words) -> np.ndarray:
        step = self.step_int
        return np.array([step(int(v)) for v in words], dtype=np.int64)

    def run(self, xs) -> np.ndarray:
        words = [self.to_word(x) for x in np.asarray(xs, dtype=float)]
        return self.run_int(words).astype(float) * (self.real.node_scales[-1] / self.full)


# ----------------------------------------------------------------------------- zero-input searches
def limit_cycles(real: Realized, layout: Layout, notes: list[str], trials: int, samples: int, rng):
    """Zero input from random state words, per section, vectorized over trials: the largest
    output left after the linear response has died out (stable sections), and for the section
    holding the integrator the largest step its output still makes once the other poles have
    decayed (it must stand still). Returns (LSB, output units, [(section, step)], the section of
    the largest output left or None)."""
    w = real.word
    worst_lsb, worst_units = 0, 0.0
    worst_section = None
    undecided = []
    drift = []

    lo_w, hi_w = np.int64(w.word_min), np.int64(w.word_max)
    delta = real.form == "delta"
    for i, (s, s0) in enumerate(zip(real.sections, layout.sections)):
        m = len(s.p_int)
        if m == 0:
            continue
        sec = (s.shift, list(s.b_int), [0] + list(s.a_int[1:]), list(s.p_int), delta, list(s.b_shifts))
        marginal = _is_marginal(s0.poles)
        others = [abs(p) for p in s0.poles if abs(p) < 1 - 1e-12]
        radius = max(others, default=0.0)
        need = math.log(2.0**w.bits) / max(-math.log(max(radius, 1e-300)), 1e-9) + (50 if marginal else 200)
        n = int(min(samples, need))
        if need > samples and not marginal:
            undecided.append(i + 1)
        lo, hi = (-64, 64) if marginal else (w.word_min // 2, w.word_max // 2)
        st = [rng.integers(lo, hi, size=trials, dtype=np.int64) for _ in range(m)]
        amp = _zero_input_section(sec, st, n, 50 if marginal else 100, marginal, lo_w, hi_w)
        lsb = int(amp.max())
        if marginal:
            if lsb:
                drift.append((i + 1, lsb))
        elif lsb > worst_lsb:
            worst_lsb, worst_units = lsb, lsb * real.node_scales[i + 1] / 2 ** (w.bits - 1)
            worst_section = i + 1
    # imported here, not at the top: import cycle (convert.digital.statewords -> convert.digital.quantized -> convert.digital.statewords)
    from convert.digital.quantized import limit_cycle_notes

    limit_cycle_notes(notes, undecided, worst_lsb, worst_units)
    return worst_lsb, worst_units, drift, worst_section


def _zero_input_section(sec, st: list, n: int, window: int, marginal: bool, lo, hi) -> np.ndarray:
    """:func:`step_section` with zero input for n samples from the state words ``st`` (int64
    arrays, one entry per trial), all states of a sample in one array operation (each update
    reads the previous sample's states and the new output only, see the module doc; the input
    terms are exactly 0: (0·B + 2^(E−1)) >> E = 0), int64 in place. Returns per trial the
    largest |y| (or, for a section holding an integrator, |y − previous y|) over the last
    ``window`` samples, the first sample excepted."""
    frac, _, aq, pq, is_delta, _ = sec
    m = len(st)
    half, one, p0 = np.int64(1 << (frac - 1)), np.int64(1 << frac), np.int64(pq[0])
    states = np.array(st, dtype=np.int64)  # (m, trials)
    a_col = np.array(aq[1 : m + 1], dtype=np.int64)[:, None]
    p_col = np.array(pq[1:m], dtype=np.int64)[:, None]
    acc, tmp = np.empty_like(states), np.empty_like(states)
    y, prev = np.empty_like(states[0]), np.empty_like(states[0])
    diff = np.empty_like(y)
    amp = np.zeros_like(y)
    for k in range(n):
        np.multiply(states[0], p0, out=y)
        np.add(y, half, out=y)
        np.right_shift(y, frac, out=y)
        np.maximum(y, lo, out=y)
        np.minimum(y, hi, out=y)
        np.multiply(a_col, y, out=acc)
        np.negative(acc, out=acc)
        if m > 1:
            np.multiply(p_col, states[1:], out=tmp[:-1])
            np.add(acc[:-1], tmp[:-1], out=acc[:-1])
        if is_delta:
            np.multiply(states, one, out=tmp)
            np.add(acc, tmp, out=acc)
        np.add(acc, half, out=acc)
        np.right_shift(acc, frac, out=acc)
        np.maximum(acc, lo, out=states)
        np.minimum(states, hi, out=states)
        if k >= n - window and k > 0:
            if marginal:
                np.subtract(y, prev, out=diff)
                np.abs(diff, out=diff)
            else:
                np.abs(y, out=diff)
            np.maximum(amp, diff, out=amp)
        y, prev = prev, y
    return amp
