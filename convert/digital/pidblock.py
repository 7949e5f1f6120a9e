"""A PID block for firmware: parallel P, I and filtered D as separate states, positional or
velocity (incremental) form, output limits with anti-windup, derivative on a weighted
setpoint (c = 0: on the measurement only), setpoint weight b on P, bumpless transfer.

Per sample (T the sample period, r the setpoint, y the measurement, s = +1 reverse / −1 direct
action folded into the gains):

* P = kp·(b·r − y)
* D = ad·D + bd·((c·r − y) − (c·r − y)_previous), ad = Tf/(Tf + T), bd = kd/(Tf + T) (the
  filtered derivative by backward difference; Åström & Hägglund, *Advanced PID Control*, ch. 13 —
  from memory)
* positional: v = P + I + D; u = v clamped to the limits; then the integral, forward Euler
  with bi = ki·T:
  - ``anti_windup="clamp"`` (conditional integration): I += bi·e only when u = v, or when the
    error drives the output back from the limit it is at (common practice);
  - ``anti_windup="track"`` (back-calculation): I += bi·e + (T/Tt)·(u − v) with the tracking time
    constant Tt (default: √(Ti·Td) for a PID, Ti for a PI — Åström & Hägglund's rule of thumb,
    from memory);
  - ``"none"``: I += bi·e (the integral winds up);
* velocity: u = clamp(u_previous + ΔP + bi·e_previous + ΔD): the same integral rule as the
  positional form, and the clamp on the accumulated output stops the windup by itself.

``set_output(u, r, y)`` (bumpless transfer): the state for which the next sample with the same r
and y gives u — positional: I = u − P, D = 0; velocity: u_previous = u, ΔP = ΔD = 0.

Word formats: float64 and float32, every operation rounded in the format in the order written
in :meth:`PidModel.step` (the generated C follows it).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from convert.errors import InputError
from convert.digital.wordformats import get_format
from convert.digital.pidfixed import PidFixedModel, emit_pid_c_fixed
from convert.digital.codegen import _check_name, _st_real

FORMS = ("positional", "velocity")
ANTI_WINDUP = ("clamp", "track", "none")
WORD_FORMATS = ("float64", "float32", "q15", "q31")


@dataclass(frozen=True)
class PidBlock:
    """Parallel gains kp, ki (1/s), kd (s), derivative filter tf (s), weights b and c, action sign
    (+1 reverse, −1 direct), sample rate fs_hz (Hz), form, limits (low, high) or None,
    anti_windup, tracking_time_s (Tt, s, back-calculation), word_format."""

    kp: float
    ki: float
    kd: float
    tf: float
    b: float
    c: float
    sign: int
    fs_hz: float
    form: str = "positional"
    limits: tuple[float, float] | None = None
    anti_windup: str = "clamp"
    tracking_time_s: float | None = None
    word_format: str = "float64"
    input_range: float | None = None

    @classmethod
    def from_settings(cls, settings, fs_hz: float, **kw) -> PidBlock:
        """From :class:`convert.pid.PidSettings`; ``tracking_time_s`` defaults by the rule of thumb."""
        if not (math.isfinite(fs_hz) and fs_hz > 0):
            raise InputError(f"expected a positive sample rate, found {fs_hz!r}", key="fs")
        form = kw.get("form", "positional")
        if form not in FORMS:
            raise InputError(f"expected one of {', '.join(FORMS)}, found {form!r}", key="form")
        aw = kw.get("anti_windup", "clamp")
        if aw not in ANTI_WINDUP:
            raise InputError(f"expected one of {', '.join(ANTI_WINDUP)}, found {aw!r}", key="anti_windup")
        if form == "velocity" and aw == "track":
            raise InputError(
                "the velocity form stops windup by clamping its accumulated output; back-calculation (track) "
                "is for the positional form",
                key="anti_windup",
            )
        if kw.get("word_format", "float64") not in WORD_FORMATS:
            raise InputError(
                f"the PID block is written in {', '.join(WORD_FORMATS)}, found {kw.get('word_format')!r}",
                key="word_format",
            )
        lim = kw.get("limits")
        if lim is not None and not lim[0] < lim[1]:
            raise InputError(f"expected low < high, found {lim!r}", key="output_limits")
        tt = kw.get("tracking_time_s")
        if tt is None and settings.ki > 0:
            ti = settings.kp / settings.ki if settings.kp > 0 else 1.0 / settings.ki
            td = settings.kd / settings.kp if settings.kp > 0 else 0.0
            tt = math.sqrt(ti * td) if td > 0 else ti
        if tt is not None and not (math.isfinite(tt) and tt > 0):
            raise InputError(f"expected a positive tracking time constant, found {tt!r}", key="tracking_time")
        return cls(
            settings.kp,
            settings.ki,
            settings.kd,
            settings.tf,
            settings.b,
            settings.c,
            settings.sign,
            fs_hz,
            form,
            tuple(lim) if lim else None,
            aw,
            tt,
            kw.get("word_format", "float64"),
            kw.get("input_range"),
        )

    @property
    def sample_period_s(self) -> float:
        return 1.0 / self.fs_hz

    def constants(self) -> dict[str, float]:
        """The per-sample constants in float64 (the model and the code store them in the format)."""
        t = self.sample_period_s
        s = self.sign
        return {
            "kp": s * self.kp,
            "b": self.b,
            "c": self.c,
            "bi": s * self.ki * t,
            "ad": self.tf / (self.tf + t),
            "bd": s * self.kd / (self.tf + t),
            "ao": t / self.tracking_time_s if (self.tracking_time_s and self.anti_windup == "track") else 0.0,
        }

    @property
    def word(self):
        """The :class:`convert.digital.wordformats.WordFormat` of the block."""
        return get_format(self.word_format)

    @property
    def is_fixed(self) -> bool:
        return self.word_format in ("q15", "q31")

    def model(self):
        """The arithmetic model: :class:`PidModel` (float) or
        :class:`convert.digital.pidfixed.PidFixedModel` (Q15/Q31, bit-true)."""
        if self.is_fixed:
            return PidFixedModel(self)
        return PidModel(self)


class PidModel:
    """The arithmetic of a :class:`PidBlock` (the reference its generated code is checked with)."""

    two_inputs = True  # step(setpoint, measurement)

    def __init__(self, block: PidBlock):
        self.block = block
        self.cast = np.float32 if block.word_format == "float32" else float
        self.k = {n: self.cast(v) for n, v in block.constants().items()}
        lim = block.limits
        self.lo = self.cast(lim[0]) if lim else None
        self.hi = self.cast(lim[1]) if lim else None
        self.reset()

    def reset(self) -> None:
        z = self.cast(0.0)
        self.i = self.d = self.ds_old = self.u_old = self.p_old = self.d_old = self.e_old = z

    def _clamp(self, v):
        if self.lo is None:
            return v
        return self.lo if v < self.lo else self.hi if v > self.hi else v

    def set_output(self, u, r, y) -> None:
        c = self.cast
        k = self.k
        u, r, y = c(u), c(r), c(y)
        self.reset()
        p = k["kp"] * (k["b"] * r - y)
        self.ds_old = k["c"] * r - y
        if self.block.form == "positional":
            self.i = u - p
        else:
            self.u_old = u
            self.p_old = p

    def step(self, r, y) -> float:
        c = self.cast
        r, y = c(r), c(y)
        with np.errstate(over="ignore", invalid="ignore"):
            return self._advance(r, y)

    def unguarded_step(self, r, y) -> float:
        """:meth:`step` for a caller that holds ``np.errstate(over="ignore", invalid="ignore")``
        (entering that context costs about a microsecond, as much as a step)."""
        c = self.cast
        return self._advance(c(r), c(y))

    def _advance(self, r, y) -> float:
        k = self.k
        e = r - y
        p = k["kp"] * (k["b"] * r - y)
        ds = k["c"] * r - y
        self.d = k["ad"] * self.d + k["bd"] * (ds - self.ds_old)
        self.ds_old = ds
        if self.block.form == "velocity":
            v = self.u_old + ((p - self.p_old) + k["bi"] * self.e_old + (self.d - self.d_old))
            u = self._clamp(v)
            self.u_old, self.p_old, self.d_old, self.e_old = u, p, self.d, e
            return float(u)
        v = p + self.i + self.d
        u = self._clamp(v)
        aw = self.block.anti_windup
        if aw == "track":
            self.i = self.i + k["bi"] * e + k["ao"] * (u - v)
        elif aw == "clamp" and self.lo is not None:
            step = k["bi"] * e
            if (self.lo <= v <= self.hi) or (v > self.hi and step < 0) or (v < self.lo and step > 0):
                self.i = self.i + step
        else:
            self.i = self.i + k["bi"] * e
        return float(u)

    def integral(self) -> float:
        """The accumulating state in output units: I (positional) or the last output (velocity)."""
        return float(self.i if self.block.form == "positional" else self.u_old)

    def run(self, r, y) -> np.ndarray:
        return np.array([self.step(a, b) for a, b in zip(np.asarray(r, float), np.asarray(y, float))])


# ----------------------------------------------------------------------------- C99
def pid_head(block: PidBlock, name: str, source: str, lang: str = "c") -> list[str]:
    """The header comment's lines of a generated PID block (C or Structured Text)."""
    k = block.constants()
    lim = block.limits
    ty = {"float64": ("double", "LREAL"), "float32": ("float", "REAL"), "q15": ("int16_t", ""), "q31": ("int32_t", "")}
    t = ty[block.word_format][0 if lang == "c" else 1]
    call = f"{name}_step" if lang == "c" else f"the block {name}"
    bump = (
        "NAME_set_output(st, u, setpoint, measurement) before switching"
        if lang == "c"
        else "track = TRUE with track_value = u (the manual output) while in manual"
    )
    return [
        f"{name}: PID block generated by loopshift (check it on a bench before a live swap).",
        f"Source: {source}",
        f"Sample rate {block.fs_hz:.10g} Hz; {block.form} form; word format {block.word_format} ({t}).",
        f"Gains (parallel, action sign folded in): kp = {k['kp']:.10g}, ki = {block.sign * block.ki:.10g} 1/s, "
        f"kd = {block.sign * block.kd:.10g} s, derivative filter Tf = {block.tf:.10g} s; setpoint weights "
        f"b = {block.b:.6g}, c = {block.c:.6g}.",
        f"Output limits: {lim[0]:.10g} .. {lim[1]:.10g}" if lim else "Output limits: none (no clamp in this block)",
        (
            "Anti-windup: the output clamp (velocity form: the accumulated output is clamped)"
            if block.form == "velocity"
            else f"Anti-windup: {block.anti_windup}"
            + (f", tracking time constant Tt = {block.tracking_time_s:.6g} s" if block.anti_windup == "track" else "")
        ),
        f"Call {call} once per sample; {bump}",
        "from manual to automatic makes the next output equal u (bumpless transfer).",
    ]


