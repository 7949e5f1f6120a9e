"""The firmware PID block (:mod:`convert.digital.pidblock`) in fixed point: Q15 (16-bit words,
32-bit accumulator) and Q31 (32-bit words, 64-bit accumulator). :class:`PidFixedModel` is the
bit-true reference; :func:`emit_pid_c_fixed` writes C99 that computes the same words.

Scaling (W the word bits, A = 2W the accumulator bits; S the input range = the largest |setpoint|
or |measurement|, U the output level = the largest |output limit|):

* setpoint and measurement are W-bit words at full scale S (x_w = x·2^(W−1)/S, rounded half up,
  saturated); the output is a W-bit word at full scale U (one output LSB = U/2^(W−1));
* P = kp·(b·r − y) is formed in the accumulator and rounded to an output LSB;
* D is a W-bit word at full scale S_D = U·2^gD, gD ≥ 0 the smallest with S_D ≥ 1.01·‖h_D‖₁·(|c| + 1)·S,
  ‖h_D‖₁ = 2|bd| the L1 norm of the filtered difference bd·(1 − z^-1)/(1 − ad·z^-1) (the
  peak-gain bound, as the linear structures scale their nodes): D cannot overflow for inputs
  within ±S;
* the **integral** needs more headroom and precision than the output: it is an A-bit state (the
  accumulator's width) at full scale S_I = U·2^gI, gI ≥ 0 the smallest with S_I ≥ U + |P|max
  (the integral that holds the output at U against the largest proportional term from inputs
  within ±S), so it keeps W − gI fraction bits below an output LSB; it saturates at ±S_I;
* velocity form: the accumulated output is an A-bit state at full scale 8U (W − 3 fraction bits
  below an output LSB), the change of P and D per sample saturates at ±3U and the integral
  increment at ±3U (a change beyond ±2U drives any output within ±U to its limit), then the
  state is clamped to the output limits;
* v = P + I + D is summed in output LSBs in the accumulator, clamped to the limits (words);
* coefficients are ``round(c·2^F)`` (ties away from zero) with F per product group the largest
  that keeps the integers within a word and the worst-case sum (plus the rounding constant)
  within the accumulator — so no intermediate overflows; shifts round half up (add half an LSB,
  floor); states saturate.

Anti-windup and forms as in :mod:`convert.digital.pidblock` (the conditional-integration test is
made on the words v, u and the increment's sign).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from convert.errors import InputError, UnrealizableError
from convert.digital.wordformats import quantize_coefficient, get_format

VELOCITY_FINE = 3  # the velocity state's full scale is 2^3·U
STEP_LIMIT = 3  # the velocity form's per-sample change saturates at ±3U


def rs(v: int, sh: int) -> int:
    """v / 2^sh rounded half up (floor((v + 2^(sh−1)) / 2^sh)); v·2^(−sh) for sh ≤ 0."""
    if sh > 0:
        return (v + (1 << (sh - 1))) >> sh
    return v << (-sh)


def _sat(v: int, lo: int, hi: int) -> int:
    return lo if v < lo else hi if v > hi else v


@dataclass(frozen=True)
class FixedPid:
    """The stored words of a PID block: coefficient integers and their fraction bits per product
    group, the scale exponents gI (integral), gD (derivative), limits as output words."""

    bits: int
    acc_bits: int
    input_range: float
    output_level: float
    kpb: int
    kpp: int
    fp: int
    ad: int
    gdc: int
    gd: int
    fd: int
    gi: int
    fi: int
    go: int
    fo: int
    g_int: int
    g_d: int
    lo: int
    hi: int
    p_bound: float
    d_bound: float

    @property
    def word_min(self) -> int:
        return -(1 << (self.bits - 1))

    @property
    def word_max(self) -> int:
        return -self.word_min - 1

    @property
    def acc_max(self) -> int:
        return (1 << (self.acc_bits - 1)) - 1

    def to_word(self, x: float, scale: float) -> int:
        """A value in user units as a word at full scale ``scale`` (rounded half up, saturated)."""
        return _sat(math.floor(x / scale * (1 << (self.bits - 1)) + 0.5), self.word_min, self.word_max)

    @property
    def output_lsb(self) -> float:
        return self.output_level / (1 << (self.bits - 1))

    def stored(self, form: str) -> dict[str, float]:
        """The constants the words stand for, in the units of :meth:`PidBlock.constants`."""
        s, u, w = self.input_range, self.output_level, self.bits
        full_int = u * 2.0 ** (VELOCITY_FINE if form == "velocity" else self.g_int)
        return {
            "kp": self.kpp / 2.0**self.fp * u / s,
            "b": (self.kpb / self.kpp) if self.kpp else 1.0,
            "bi": self.gi / 2.0**self.fi * full_int / s / 2.0**w,
            "ad": self.ad / 2.0**self.fd,
            "bd": self.gd / 2.0**self.fd * u * 2.0**self.g_d / s,
            "c": (self.gdc / self.gd) if self.gd else 1.0,
            "ao": self.go / 2.0**self.fo / 2.0 ** (w - self.g_int),
        }


def _fit(coefs, bounds, word_max: int, acc_bits: int, where: str) -> tuple[list[int], int]:
    """The largest fraction bits F (A − 2 down to −W) with every round(c·2^F) within the word and
    Σ|c_q|·X + 2^(F−1) < 2^(A−1) (X the bound of each operand): no product sum can overflow."""
    limit = 1 << (acc_bits - 1)
    for f in range(acc_bits - 2, -acc_bits // 2 - 1, -1):
        q = [quantize_coefficient(c, f) for c in coefs]
        if max(map(abs, q)) > word_max:
            continue
        if sum(abs(a) * x for a, x in zip(q, bounds)) + ((1 << (f - 1)) if f > 0 else 0) < limit:
            return q, f
    raise UnrealizableError(f"the PID block's {where} coefficients do not fit the words", key="word_format")


def fixed_pid(block) -> FixedPid:
    """Scale and store ``block`` (a :class:`PidBlock` with word_format q15/q31, an input range and
    output limits) by the rules of the module doc."""
    word = get_format(block.word_format)
    w, a = word.bits, word.accumulator_bits
    if not block.input_range or not (math.isfinite(block.input_range) and block.input_range > 0):
        raise InputError(
            f"{word.name}: the PID block needs the input range (largest |setpoint| or |measurement|) to scale "
            "its words",
            key="input_range",
        )
    if not block.limits:
        raise InputError(
            f"{word.name}: the PID block needs output limits (they scale the output word and bound the integral)",
            key="output_limits",
        )
    s = float(block.input_range)
    u = max(abs(block.limits[0]), abs(block.limits[1]))
    k = block.constants()
    half = 1 << (w - 1)
    p_bound = abs(k["kp"]) * (abs(k["b"]) + 1.0) * s
    d_bound = 2.0 * abs(k["bd"]) * (abs(k["c"]) + 1.0) * s
    g_int = max(0, math.ceil(math.log2((u + p_bound) / u)))
    g_d = max(0, math.ceil(math.log2(1.01 * d_bound / u))) if d_bound > 0 else 0
    if g_int > w - 4 or g_d > w - 4:
        raise UnrealizableError(
            f"{word.name}: the proportional or derivative term from inputs within ±{s:.4g} reaches "
            f"{max(p_bound, d_bound):.4g}, more than 2^{w - 4} times the output level {u:.4g}: the words "
            "cannot hold it; use float or a smaller input range",
            key="word_format",
        )
    # P in output LSBs: kp·b·S/U and kp·S/U per input word
    (kpb, kpp), fp = _fit([k["kp"] * k["b"] * s / u, k["kp"] * s / u], [half, half], word.word_max, a, "proportional")
    # D words at U·2^gD: ad, then bd·c·S/S_D and bd·S/S_D per input-word difference (≤ 2^W)
    s_d = u * 2.0**g_d
    (ad, gdc, gd), fd = _fit(
        [k["ad"], k["bd"] * k["c"] * s / s_d, k["bd"] * s / s_d],
        [half, 2 * half, 2 * half],
        word.word_max,
        a,
        "derivative",
    )
    full_int = u * 2.0 ** (VELOCITY_FINE if block.form == "velocity" else g_int)
    # integral increment in the integral's LSBs (full_int / 2^(A−1)) per error word (|e_w| ≤ 2^W)
    (gi,), fi = _fit([k["bi"] * s / full_int * 2.0**w], [2 * half], word.word_max, a, "integral")
    # back-calculation: (T/Tt)·(u − v), u − v in output LSBs, into the integral's LSBs
    v_bound = p_bound / u * half + half * 2**g_int + half * 2**g_d + half
    if v_bound * 2 >= 1 << (a - 1):
        raise UnrealizableError(f"{word.name}: P + I + D does not fit the accumulator", key="word_format")
    go, fo = 0, 0
    if block.form == "positional" and block.anti_windup == "track":
        (go,), fo = _fit([k["ao"] * 2.0 ** (w - g_int)], [math.ceil(2 * v_bound)], word.word_max, a, "tracking")
    lo = _sat(math.floor(block.limits[0] / u * half + 0.5), -half, half - 1)
    hi = _sat(math.floor(block.limits[1] / u * half + 0.5), -half, half - 1)
    return FixedPid(w, a, s, u, kpb, kpp, fp, ad, gdc, gd, fd, gi, fi, go, fo, g_int, g_d, lo, hi, p_bound, d_bound)


class PidFixedModel:
    """The bit-true arithmetic of a fixed-point PID block: ``step_int(r_w, y_w) -> u_w`` on
    words (the generated C's interface), ``step(r, y) -> u`` in user units (inputs rounded to
    words, output word times the output LSB), ``set_output``/``set_output_int``, ``integral()``
    (the accumulating state in output units)."""

    two_inputs = True  # step(setpoint, measurement)

    def __init__(self, block):
        self.block = block
        self.q = fixed_pid(block)
        self.velocity = block.form == "velocity"
        self.reset()

    def reset(self) -> None:
        self.i = self.uf = self.d = self.r_old = self.y_old = self.p_old = self.d_old = self.e_old = 0

    # -- helpers in the order the C uses them
    def _p(self, r: int, y: int) -> int:
        q = self.q
        return rs(q.kpb * r - q.kpp * y, q.fp)

    def _add(self, a: int, b: int) -> int:
        return _sat(a + b, -self.q.acc_max - 1, self.q.acc_max)

    def step_int(self, r: int, y: int) -> int:
        q = self.q
        e = r - y
        p = self._p(r, y)
        d = _sat(rs(q.ad * self.d + q.gdc * (r - self.r_old) - q.gd * (y - self.y_old), q.fd), q.word_min, q.word_max)
        self.d, self.r_old, self.y_old = d, r, y
        if self.velocity:
            sh = q.bits - VELOCITY_FINE
            lim = STEP_LIMIT << (q.bits - 1)
            dd = _sat((p - self.p_old) + (d - self.d_old) * (1 << q.g_d), -lim, lim)
            inc = _sat(rs(q.gi * self.e_old, q.fi), -(lim << sh), lim << sh)
            uf = _sat(self.uf + dd * (1 << sh) + inc, q.lo * (1 << sh), q.hi * (1 << sh))
            self.uf, self.p_old, self.d_old, self.e_old = uf, p, d, e
            return rs(uf, sh)
        v = p + rs(self.i, q.bits - q.g_int) + d * (1 << q.g_d)
        out = _sat(v, q.lo, q.hi)
        inc = rs(q.gi * e, q.fi)
        aw = self.block.anti_windup
        if aw == "track":
            self.i = self._add(self._add(self.i, inc), rs(q.go * (out - v), q.fo))
        elif aw == "clamp":
            if (q.lo <= v <= q.hi) or (v > q.hi and inc < 0) or (v < q.lo and inc > 0):
                self.i = self._add(self.i, inc)
        else:
            self.i = self._add(self.i, inc)
        return out

    def set_output_int(self, u: int, r: int, y: int) -> None:
        """The state for which the next sample with words r, y gives the word u (bumpless)."""
        q = self.q
        self.reset()
        p = self._p(r, y)
        self.r_old, self.y_old = r, y
        if self.velocity:
            self.uf = u * (1 << (q.bits - VELOCITY_FINE))
            self.p_old = p
        else:
            span = (1 << (q.bits - 1 + q.g_int)) - 1  # |u − p| within the integral's full scale
            self.i = _sat(u - p, -span, span) * (1 << (q.bits - q.g_int))

    def words(self, r: float, y: float) -> tuple[int, int]:
        return self.q.to_word(r, self.q.input_range), self.q.to_word(y, self.q.input_range)

    def step(self, r: float, y: float) -> float:
        return self.step_int(*self.words(r, y)) * self.q.output_lsb

    def set_output(self, u: float, r: float, y: float) -> None:
        self.set_output_int(self.q.to_word(u, self.q.output_level), *self.words(r, y))

    def integral(self) -> float:
        q = self.q
        if self.velocity:
            return self.uf * q.output_level * 2.0**VELOCITY_FINE / 2.0 ** (q.acc_bits - 1)
        return self.i * q.output_level * 2.0**q.g_int / 2.0 ** (q.acc_bits - 1)

    def run(self, r, y):
        """Outputs (user units) for the sample sequences ``r``, ``y``: the words of all samples are
        made at once (the same rounding and saturation as :meth:`words`, in float64 then exact
        integers), the integer steps run in order."""
        import numpy as np

        q = self.q
        full = float(1 << (q.bits - 1))

        def word_array(x):
            w = np.floor(np.asarray(x, dtype=float) / q.input_range * full + 0.5)
            return np.clip(w, q.word_min, q.word_max).astype(np.int64).tolist()

        step = self.step_int
        out = [step(a, b) for a, b in zip(word_array(r), word_array(y))]
        return np.asarray(out, dtype=float) * q.output_lsb


# ----------------------------------------------------------------------------- C99
def emit_pid_c_fixed(block, name: str, head: list[str]) -> dict[str, str]:
    """``NAME.h``/``NAME.c`` of a Q15/Q31 PID block: words in and out,
    ``T NAME_step(NAME_state *st, T setpoint, T measurement)``, ``NAME_reset``,
    ``NAME_set_output(st, u, setpoint, measurement)``; ``head`` the header comment's lines."""
    q = fixed_pid(block)
    w = q.bits
    t, acc = f"int{w}_t", f"int{q.acc_bits}_t"
    sh_v = w - VELOCITY_FINE
    scal = [
        f"Words: setpoint and measurement x_w = round(x * {1 << (w - 1)} / {q.input_range:.10g}) (saturated);",
        f"  output u = u_w * {q.output_level:.10g} / {1 << (w - 1)}; limits {q.lo} .. {q.hi} (words).",
        f"Integral: {acc} state at full scale {q.output_level * 2.0 ** (VELOCITY_FINE if block.form == 'velocity' else q.g_int):.10g}"
        f" ({q.acc_bits - 1} fraction bits; the output word has {w - 1}), saturating.",
        f"Derivative: {t} word at full scale {q.output_level * 2.0**q.g_d:.10g} (peak-gain bound {q.d_bound:.4g}).",
        "Products summed exactly in the accumulator (coefficient bits chosen so no sum overflows), shifts",
        "  round half up (add half an LSB, floor), states saturate.",
    ]
    # imported here, not at the top: import cycle (convert.digital.pidfixed -> convert.digital.pidblock -> convert.digital.pidfixed)
    from convert.digital.pidblock import pid_c_header

    fields = [f"{acc} i, uf;", f"{t} d, r_old, y_old;", f"{acc} p_old, d_old, e_old;"]
    h = pid_c_header(name, head + scal, fields, t)
    amax, amin = f"INT{q.acc_bits}_MAX", f"INT{q.acc_bits}_MIN"

    def shift(expr: str, f: int) -> str:
        if f > 0:
            return f"{name}_rs({expr}, {f})"
        return f"({expr}) * (({acc})1 << {-f})" if f < 0 else f"({expr})"

    def cq(v: int) -> str:
        return f"(({acc}){v})" if v >= 0 else f"(-({acc}){-v})"

    add = [
        f"static {acc} {name}_add({acc} a, {acc} b)",
        "{",
        f"    if (b > 0 && a > {amax} - b) return {amax};",
        f"    if (b < 0 && a < {amin} - b) return {amin};",
        "    return a + b;",
        "}",
        "",
    ]
    c = [
        f'#include "{name}.h"',
        "",
        "/* floor((v + 2^(sh-1)) / 2^sh) without relying on the sign behaviour of >> */",
        f"static {acc} {name}_rs({acc} v, int sh)",
        "{",
        f"    v += ({acc})1 << (sh - 1);",
        "    return v >= 0 ? v >> sh : -((-(v + 1)) >> sh) - 1;",
        "}",
        "",
        f"static {acc} {name}_sat({acc} v, {acc} lo, {acc} hi)",
        "{",
        "    return v < lo ? lo : (v > hi ? hi : v);",
        "}",
        "",
    ]
    c += add if block.form == "positional" else []
    c += [
        f"void {name}_reset({name}_state *st)",
        "{",
        "    st->i = 0; st->uf = 0; st->d = 0; st->r_old = 0; st->y_old = 0; st->p_old = 0; st->d_old = 0; st->e_old = 0;",
        "}",
        "",
        f"void {name}_set_output({name}_state *st, {t} u, {t} r, {t} y)",
        "{",
        f"    {acc} p = {shift(f'{cq(q.kpb)} * r - {cq(q.kpp)} * y', q.fp)};",
        f"    {name}_reset(st);",
        "    st->r_old = r; st->y_old = y;",
    ]
    if block.form == "velocity":
        c += [f"    st->uf = ({acc})u * (({acc})1 << {sh_v});", "    st->p_old = p;"]
    else:
        span = (1 << (w - 1 + q.g_int)) - 1
        c += [f"    st->i = {name}_sat(({acc})u - p, -{span}, {span}) * (({acc})1 << {w - q.g_int});"]
    c += [
        "}",
        "",
        f"{t} {name}_step({name}_state *st, {t} r, {t} y)",
        "{",
        f"    {acc} e = ({acc})r - y;",
        f"    {acc} p = {shift(f'{cq(q.kpb)} * r - {cq(q.kpp)} * y', q.fp)};",
        f"    {acc} d = {name}_sat("
        + shift(
            f"{cq(q.ad)} * st->d + {cq(q.gdc)} * (({acc})r - st->r_old) - {cq(q.gd)} * (({acc})y - st->y_old)", q.fd
        )
        + f", INT{w}_MIN, INT{w}_MAX);",
        f"    {acc} v, u, inc;",
        f"    st->d = ({t})d; st->r_old = r; st->y_old = y;",
    ]
    if block.form == "velocity":
        lim = STEP_LIMIT << (w - 1)
        c += [
            f"    v = {name}_sat((p - st->p_old) + (d - st->d_old) * (({acc})1 << {q.g_d}), -{lim}, {lim});",
            f"    inc = {name}_sat({shift(f'{cq(q.gi)} * st->e_old', q.fi)}, -(({acc}){lim} << {sh_v}), ({acc}){lim} << {sh_v});",
            f"    u = {name}_sat(st->uf + v * (({acc})1 << {sh_v}) + inc, ({acc})({q.lo}) * (({acc})1 << {sh_v}), "
            f"({acc})({q.hi}) * (({acc})1 << {sh_v}));",
            "    st->uf = u; st->p_old = p; st->d_old = d; st->e_old = e;",
            f"    return ({t}){name}_rs(u, {sh_v});",
            "}",
            "",
        ]
    else:
        c += [
            f"    v = p + {name}_rs(st->i, {w - q.g_int}) + d * (({acc})1 << {q.g_d});",
            f"    u = {name}_sat(v, {q.lo}, {q.hi});",
            f"    inc = {shift(f'{cq(q.gi)} * e', q.fi)};",
        ]
        if block.anti_windup == "track":
            c.append(f"    st->i = {name}_add({name}_add(st->i, inc), {shift(f'{cq(q.go)} * (u - v)', q.fo)});")
        elif block.anti_windup == "clamp":
            c += [
                f"    if ((v >= {q.lo} && v <= {q.hi}) || (v > {q.hi} && inc < 0) || (v < {q.lo} && inc > 0))",
                f"        st->i = {name}_add(st->i, inc);",
            ]
        else:
            c.append(f"    st->i = {name}_add(st->i, inc);")
        c += [f"    return ({t})u;", "}", ""]
    return {f"{name}.h": h, f"{name}.c": "\n".join(c)}
