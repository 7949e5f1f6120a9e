"""What a structure in a word format does to a controller: the analysis behind the report's
word-format row, ``loopshift digital --structure`` and ``loopshift code --json``.

For one structure × word format (:func:`analyze`):

* coefficient error — the largest |stored − exact| over a section's coefficients, relative to
  that section's largest coefficient;
* pole and zero displacement — the roots of the stored coefficients (computed in w = z − 1 or in
  δ, exactly shifted, so roots crowding at z = 1 are resolved) against the directly mapped roots;
* stability — a pole of the stored coefficients on or outside the unit circle is a failure,
  except a pole exactly at z = 1 the design has (an integrator kept exactly);
* response error — the stored coefficients' response (exactly evaluated) against the directly
  mapped roots, over the band: quantization alone, no hold, no delay;
* overflow — the peak-gain bound ‖h‖₁·R per section output (R the input range); fixed point
  fails when a bound exceeds its node's full scale, float when it exceeds the format's range;
* limit cycles (fixed point) — from random states with zero input, per section without
  unit-circle poles, the largest output left after the linear response has died out;
* response limit — the response error above fails when it exceeds 1 dB or 5° anywhere in the band
  (the tool's own defaults for "the same controller"; a case's gain/phase criteria replace them):
  rounding can move a zero onto z = 1 and take away the DC gain, or turn the sign;
* dead band (fixed point) — a section without a designed integrator holds any constant output y
  with |(1 + Σa)·y| ≤ ½ LSB after rounding (y = round(y − (1 + Σa)·y)): it cannot settle closer
  than that to its true value. Fails above 1 % of the node's full scale (a few LSB are usual;
  a percent is an offset the plant sees);
* integrator stall — for a controller with a pole at z = 1: the largest constant error that
  still stalls the output (moves it by less than half of what the exact controller does over 64
  samples, started on the exact solution for that error as it passes an output level, so no
  transient), over output levels of both signs between U/2 and U, moving toward zero and away
  from it, in controller input units (a scan, see :func:`_stall`: with separately rounded
  products "moves" is not monotonic in the error). It fails when larger than the stated input
  resolution (default: R / 2^15). Float32 and fixed point need the output level (the integral's value sets
  the figure): without one the check is left undecided, never passed on an assumed level.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from convert.digital.fixedpoint import Realized, peak_gains, realize, realized_poles, z_equivalent
from convert.digital.structures import STRUCTURES, build_layout, section_response, section_zeros, structure_name
from convert.digital.wordformats import FORMATS, WordFormat, get_format
from convert.errors import LoopshiftError
from convert.compare.frequency import compare_responses
from convert.digital.statewords import limit_cycles
from convert.controller import Controller
from convert.digital.roots import RootForm, _pairs

STALL_TO = 64
#: the integrator-stall scan: output levels of each sign, errors a decade, decades below R, fine-grid points
STALL_LEVELS = 8
STALL_PER_DECADE = 25
STALL_DECADES = 12
STALL_FINE = 512
STALL_FINE_COMBOS = 4
STALL_WINDOWS = (1.0, 0.25, 1 / 16, 1 / 64)
LIMIT_CYCLE_TRIALS = 32
LIMIT_CYCLE_SAMPLES = 20000
#: the stored coefficients' response may depart from the design by this much (dB, deg) by default
RESPONSE_LIMITS = (1.0, 5.0)
#: a fixed-point dead band above this fraction of the node's full scale fails
DEAD_BAND_LIMIT = 0.01

# notes that state the scaling the analysis assumed (not findings): U, then R
ASSUMED_SCALING = ("output level U = ", "input range R = ")


@dataclass(frozen=True)
class FormatAnalysis:
    """The figures for one structure × word format (see the module doc). ``failures`` are
    one-line reasons the realization must not be used; ``refused`` says why it could not be
    built at all (then the figures are None)."""

    structure: str
    word_format: str
    realized: Realized | None = None
    refused: str | None = None
    coefficient_error: float | None = None
    pole_shift: float | None = None
    zero_shift: float | None = None
    max_pole_radius: float | None = None
    free_pole_radius: float | None = None  # largest |z| apart from the kept integrators
    unstable_poles: tuple[complex, ...] = ()
    response_error: float | None = None
    gain_error_db: float | None = None
    phase_error_deg: float | None = None
    error_at_hz: float | None = None
    node_bounds: tuple[float, ...] = ()
    headroom_db: float | None = None
    limit_cycle: float | None = None  # largest, controller output units
    limit_cycle_lsb: int | None = None
    stall_error: float | None = None
    stall_limit: float | None = None
    stall_unchecked: str | None = None  # why the stall figure was not decided (no output level)
    stall_at: str | None = None  # the output level and direction of the stall_error figure
    dead_band: float | None = None  # largest fixed-point dead band, fraction of its node's full scale
    response_limits: tuple[float, float] = RESPONSE_LIMITS
    input_range: float | None = None
    output_level: float | None = None
    failures: tuple[str, ...] = ()
    notes: tuple[str, ...] = field(default=())

    def checks(self) -> list[dict]:
        """The always-on verdict checks of a firmware realization (stability of the stored
        coefficients, overflow from the input range, integrator stall), pass or fail with the number."""
        name = f"{self.structure} / {self.word_format}"
        if self.refused:
            return [
                dict(
                    key="firmware_realizable",
                    label=f"{name} can be built",
                    unit="",
                    limit=None,
                    value=None,
                    status="fail",
                    note=self.refused,
                )
            ]
        fails = " ".join(self.failures)
        out = [
            dict(
                key="firmware_stability",
                label=f"{name}: stored poles inside |z| = 1 (integrators apart)",
                unit="|z|",
                limit=1.0,
                value=self.free_pole_radius,
                status="fail" if ("unstable" in fails or "exactly at z = 1" in fails or "drift" in fails) else "pass",
                note=next(
                    (f for f in self.failures if "unstable" in f or "exactly at z = 1" in f or "drift" in f),
                    f"largest |z| = {self.free_pole_radius:.10g} apart from the designed integrators (poles "
                    "at z = 1), which count as kept when stored exactly or within a year's doubling time",
                ),
            )
        ]
        if self.realized is not None and self.realized.word.is_fixed:
            out.append(
                dict(
                    key="firmware_overflow",
                    label=f"{name}: no overflow for inputs within ±{self.input_range:.4g}",
                    unit="dB headroom",
                    limit=None,
                    value=self.headroom_db,
                    status="fail" if "overflow" in fails else "pass",
                    note=next((f for f in self.failures if "overflow" in f), "peak-gain (L1) bound per node"),
                )
            )
        gl, pl = self.response_limits
        bad_response = next((f for f in self.failures if f.startswith("response:")), None)
        # the figure shown is the one nearer (or further past) its limit: gain in dB or phase in deg
        g, p = self.gain_error_db or 0.0, self.phase_error_deg or 0.0
        by_phase = pl > 0 and gl > 0 and p / pl > g / gl
        out.append(
            dict(
                key="firmware_response",
                label=f"{name}: stored coefficients follow the design",
                unit="deg" if by_phase else "dB",
                limit=pl if by_phase else gl,
                value=p if by_phase else g,
                status="fail" if bad_response else "pass",
                note=bad_response
                or f"gain {self.gain_error_db:.3g} dB, phase {self.phase_error_deg:.3g} deg from quantization alone "
                f"(limit {gl:g} dB / {pl:g} deg)",
            )
        )
        if self.dead_band is not None:
            bad_band = next((f for f in self.failures if f.startswith("dead band:")), None)
            out.append(
                dict(
                    key="firmware_dead_band",
                    label=f"{name}: dead band with zero input",
                    unit="of full scale",
                    limit=DEAD_BAND_LIMIT,
                    value=self.dead_band,
                    status="fail" if bad_band else "pass",
                    note=bad_band or "largest constant output a section holds against rounding, per its node",
                )
            )
        if self.stall_unchecked:
            out.append(
                dict(
                    key="firmware_stall",
                    label=f"{name}: integrator moves at the input resolution",
                    unit="input units",
                    limit=self.stall_limit,
                    value=None,
                    status="skipped",
                    note=self.stall_unchecked,
                )
            )
        elif self.stall_error is not None or "stall" in fails:
            out.append(
                dict(
                    key="firmware_stall",
                    label=f"{name}: integrator moves at the input resolution",
                    unit="input units",
                    limit=self.stall_limit,
                    value=self.stall_error,
                    status="fail" if "stall" in fails else "pass",
                    note=next(
                        (f for f in self.failures if "stall" in f),
                        f"largest error that still stalls the integral, output levels up to {self.output_level:.4g} "
                        f"of either sign, toward and away from zero ({self.stall_at})"
                        if getattr(self, "stall_at", None)
                        else f"smallest error that moves the integral at output level {self.output_level:.4g}",
                    ),
                )
            )
        return out

    @property
    def ok(self) -> bool:
        return self.refused is None and not self.failures

    def summary(self) -> dict:
        out = {k: v for k, v in self.__dict__.items() if k != "realized"}
        if self.realized is not None:
            out["sections"] = [{"b": list(s.b), "a": list(s.a)} for s in self.realized.sections]
            if self.realized.word.is_fixed:
                out["node_scales"] = list(self.realized.node_scales)
                out["sections_int"] = [
                    {"b": list(s.b_int), "a": list(s.a_int), "shift": s.shift, "b_shift": s.b_shift}
                    for s in self.realized.sections
                ]
            if self.realized.layout.delta_step:
                out["delta_step_s"] = self.realized.layout.delta_step
        return out


def default_input_range(roots, output_level: float) -> float:
    """The error that drives the output to ``output_level`` through the controller's largest
    gain between fs/1000 and fs/2 (above the integral action of any sensible controller): used
    when no input range is stated."""
    t = roots.sample_period_s
    f = np.logspace(np.log10(1e-3 / t), np.log10(0.5 / t), 200)
    g = float(np.max(np.abs(roots.frequency_response(f))))
    return output_level / g if g > 0 and math.isfinite(g) else output_level


def assumed_scaling(
    form, output_level: float | None, input_range: float | None, input_resolution: float | None
) -> tuple[float, float, float, list[str]]:
    """(U, R, resolution, notes): the output level U (1 when not given), the input range R
    (:func:`default_input_range` of ``form`` when not given) and the smallest error the integral
    must act on (R / 2^15 when not given), each in the controller's units, with a note for every
    value assumed (each note starts with its :data:`ASSUMED_SCALING` prefix)."""
    notes = []
    u = float(output_level) if output_level else 1.0
    if not output_level:
        notes.append(f"{ASSUMED_SCALING[0]}1 (no output limits given)")
    r = float(input_range) if input_range else default_input_range(form, u)
    if not input_range:
        notes.append(
            f"{ASSUMED_SCALING[1]}{r:.4g} (the error that drives the output to U through the largest gain "
            "between fs/1000 and fs/2)"
        )
    res = float(input_resolution) if input_resolution else r / 2**15
    return u, r, res, notes


def _match(exact, got) -> float:
    exact, got = list(exact), list(got)
    worst = 0.0
    for p in exact:
        if not got:
            break
        j = int(np.argmin([abs(p - q) for q in got]))
        worst = max(worst, abs(p - got.pop(j)))
    return worst


def analyze(
    roots,
    structure: str,
    word_format: str | WordFormat,
    band_f_hz,
    *,
    b=None,
    a=None,
    input_range: float | None = None,
    output_level: float | None = None,
    input_resolution: float | None = None,
    response_limits: tuple[float | None, float | None] | None = None,
) -> FormatAnalysis:
    """Analyze the controller with z-domain ``roots`` (:class:`RootForm`; ``b``/``a`` its
    expanded polynomial for the direct forms) in ``structure`` × ``word_format`` over the band
    ``band_f_hz`` (Hz). ``input_range`` R and ``output_level`` U in controller input/output
    units (defaults: U = 1, R = :func:`default_input_range`); ``input_resolution`` the smallest
    error the integrator must still act on (default R / 2^15); ``response_limits`` (dB, deg) the
    largest response error of the stored coefficients (default :data:`RESPONSE_LIMITS`; a None
    entry keeps its default)."""
    limits = tuple(d if v is None else float(v) for v, d in zip(response_limits or (None, None), RESPONSE_LIMITS))
    word = word_format if isinstance(word_format, WordFormat) else get_format(word_format)
    layout = build_layout(structure, roots, b, a)
    u, r, res, notes = assumed_scaling(roots, output_level, input_range, input_resolution)
    base = dict(
        structure=layout.structure,
        word_format=word.name,
        input_range=r,
        output_level=u,
        stall_limit=res,
        response_limits=limits,
    )
    try:
        real = realize(layout, word, input_range=input_range if word.is_fixed else r, output_level=u)
    except LoopshiftError as exc:
        return FormatAnalysis(**base, refused=exc.message, notes=tuple(notes))
    f = np.asarray(band_f_hz, dtype=float)
    t = layout.sample_period_s
    failures: list[str] = []

    # coefficients and roots
    cerr = 0.0
    for k, (s_exact, s_q) in enumerate(zip(layout.sections, real.sections)):
        exact = np.concatenate([np.asarray(s_exact.b) * _ratio(real, k), np.asarray(s_exact.a)])
        got = np.concatenate([s_q.b, s_q.a])
        scale = max(np.max(np.abs(exact)), 1e-300)
        cerr = max(cerr, float(np.max(np.abs(got - exact)) / scale))
    poles_q = realized_poles(real)
    designed_ones = sum(1 for s in layout.sections for p in s.poles if p == 1)
    got_ones = sum(n for _, n in poles_q)
    all_q = [p for ps, _ in poles_q for p in ps]
    all_exact = [p for s in layout.sections for p in s.poles]
    pole_shift = _match(all_exact, all_q)
    zeros_q = [z for s in real.sections for z in section_zeros(real.form, s.b, _delta(real))]
    zero_shift = _match([z for s in layout.sections for z in s.zeros], zeros_q)
    others = [p for ps, n in poles_q for p in ps[n:]]
    # a designed integrator whose stored pole is not exactly 1: accepted when it would take at
    # least a year of operation to double (|p| − 1 ≤ ln 2 / samples per year)
    year = math.log(2) / (365.25 * 86400 / t)
    for _ in range(max(designed_ones - got_ones, 0)):
        near = min(others, key=lambda p: abs(p - 1), default=None)
        if near is not None and abs(near - 1) < 1e-2 and abs(near) - 1 <= year:
            others.remove(near)
            if abs(near) > 1:
                notes.append(
                    f"the integrator pole is stored at |z| = 1 + {abs(near) - 1:.2g}: its drift doubles only "
                    f"after {math.log(2) / math.log(abs(near)) * t / 86400 / 365.25:.3g} years"
                )
            else:
                tc = t / max(1 - abs(near), 1e-300)
                notes.append(
                    f"the integrator pole moved from z = 1 to |z| = {abs(near):.12g}: it leaks with a time "
                    f"constant of {tc:.4g} s (it no longer removes a steady error exactly)"
                )
    unstable = tuple(p for p in others if abs(p) >= 1.0)
    free_radius = max((abs(p) for p in others), default=0.0)
    max_radius = max([abs(p) for p in all_q], default=0.0)
    if unstable:
        worst = max(unstable, key=abs)
        failures.append(
            f"unstable: a pole of the stored coefficients at |z| = {abs(worst):.8g} "
            f"(z = {_c(worst)}); its output grows without bound"
        )
    if got_ones > designed_ones:
        failures.append(
            f"{got_ones - designed_ones} pole(s) exactly at z = 1 the design does not have (a new integrator)"
        )

    # response
    resp = realized_response(real, f)
    ref = roots.frequency_response(f)
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = np.nan_to_num(np.abs(resp / ref - 1), nan=np.inf)
    i = int(np.argmax(rel)) if rel.size else 0
    gdb = pdeg = 0.0
    if rel.size:
        err = compare_responses(ref, resp, f)
        gdb, pdeg = err.max_gain_error_db, err.max_phase_error_deg
        if not (math.isfinite(gdb) and math.isfinite(pdeg)) or gdb > limits[0] or pdeg > limits[1]:
            failures.append(
                f"response: quantization alone moves the response by {gdb:.3g} dB / {pdeg:.3g} deg in the band "
                f"(largest relative error at {float(f[i]):.4g} Hz), above {limits[0]:g} dB / {limits[1]:g} deg: "
                "the stored coefficients are not the designed controller"
            )

    # overflow: a df1 fixed-point realization carries its stored words' own bounds (realize)
    if word.is_fixed and real.form == "df1":
        bounds = tuple(real.node_bounds)
    else:
        bounds = tuple(g * r for g in peak_gains(layout))
    headroom = None
    if word.is_fixed:
        finite = [(s, bnd) for s, bnd in zip(real.node_scales[1:], bounds) if math.isfinite(bnd)]
        finite += [(s, bnd) for ss, bb in zip(real.state_scales, real.state_bounds) for s, bnd in zip(ss, bb)]
        headroom = min((20 * math.log10(s / bnd) for s, bnd in finite if bnd > 0), default=None)
        if headroom is not None and headroom < 0:
            failures.append(f"overflow: a node's peak-gain bound is {-headroom:.3g} dB above its full scale")
    else:
        big = [bnd for bnd in bounds if math.isfinite(bnd) and bnd > word.max_value]
        if big:
            failures.append(f"overflow: peak-gain bound {max(big):.3g} exceeds the {word.name} range")

    lc = lc_lsb = dead = None
    if word.is_fixed:
        if real.form == "df1":
            lc_lsb, lc, drift = _limit_cycles(real, layout, notes)
            dead, at_section = _dead_band(real, layout)
            what = "holds any constant output up to"
        else:
            lc_lsb, lc, drift, at_section = limit_cycles(
                real, layout, notes, LIMIT_CYCLE_TRIALS, LIMIT_CYCLE_SAMPLES, np.random.default_rng(12)
            )
            dead = lc_lsb / 2 ** (word.bits - 1) if at_section else None
            what = "keeps an output (found by the search from random states) of"
        if dead is not None and dead > DEAD_BAND_LIMIT:
            failures.append(
                f"dead band: section {at_section} {what} {100 * dead:.3g} % of its full "
                f"scale with zero input (rounding cancels the pull back; limit {100 * DEAD_BAND_LIMIT:g} %): a pole "
                "too close to z = 1 for the word; use more bits or another structure"
            )
        for sec, moved in drift:
            failures.append(
                f"integrator drift: section {sec} keeps moving by {moved} LSB per sample with zero input "
                f"(rounding sustains it); use structure {'delta' if real.structure == 'sections' else 'sections'}"
            )

    stall = stall_unchecked = stall_at = None
    if designed_ones and not output_level and word.name != "float64":
        stall_unchecked = (
            f"not decided: {word.name} holds the integral at the output's level, and no output level was given "
            "(give output limits)"
        )
    elif designed_ones and unstable:
        notes.append("integrator stall not measured: the stored realization is unstable (see above)")
    elif designed_ones:
        stall, stall_at = _stall(real, layout, roots, r, u)
        failures += stall_failure(stall, u, res, stall_at)
    return FormatAnalysis(
        **base,
        realized=real,
        coefficient_error=cerr,
        pole_shift=pole_shift,
        zero_shift=zero_shift,
        max_pole_radius=max_radius,
        free_pole_radius=free_radius,
        unstable_poles=unstable,
        response_error=float(rel[i]) if rel.size else 0.0,
        gain_error_db=gdb,
        phase_error_deg=pdeg,
        error_at_hz=float(f[i]) if f.size else None,
        node_bounds=bounds,
        headroom_db=headroom,
        limit_cycle=lc,
        limit_cycle_lsb=lc_lsb,
        stall_error=stall,
        stall_at=stall_at,
        stall_unchecked=stall_unchecked,
        dead_band=dead,
        failures=tuple(failures),
        notes=tuple(notes),
    )


def realized_response(real: Realized, f_hz) -> np.ndarray:
    """The response of the stored coefficients (user units in and out) at f_hz (Hz), evaluated
    exactly (see :func:`convert.digital.structures.section_response`)."""
    f = np.asarray(f_hz, dtype=float)
    resp = np.ones(f.shape, complex) * (real.node_scales[-1] / real.node_scales[0] if real.word.is_fixed else 1.0)
    for s in real.sections:
        resp = resp * section_response(real.form, s.b, s.a, f, real.layout.sample_period_s, _delta(real))
    return resp


def realized_controller(real: Realized, name: str = ""):
    """A :class:`Controller` with the stored coefficients' zeros, poles and gain (the direct
    forms: their stored polynomial as it is), for the loop checks."""
    t = real.layout.sample_period_s
    if real.structure in ("direct1", "direct2t"):
        s = real.sections[0]
        # fixed point stores the words' coefficients: input and output scaled to their full scales
        scale = real.node_scales[-1] / real.node_scales[0] if real.word.is_fixed else 1.0
        return Controller.from_b_a(np.asarray(s.b, dtype=float) * scale, s.a, t, name)
    poles = [p for ps, _ in realized_poles(real) for p in ps]
    zeros = [z for s in real.sections for z in section_zeros(real.form, s.b, _delta(real))]

    probe = np.array([0.1 / t, 0.3 / t, 0.45 / t])
    want = realized_response(real, probe)
    unit = RootForm(tuple(zeros), tuple(poles), 1.0, t).frequency_response(probe)
    k = want / unit
    gain = float(np.real(k[int(np.argmax(np.abs(unit)))]))
    return Controller.from_zpk(_conj(zeros), _conj(poles), gain, "digital", t, name)


def _conj(roots) -> list[complex]:
    """Roots with each complex one's partner made its exact conjugate (real polynomials)."""
    return list(_pairs(roots))