def pid_c_header(name: str, head: list[str], fields: list[str], t: str) -> str:
    """``NAME.h`` of a PID block: the comment ``head``, the state type with ``fields``, and the
    three functions on the signal type ``t``."""
    return "\n".join(
        ["/*"]
        + [f" * {x.replace('NAME', name)}" for x in head]
        + [" */", f"#ifndef {name.upper()}_H", f"#define {name.upper()}_H", "", "#include <stdint.h>", ""]
        + ["typedef struct {"]
        + [f"    {x}" for x in fields]
        + [
            f"}} {name}_state;",
            "",
            f"void {name}_reset({name}_state *st);",
            f"{t} {name}_step({name}_state *st, {t} setpoint, {t} measurement);",
            f"void {name}_set_output({name}_state *st, {t} u, {t} setpoint, {t} measurement);",
            "",
            "#endif",
            "",
        ]
    )


def emit_pid_c(block: PidBlock, name: str, *, source: str = "") -> dict[str, str]:
    """``NAME.h``/``NAME.c`` for a PID block: ``T NAME_step(NAME_state *st, T setpoint, T
    measurement)``, ``NAME_reset``, ``NAME_set_output(st, u, setpoint, measurement)``; T is
    double, float, or a Q15/Q31 word (:mod:`convert.digital.pidfixed`)."""
    _check_name(name)
    head = pid_head(block, name, source)
    if block.is_fixed:
        return emit_pid_c_fixed(block, name, head)
    single = block.word_format == "float32"
    t = "float" if single else "double"
    cast = np.float32 if single else float

    def lit(x):
        text = float(cast(x)).hex()
        return f"({text}f)" if single else f"({text})"

    k = block.constants()
    lim = block.limits
    h = pid_c_header(name, head, [f"{t} i, d, ds_old, u_old, p_old, d_old, e_old;"], t)
    c = [
        f'#include "{name}.h"',
        "",
        f"void {name}_reset({name}_state *st)",
        "{",
        "    st->i = 0; st->d = 0; st->ds_old = 0; st->u_old = 0; st->p_old = 0; st->d_old = 0; st->e_old = 0;",
        "}",
        "",
        f"void {name}_set_output({name}_state *st, {t} u, {t} r, {t} y)",
        "{",
        f"    {t} p = {lit(k['kp'])} * ({lit(k['b'])} * r - y);",
        f"    {name}_reset(st);",
        f"    st->ds_old = {lit(k['c'])} * r - y;",
    ]
    c += ["    st->i = u - p;"] if block.form == "positional" else ["    st->u_old = u;", "    st->p_old = p;"]
    c += [
        "}",
        "",
        f"{t} {name}_step({name}_state *st, {t} r, {t} y)",
        "{",
        f"    {t} e = r - y;",
        f"    {t} p = {lit(k['kp'])} * ({lit(k['b'])} * r - y);",
        f"    {t} ds = {lit(k['c'])} * r - y;",
        f"    {t} v, u;",
        f"    st->d = {lit(k['ad'])} * st->d + {lit(k['bd'])} * (ds - st->ds_old);",
        "    st->ds_old = ds;",
    ]

    def clamp(var):
        if not lim:
            return [f"    u = {var};"]
        return [f"    u = {var} < {lit(lim[0])} ? {lit(lim[0])} : ({var} > {lit(lim[1])} ? {lit(lim[1])} : {var});"]

    if block.form == "velocity":
        c += [f"    v = st->u_old + ((p - st->p_old) + {lit(k['bi'])} * st->e_old + (st->d - st->d_old));"]
        c += clamp("v")
        c += ["    st->u_old = u; st->p_old = p; st->d_old = st->d; st->e_old = e;", "    return u;", "}", ""]
    else:
        c += ["    v = p + st->i + st->d;"] + clamp("v")
        if block.anti_windup == "track":
            c.append(f"    st->i = st->i + {lit(k['bi'])} * e + {lit(k['ao'])} * (u - v);")
        elif block.anti_windup == "clamp" and lim:
            c += [
                f"    {{ {t} step = {lit(k['bi'])} * e;",
                f"      if ((v >= {lit(lim[0])} && v <= {lit(lim[1])}) || (v > {lit(lim[1])} && step < 0) || "
                f"(v < {lit(lim[0])} && step > 0))",
                "          st->i = st->i + step; }",
            ]
        else:
            c.append(f"    st->i = st->i + {lit(k['bi'])} * e;")
        c += ["    (void)st->e_old;", "    return u;", "}", ""]
    return {f"{name}.h": h, f"{name}.c": "\n".join(c)}


