"""What a word format does to the firmware PID block (:mod:`convert.digital.pidblock`): the
analysis behind the report's word-format row and checks when a case asks for
``structure = "pid_block"``, with the same figures as :mod:`convert.digital.quantized` gives the
linear structures.

* linear equivalent — from the error to the output, unsaturated (the feedback path: b and c
  act on the setpoint only): C(z) = kp + bi·z⁻¹/(1 − z⁻¹) + bd·(1 − z⁻¹)/(1 − ad·z⁻¹);
* coefficient error — the stored constants against the exact ones, relative to each;
* stability — the integral is an accumulator (its pole is exactly z = 1 in every format); the
  derivative filter's pole ad must lie inside the unit circle;
* response error — the stored constants' linear equivalent against the exact one, over the band;
* overflow (fixed point) — headroom of the derivative word over its peak-gain bound and of the
  integral's full scale over U + |P|max (both ≥ 0 dB by construction, see
  :mod:`convert.digital.pidfixed`);
* integrator stall — the smallest constant error that still moves the integral (the
  accumulating state) by at least half of what exact arithmetic does over 64 samples, started
  with the output held at the level U and moving toward zero, in input units; a failure above
  the input resolution (default R / 2^15).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from convert.errors import LoopshiftError
from convert.digital.pidfixed import fixed_pid
from convert.controller import Controller
from convert.digital.quantized import (
    FormatAnalysis,
    RESPONSE_LIMITS,
    assumed_scaling,
    stall_failure,
    smallest_moving,
)
from convert.compare.frequency import compare_responses

STALL_SAMPLES = 64


def linear_b_a(k: dict, path: str = "error") -> tuple[np.ndarray, np.ndarray]:
    """b/a (ascending in z⁻¹) of the block's feedback path from per-sample constants ``k``
    (kp, bi, bd, ad): the common denominator (1 − z⁻¹)(1 − ad·z⁻¹). ``path="setpoint"``: the
    setpoint -> output path, P on b·r and D on c·r (the weights ``k["b"]``, ``k["c"]``)."""
    kp, bi, bd, ad = (float(k[n]) for n in ("kp", "bi", "bd", "ad"))
    if path == "setpoint":
        kp, bd = kp * float(k["b"]), bd * float(k["c"])
    one = np.array([1.0, -1.0])
    fil = np.array([1.0, -ad])
    num = kp * np.convolve(one, fil)
    num = num + bi * np.convolve([0.0, 1.0], fil)
    num = num + bd * np.convolve(one, one)
    return num, np.convolve(one, fil)


def stored_constants(block) -> dict[str, float]:
    """The per-sample constants as the format stores them (float64 values)."""
    k = block.constants()
    if block.is_fixed:
        return fixed_pid(block).stored(block.form)
    if block.word_format == "float32":
        return {n: float(np.float32(v)) for n, v in k.items()}
    return dict(k)


def linear_controller(block, stored: bool = True, path: str = "error"):
    """The block's linear equivalent as a digital :class:`Controller` (stored or exact constants);
    ``path="setpoint"``: its setpoint -> output path with the weights b, c (see :func:`linear_b_a`)."""
    b, a = linear_b_a(stored_constants(block) if stored else block.constants(), path)
    name = "PID block" if path == "error" else "PID block setpoint path"
    return Controller.from_b_a(b, a, block.sample_period_s, name=name)


@dataclass(frozen=True)
class PidBlockAnalysis:
    """The figures for the PID block in one word format (see the module doc); the interface of
    :class:`convert.digital.quantized.FormatAnalysis` where the report reads it."""

    word_format: str
    block: object = None
    refused: str | None = None
    coefficient_error: float | None = None
    max_pole_radius: float | None = None
    free_pole_radius: float | None = None
    response_error: float | None = None
    gain_error_db: float | None = None
    phase_error_deg: float | None = None
    error_at_hz: float | None = None
    headroom_db: float | None = None
    stall_error: float | None = None
    stall_limit: float | None = None
    input_range: float | None = None
    output_level: float | None = None
    failures: tuple[str, ...] = ()
    notes: tuple[str, ...] = field(default=())
    structure: str = "pid_block"
    response_limits: tuple[float, float] = (1.0, 5.0)
    stall_unchecked: str | None = None  # why the stall figure was not decided (no output level)
    dead_band: float | None = None  # (the linear structures' fixed-point dead band; not applicable)

    @property
    def ok(self) -> bool:
        return self.refused is None and not self.failures

    @property
    def realized(self):
        """The block (its ``model()`` is what the loop simulation runs), None when refused."""
        return None if self.refused else self.block

    def checks(self) -> list[dict]:
        """The always-on verdict checks, exactly as :meth:`FormatAnalysis.checks` makes them
        (built, stored poles, overflow, response, integrator stall)."""
        return FormatAnalysis.checks(self)

    def summary(self) -> dict:
        out = {k: v for k, v in self.__dict__.items() if k != "block"}
        out["structure"] = "pid_block"
        if self.block is not None and not self.refused:
            out["form"] = self.block.form
            out["anti_windup"] = self.block.anti_windup
            out["tracking_time_s"] = self.block.tracking_time_s if self.block.anti_windup == "track" else None
            out["limits"] = self.block.limits
            out["constants"] = self.block.constants()
            out["stored_constants"] = stored_constants(self.block)
            if self.block.is_fixed:
                q = fixed_pid(self.block)
                out["words"] = {n: getattr(q, n) for n in q.__dataclass_fields__}
        return out


def analyze_block(block, band_f_hz, *, input_resolution: float | None = None, response_limits=None) -> PidBlockAnalysis:
    """Analyze ``block`` (a :class:`PidBlock`) in its word format over the band (Hz);
    ``response_limits`` (dB, deg, either None for the default) that the stored constants' response
    may depart from the exact one (:data:`convert.digital.quantized.RESPONSE_LIMITS`)."""
    limits = tuple(d if v is None else float(v) for v, d in zip(response_limits or (None, None), RESPONSE_LIMITS))
    lim = block.limits
    exact = linear_controller(block, stored=False)
    u, r, res, notes = assumed_scaling(
        exact, max(abs(lim[0]), abs(lim[1])) if lim else None, block.input_range, input_resolution
    )
    base = dict(
        word_format=block.word_format,
        block=block,
        input_range=r,
        output_level=u,
        stall_limit=res,
        response_limits=limits,
    )
    try:
        stored = stored_constants(block)
        block.model()
    except LoopshiftError as exc:
        return PidBlockAnalysis(**base, refused=exc.message, notes=tuple(notes))
    k = block.constants()
    cerr = max((abs(stored[n] - v) / abs(v) for n, v in k.items() if v), default=0.0)
    failures: list[str] = []
    ad = stored["ad"]
    if abs(ad) >= 1.0:
        failures.append(
            f"unstable: the derivative filter's pole is stored at ad = {ad:.10g} (Tf/(Tf + T) rounds to 1 in "
            f"{block.word_format}); raise the filter time constant's share of the sample period or use float64"
        )
    f = np.asarray(band_f_hz, dtype=float)
    got = linear_controller(block).frequency_response(f)
    ref = exact.frequency_response(f)
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = np.nan_to_num(np.abs(got / ref - 1), nan=np.inf)

    err = compare_responses(ref, got, f)
    i = int(np.argmax(rel)) if rel.size else 0
    gdb, pdeg = err.max_gain_error_db, err.max_phase_error_deg
    if not (math.isfinite(gdb) and math.isfinite(pdeg)) or gdb > limits[0] or pdeg > limits[1]:
        failures.append(
            f"response: quantization alone moves the block's response by {gdb:.3g} dB / {pdeg:.3g} deg in the band, "
            f"above {limits[0]:g} dB / {limits[1]:g} deg: the stored constants are not the designed controller"
        )
    headroom = None
    if block.is_fixed:
        q = fixed_pid(block)
        parts = [20 * math.log10(q.output_level * 2.0**q.g_int / (q.output_level + q.p_bound))]
        if q.d_bound > 0:
            parts.append(20 * math.log10(q.output_level * 2.0**q.g_d / q.d_bound))
        headroom = min(parts)
        lsb_d = q.output_level * 2.0**q.g_d / 2.0 ** (q.bits - 1)
        if q.d_bound > 0 and lsb_d > 0.001 * q.output_level:
            notes.append(
                f"the derivative word's LSB is {lsb_d:.4g} output units ({100 * lsb_d / q.output_level:.3g} % of the "
                f"output level): its full scale {q.output_level * 2.0**q.g_d:.4g} covers the peak-gain bound "
                f"{q.d_bound:.4g} of a full-range input jump, so the derivative action is resolved only that finely "
                "(a smaller input range, a longer filter time or Q31 refines it)"
            )
        if headroom < 0:
            failures.append(f"overflow: a node's bound is {-headroom:.3g} dB above its full scale")
    stall = unchecked = None
    if block.ki > 0 and not lim and block.word_format != "float64":
        unchecked = (
            f"not decided: {block.word_format} holds the integral at the output's level, and no output level was "
            "given (give output limits)"
        )
    elif block.ki > 0:
        stall = block_stall(block, r, u)
        failures += stall_failure(stall, u, res)
    return PidBlockAnalysis(
        **base,
        coefficient_error=cerr,
        max_pole_radius=1.0 if block.ki > 0 else abs(ad),
        free_pole_radius=abs(ad),
        response_error=float(rel[i]) if rel.size else 0.0,
        gain_error_db=gdb,
        phase_error_deg=pdeg,
        error_at_hz=float(f[i]) if f.size else None,
        headroom_db=headroom,
        stall_error=stall,
        stall_unchecked=unchecked,
        failures=tuple(failures),
        notes=tuple(notes),
    )


def block_stall(block, r: float, u: float) -> float | None:
    """Smallest constant error (from ``r`` down by halves, then bisection) above which every error
    tried moves the block's integral (:meth:`integral`) over :data:`STALL_SAMPLES` samples by at
    least half of bi·e·STALL_SAMPLES, started with the output held at the level of the larger
    limit (or ``u``) and moving toward zero (setpoint = e, measurement = 0, so P and D are
    constant); the largest error tried moves the output by at most a quarter of the span between
    the limits over the window. None if even that error does not move it."""
    lim = block.limits
    level = (lim[1] if abs(lim[1]) >= abs(lim[0]) else lim[0]) if lim else u
    bi = block.constants()["bi"]
    direction = -math.copysign(1.0, level) * math.copysign(1.0, bi)

    def moves(e: float) -> bool:
        m = block.model()
        m.set_output(level, direction * e, 0.0)
        m.step(direction * e, 0.0)
        start = m.integral()
        for _ in range(STALL_SAMPLES):
            m.step(direction * e, 0.0)
        want = bi * direction * e * STALL_SAMPLES
        return (m.integral() - start) / want >= 0.5

    # the largest error tried moves the output by a quarter of the span between the limits over the
    # window, so the clamp (and conditional integration) never acts during the test
    return smallest_moving(moves, min(r, (lim[1] - lim[0]) / (4 * STALL_SAMPLES * abs(bi))) if lim else r)