def _delta(real: Realized) -> float | None:
    d = real.layout.delta_step
    if d and real.word.bits == 32 and not real.word.is_fixed:
        return float(np.float32(d))
    return d


def _ratio(real: Realized, i: int) -> float:
    if not real.word.is_fixed:
        return 1.0
    return real.node_scales[i] / real.node_scales[i + 1]


def _c(z: complex) -> str:
    return f"{z.real:.8g}{z.imag:+.3g}j" if abs(z.imag) > 0 else f"{z.real:.10g}"


def _limit_cycles(real: Realized, layout, notes: list[str]) -> tuple[int, float]:
    """Zero input from random states, per section (vectorized over trials)."""
    w = real.word
    rng = np.random.default_rng(12)
    worst_lsb, worst_units = 0, 0.0
    undecided = []
    drift = []
    bounds: list[float] = []
    for i, (s, s0) in enumerate(zip(real.sections, layout.sections)):
        a = np.asarray(s.a_int[1:], dtype=np.int64)
        m = a.size
        if m == 0:
            continue
        if any(abs(p) >= 1 - 1e-12 for p in s0.poles):
            moved = _drift(s, s0, w, rng)
            if moved:
                drift.append((i + 1, moved))
            continue
        radius = max(abs(p) for p in s0.poles)
        need = math.log(2.0**w.bits) / max(-math.log(max(radius, 1e-300)), 1e-300) + 200
        n = int(min(LIMIT_CYCLE_SAMPLES, need))
        if need > LIMIT_CYCLE_SAMPLES:
            undecided.append(i + 1)
        y = rng.integers(w.word_min // 2, w.word_max // 2, size=(m, LIMIT_CYCLE_TRIALS), dtype=np.int64)
        outs = zero_input_words(a, s.shift, 1 << (s.shift - 1), y, n, 100, w.word_min, w.word_max)
        lsb = int(np.abs(outs[1:]).max()) if n else 0
        if m == 2:
            a1, a2 = (float(v) / 2**s.shift for v in s.a_int[1:])
            bounds.append(
                max(
                    0.5 / max(1 - abs(a2), 1e-300),
                    0.5 / max(abs(1 + a1 + a2), 1e-300),
                    0.5 / max(abs(1 - a1 + a2), 1e-300),
                )
            )
        if lsb > worst_lsb:
            worst_lsb, worst_units = lsb, lsb * real.node_scales[i + 1] / 2 ** (w.bits - 1)
    bound = f"; the effective-value bound of the second-order sections is {max(bounds):.3g} LSB" if bounds else ""
    limit_cycle_notes(notes, undecided, worst_lsb, worst_units, bound)
    return worst_lsb, worst_units, drift


def limit_cycle_notes(notes: list[str], undecided, worst_lsb: int, worst_units: float, bound: str = "") -> None:
    """The notes of a limit-cycle search (every structure's search states its result this way)."""
    if undecided:
        notes.append(
            f"limit-cycle search: section(s) {', '.join(map(str, undecided))} decay too slowly to decide within "
            f"{LIMIT_CYCLE_SAMPLES} samples"
        )
    if worst_lsb:
        notes.append(
            f"limit cycle with zero input: the search from {LIMIT_CYCLE_TRIALS} random states found up to "
            f"{worst_lsb} LSB ({worst_units:.3g} in that node's units){bound}"
        )


def _dead_band(real: Realized, layout) -> tuple[float | None, int | None]:
    """(largest dead band as a fraction of its node's full scale, its section number), over the
    fixed-point sections without a designed integrator. Rounding to nearest keeps a constant word
    y when |d·y| ≤ 2^(shift−1), d = 2^shift + Σ a_int (the stored 1 + Σa), so the band is
    2^(shift−1)/|d| LSB; d = 0 is a stored pole at z = 1 (failed elsewhere). (None, None) when no
    section applies."""
    w = real.word
    worst, where = None, None
    for i, (s, s0) in enumerate(zip(real.sections, layout.sections)):
        if len(s.a_int) < 2 or any(p == 1 for p in s0.poles):
            continue
        d = abs(sum(int(v) for v in s.a_int))
        if d == 0:
            continue
        frac = min(2.0 ** (s.shift - 1) / d, 2.0 ** (w.bits - 1)) / 2.0 ** (w.bits - 1)
        if worst is None or frac > worst:
            worst, where = frac, i + 1
    return worst, where


def _drift(s, s0, w, rng) -> int:
    """A section holding an integrator, zero input from small random states (vectorized over
    trials, far from saturation): once its other poles have decayed (e^-11 of a word) its output
    must stand still. Returns the largest step (LSB per sample) it still makes, 0 when it holds."""
    a = np.asarray(s.a_int[1:], dtype=np.int64)
    m = a.size
    others = [abs(p) for p in s0.poles if abs(p) < 1 - 1e-12]
    radius = max(others, default=0.0)
    settle = int(min(LIMIT_CYCLE_SAMPLES, math.log(2.0**w.bits) / max(-math.log(max(radius, 1e-300)), 1e-9) + 1))
    y = rng.integers(-64, 64, size=(m, LIMIT_CYCLE_TRIALS), dtype=np.int64)
    half = (1 << (s.shift - 1)) if w.rounding == "half-up" else 0
    outs = zero_input_words(a, s.shift, half, y, settle + 50, 50, w.word_min, w.word_max)
    return int(np.abs(np.diff(outs, axis=0)).max())


def zero_input_words(a, shift: int, half: int, y: np.ndarray, n: int, tail: int, lo: int, hi: int) -> np.ndarray:
    """A direct-form-I recursion on words with zero input, vectorized over trials:
    ``y_new = clip((−Σ_j a_j·y_j + half) >> shift, lo, hi)`` for n samples from the histories
    ``y`` (rows newest first, one column per trial; int64 arithmetic, in place, no per-sample
    allocation). Returns the last min(tail, n) outputs after the output just before them
    (rows oldest first; row 0 is that earlier output)."""
    a = [int(v) for v in a]
    hist = [np.array(row, dtype=np.int64) for row in y]
    keep = min(tail, n)
    start = n - keep
    outs = np.empty((keep + 1,) + hist[0].shape, dtype=np.int64)
    acc = np.empty_like(hist[0])
    tmp = np.empty_like(acc)
    lo64, hi64, half64 = np.int64(lo), np.int64(hi), np.int64(half)
    for k in range(n):
        if k == start:
            outs[0] = hist[0]
        np.multiply(hist[0], a[0], out=acc)
        for aj, yj in zip(a[1:], hist[1:]):
            np.multiply(yj, aj, out=tmp)
            np.add(acc, tmp, out=acc)
        np.negative(acc, out=acc)
        np.add(acc, half64, out=acc)
        np.right_shift(acc, shift, out=acc)
        np.maximum(acc, lo64, out=acc)
        np.minimum(acc, hi64, out=acc)
        if k >= start:
            outs[k - start + 1] = acc
        hist.insert(0, acc)
        acc = hist.pop()  # the oldest row is the next sample's scratch
    return outs


def _stall(real: Realized, layout, roots, r: float, u: float) -> tuple[float | None, str]:
    """(the largest constant error that still stalls the integral, where it does): an error e
    stalls when, started on the exact solution for it that passes an output level L (see
    :func:`ramp_state`: no transient, so the figure does not depend on the window), the output
    moves over STALL_TO samples by less than half of the exact R_1·e·STALL_TO (R_1 the
    integrator's residue: the output's rise per sample per unit error), after the drift the
    stored realization shows from L with zero input.

    Rounding each product separately (direct form II transposed, delta) makes "moves" not
    monotonic in e: an error can stall while a smaller one moves. So every error of a grid is
    tried (:data:`STALL_PER_DECADE` a decade over :data:`STALL_DECADES` decades below R,
    vectorized), from :data:`STALL_LEVELS` output levels of each sign in [U/2, U] (the level's
    low bits and the word's rounding change the outcome), moving toward zero and away from it
    (only where the exact output stays within ±U over twice the window), then (with the
    :data:`STALL_FINE_COMBOS` level and direction combinations that stall at the largest errors
    of that scan) windows above the
    largest stalling error so far (up to twice it, then a quarter as wide each time,
    :data:`STALL_WINDOWS`) on jittered fine grids of :data:`STALL_FINE` errors.
    Returns (None, where) if R itself stalls; when nothing on the grid stalls, the smallest error
    tried (a bound below which the scan did not look)."""
    slope = _residue_at_one(roots)
    if slope == 0 or not math.isfinite(slope):
        return None, ""
    rng = np.random.default_rng(63)
    mags = np.concatenate([[1.0, 1 - 2.0**-10], rng.uniform(0.5, 1.0, STALL_LEVELS - 2)]) * abs(u)
    mags = np.array([_six_digits(v, abs(u)) for v in mags])  # so the level the figure names is the one tried
    levels = np.concatenate([mags, -mags])
    m = real.model()

    def run(x: np.ndarray, lv: np.ndarray) -> np.ndarray:
        ramp_state(m, real, layout, x, lv, slope)
        y0 = m.step_batch(x)
        y = y0
        for _ in range(STALL_TO):
            y = m.step_batch(x)
        return y - y0

    drift = run(np.zeros(levels.size), levels)  # a stored integrator that leaks or grows moves on its own

    every = [(li, di) for li in range(levels.size) for di in (0, 1)]

    def stalling(e: np.ndarray, combos) -> np.ndarray:
        """[error, combo]: whether that error stalls from that (level index, direction: 0
        toward zero, 1 away) combo."""
        li = np.array([c[0] for c in combos])[None, :]
        di = np.array([2.0 * c[1] - 1.0 for c in combos])[None, :]
        lv = levels[li]
        x = di * np.sign(slope * lv) * e[:, None]
        want = x * slope * STALL_TO
        ok = np.abs(lv + 2 * want) <= abs(u) * (1 + 1e-12)
        got = run(x.ravel(), np.broadcast_to(lv, x.shape).ravel()).reshape(x.shape) - drift[li]
        with np.errstate(divide="ignore", invalid="ignore"):
            return ok & ~(got / want >= 0.5)

    grid = r * 10.0 ** -np.linspace(0.0, STALL_DECADES, STALL_DECADES * STALL_PER_DECADE + 1)[::-1]
    st = stalling(grid, every)
    hit = np.flatnonzero(st.any(axis=1))
    if hit.size == 0:
        return float(grid[0]), "no error on the grid stalls it"
    best, flags, combos = float(grid[hit[-1]]), st[hit[-1]], every
    if hit[-1] == grid.size - 1:
        return None, _stall_where(levels, combos, flags)
    # the fine search tries the combos that stall at the largest errors of the coarse scan
    reach = np.where(st, grid[:, None], 0.0).max(axis=0)
    combos = [every[i] for i in np.argsort(-reach, kind="stable")[:STALL_FINE_COMBOS]]
    flags = st[hit[-1]][[every.index(c) for c in combos]]
    # near the top of the stalling range the stalling errors thin out to narrow intervals (a
    # rounding pattern repeating with the ulp of the level over the coefficient): windows above
    # the largest stalling error so far, each a quarter as wide, on jittered fine grids
    for width in STALL_WINDOWS:
        top = min(best * (1 + width), r)
        cells = np.linspace(best, top, STALL_FINE + 1)
        fine = cells[:-1] + (cells[1] - cells[0]) * rng.uniform(0.0, 1.0, STALL_FINE)
        st = stalling(fine, combos)
        hit = np.flatnonzero(st.any(axis=1))
        if hit.size:
            best, flags = float(fine[hit[-1]]), st[hit[-1]]
    return best, _stall_where(levels, combos, flags)


def _six_digits(v: float, top: float) -> float:
    """``v`` > 0 to six significant digits, not above ``top``."""
    step = 10.0 ** (math.floor(math.log10(v)) - 5)
    out = round(v / step) * step
    return float(f"{out - step if out > top else out:.6g}")


def _stall_where(levels: np.ndarray, combos, flags: np.ndarray) -> str:
    """The first stalling trial's output level and direction, as text (``flags`` per combo)."""
    li, di = combos[int(np.flatnonzero(flags)[0])]
    return f"from output level {levels[li]:.6g} moving {'toward' if di == 0 else 'away from'} zero"


def stall_failure(stall: float | None, u: float, res: float, where: str = "") -> list[str]:
    """The integrator-stall failure (one line) when ``stall`` (the largest error that still
    stalls the integral; None: even the input range does) exceeds the resolution ``res``, output
    level ``u`` (``where``: the stalling trial's level and direction, when known); else nothing."""
    if stall is not None and stall <= res:
        return []
    shown = "every error up to the input range" if stall is None else f"errors up to {stall:.4g} input units"
    at = f" ({where})" if where else ""
    return [
        f"integrator stall: with output levels up to {u:.4g} the integral stalls for {shown}{at}, "
        f"above the resolution {res:.4g}"
    ]


def smallest_moving(moves, top: float) -> float | None:
    """The smallest error (within 5 %) above which every error tried ``moves`` (a predicate):
    every error from the answer up to ``top`` must move it, so walk down from ``top`` by halves to
    the first error that does not, then bisect between it and the last that did. None if ``top``
    itself does not move it."""
    hi = top
    if not moves(hi):
        return None
    lo = None
    while hi > top * 1e-12:
        if not moves(hi / 2):
            lo = hi / 2
            break
        hi /= 2
    if lo is None:
        return hi
    for _ in range(40):
        mid = math.sqrt(lo * hi)
        if moves(mid):
            hi = mid
        else:
            lo = mid
        if hi / lo < 1.05:
            break
    return hi


def _residue_at_one(roots) -> float:
    """R_1 = k·Π(1 − z_i)/Π(1 − p_i) over the poles other than one integrator: the rise of the
    output per sample per unit of constant error (the ramp slope)."""
    zeros = np.asarray(roots.zeros, dtype=complex)
    poles = list(roots.poles)
    poles.remove(next(p for p in poles if p == 1))
    if any(p == 1 for p in poles):  # a second integrator: the output ramps without bound, no residue
        return math.inf
    val = roots.gain * np.prod(1 - zeros) / np.prod(1 - np.asarray(poles, dtype=complex))
    return float(np.real(val))


def ramp_state(model, real: Realized, layout, e: float, u: float, slope: float) -> None:
    """Put ``model`` on the exact solution for a constant error ``e`` whose output passes ``u``
    at the next sample: stable sections settled at their DC gain, the integrating section's past
    outputs u − k·slope·e. Values computed in float64, then stored in the format."""
    v_in = e
    states = []
    n = len(layout.sections)
    for i, s in enumerate(layout.sections):
        integ = any(p == 1 for p in s.poles)
        if integ:
            hist = [u - k * slope * e for k in range(1, s.order + 1)]
            v_out = u
        else:
            b, a = z_equivalent(layout, s)
            v_out = v_in * float(np.sum(b) / np.sum(a))
            hist = [v_out] * s.order
        form = layout.form
        if form == "df1":
            states.append(([v_in] * (len(s.b) - 1), hist))
        elif form == "df2t":
            bb, aa = s.b, s.a
            states.append(
                [
                    sum(
                        bb[j] * v_in - aa[j] * (u - (j - k) * slope * e if integ else v_out)
                        for j in range(k + 1, s.order + 1)
                    )
                    for k in range(s.order)
                ]
            )
        else:  # delta: the next output is v_out (w = 0 for a settled section; the integrator ramps)
            st = [v_out - s.b[0] * v_in] + [s.a[k + 1] * v_out - s.b[k + 1] * v_in for k in range(s.order - 1)]
            states.append(st)
        v_in = v_out if i < n - 1 else v_in
    model.load(states)


def analyze_all(roots, band_f_hz, *, b=None, a=None, formats=None, structures=None, **kw) -> list[FormatAnalysis]:
    """:func:`analyze` for every structure × word format (or the ones named)."""
    return [
        analyze(roots, s, fmt, band_f_hz, b=b, a=a, **kw)
        for fmt in (formats or tuple(FORMATS))
        for s in (structures or tuple(STRUCTURES))
    ]


def recommend(analyses: list[FormatAnalysis]) -> tuple[str | None, str]:
    """The structure to use for one word format: among those without failures, the smallest
    response error (ties: the order of :data:`STRUCTURES`, fewer operations first). Returns
    (structure or None, the reason in numbers)."""
    good = [x for x in analyses if x.ok]
    parts = []
    for x in analyses:
        if x.refused:
            parts.append(f"{x.structure}: not offered ({x.refused.split(';')[0]})")
        elif x.failures:
            parts.append(f"{x.structure}: {x.failures[0]}")
        else:
            parts.append(
                f"{x.structure}: response error {x.response_error:.2g} relative ({x.gain_error_db:.3g} dB, "
                f"{x.phase_error_deg:.3g} deg), poles moved ≤ {x.pole_shift:.2g}"
            )
    if not good:
        return None, "no structure is usable in this format: " + "; ".join(parts)
    best = min(
        good, key=lambda x: (round(math.log10(max(x.response_error, 1e-300)), 1), list(STRUCTURES).index(x.structure))
    )
    return (
        best.structure,
        f"{best.structure} has the smallest response error (max |H_stored/H − 1| over the band) without failures — "
        + "; ".join(parts),
    )


def offered(structure: str, word: WordFormat) -> bool:
    """Whether ``structure`` is built in ``word`` (every structure, float and fixed point)."""
    return True


def _advice_among(names: list[str], every: list[FormatAnalysis]) -> list[FormatAnalysis]:
    """Failures that advise another structure ("use structure sections") where that structure
    was analysed too and cannot be built (or is not offered at all) say so instead of advising it."""
    from dataclasses import replace

    refused = {x.structure: x.refused for x in every if x.refused}
    out = []
    for x in every:
        fixed = []
        for f in x.failures:
            head, sep, other = f.rpartition("; use structure ")
            if sep and (other in refused or other not in names):
                why = refused.get(other) or "not offered in this word format"
                f = f"{head}; {other}, the structure that usually holds it, is not offered here ({why.split(';')[0]})"
            fixed.append(f)
        out.append(replace(x, failures=tuple(fixed)) if fixed != list(x.failures) else x)
    return out


def choose(
    roots, word_format: str, band_f_hz, *, structure: str = "auto", b=None, a=None, among=None, **kw
) -> tuple[FormatAnalysis | None, list[FormatAnalysis], str]:
    """The analysis of ``structure`` in ``word_format`` — or, for ``"auto"``, of the structure
    :func:`recommend` picks — with every offered structure's analysis and the reason in numbers.
    ``among`` limits the structures considered (e.g. those a language is written for).
    Returns (chosen analysis or None when none is usable, all analyses, reason)."""
    word = get_format(word_format)
    names = [s for s in STRUCTURES if offered(s, word) and (among is None or s in among)]
    every = _advice_among(names, [analyze(roots, s, word, band_f_hz, b=b, a=a, **kw) for s in names])
    best, why = recommend(every)
    if structure == "auto":
        pick = next((x for x in every if x.structure == best), None)
        return pick, every, why

    name = structure_name(structure)
    pick = next((x for x in every if x.structure == name), None)
    if pick is None:
        pick = analyze(roots, name, word, band_f_hz, b=b, a=a, **kw)
    return pick, every, why