# ----------------------------------------------------------------------------- Structured Text
def emit_pid_st(block: PidBlock, name: str, *, source: str = "") -> dict[str, str]:
    """``{"NAME.st": text}``: the PID block as an IEC 61131-3 ``FUNCTION_BLOCK`` (float64 as
    LREAL, float32 as REAL), statement for statement :meth:`PidModel.step`.

    Inputs ``setpoint``, ``measurement``; ``manual`` (TRUE: the output follows ``manual_output``
    and the state is set so the first automatic sample continues from it — output tracking and
    bumpless transfer, :meth:`PidModel.set_output` every sample); ``reset`` (TRUE: clear the
    state first). Output ``u``. Statements: assignments with + − * and parentheses, IF/ELSIF/ELSE
    with comparisons, AND, OR."""
    _check_name(name)
    if block.is_fixed:
        raise InputError(
            f"Structured Text is offered in float64 (LREAL) and float32 (REAL); {block.word_format} is for C",
            key="format",
        )
    single = block.word_format == "float32"
    ty = "REAL" if single else "LREAL"
    cast = np.float32 if single else float

    def lit(x) -> str:
        text = _st_real(float(cast(x)), single)
        return f"({text})" if text.startswith("-") else text

    k = block.constants()
    lim = block.limits
    states = ("i", "d", "ds_old", "u_old", "p_old", "d_old", "e_old")
    head = pid_head(block, name, source, lang="st")
    lines = (
        ["(*"]
        + [f" * {x}" for x in head]
        + [
            " * Inputs: setpoint, measurement; manual (TRUE: u follows manual_output, the state tracks it);",
            " * reset (TRUE: clear the state). Output: u.",
            " *)",
            f"FUNCTION_BLOCK {name}",
            "VAR_INPUT",
            f"    setpoint : {ty};",
            f"    measurement : {ty};",
            "    manual : BOOL;",
            f"    manual_output : {ty};",
            "    reset : BOOL;",
            "END_VAR",
            "VAR_OUTPUT",
            f"    u : {ty};",
            "END_VAR",
            "VAR",
        ]
        + [f"    {n} : {ty};" for n in states + ("e", "p", "ds", "v", "stp")]
        + ["END_VAR", ""]
    )
    zero = [f"    {n} := 0.0;" for n in states]
    lines += ["IF reset THEN"] + zero + ["END_IF;"]
    lines += [
        "e := setpoint - measurement;",
        f"p := {lit(k['kp'])} * ({lit(k['b'])} * setpoint - measurement);",
        f"ds := {lit(k['c'])} * setpoint - measurement;",
        "IF manual THEN",
        *zero,
        "    ds_old := ds;",
    ]
    if block.form == "positional":
        lines.append("    i := manual_output - p;")
    else:
        lines += ["    u_old := manual_output;", "    p_old := p;"]
    lines += [
        "    u := manual_output;",
        "ELSE",
        f"    d := {lit(k['ad'])} * d + {lit(k['bd'])} * (ds - ds_old);",
        "    ds_old := ds;",
    ]
    if block.form == "velocity":
        lines.append(f"    v := u_old + ((p - p_old) + {lit(k['bi'])} * e_old + (d - d_old));")
    else:
        lines.append("    v := p + i + d;")
    if lim:
        lo, hi = lit(lim[0]), lit(lim[1])
        lines += [
            f"    IF v < {lo} THEN",
            f"        u := {lo};",
            f"    ELSIF v > {hi} THEN",
            f"        u := {hi};",
            "    ELSE",
            "        u := v;",
            "    END_IF;",
        ]
    else:
        lines.append("    u := v;")
    if block.form == "velocity":
        lines.append("    u_old := u; p_old := p; d_old := d; e_old := e;")
    elif block.anti_windup == "track":
        lines.append(f"    i := i + {lit(k['bi'])} * e + {lit(k['ao'])} * (u - v);")
    elif block.anti_windup == "clamp" and lim:
        lines += [
            f"    stp := {lit(k['bi'])} * e;",
            f"    IF ((v >= {lo}) AND (v <= {hi})) OR ((v > {hi}) AND (stp < 0.0)) OR ((v < {lo}) AND (stp > 0.0)) THEN",
            "        i := i + stp;",
            "    END_IF;",
        ]
    else:
        lines.append(f"    i := i + {lit(k['bi'])} * e;")
    lines += ["END_IF;", "END_FUNCTION_BLOCK", ""]
    return {f"{name}.st": "\n".join(lines)}
