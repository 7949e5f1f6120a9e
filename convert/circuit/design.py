"""Design an op-amp circuit from a controller: topology, parts from IEC 60063 series, part search.

Steps (:func:`design_circuit`):

1. Read the target. A digital controller is brought back to analog with
   ``convert.digital.to_analog`` (method ``options.inverse_method``). An improper target (ideal
   PID or PD) gets the derivative filter every circuit has, by the same rule as
   ``loopshift digital --derivative-filter``: the derivative part divided by (τs + 1) with
   τ = Td/N (N = ``options.derivative_filter_n``; see :mod:`convert.digital.derivative_filter`);
   its effect is reported as its own error row.
2. Pick the topology: the one named, or with ``auto`` the simplest in
   :data:`~convert.circuit.topologies.AUTO_ORDER` whose :meth:`fit` realizes the target exactly
   (PID settings with setpoint weights b ≠ 1 or c ≠ 1 pick ``pid-two-input``).
3. Search. Every free part (usually a capacitor) takes every value of its series in range; the
   other parts follow from the design equations and are rounded **down or up** to their series
   (log space, see :mod:`convert.circuit.series`); every combination in range is scored and the best
   kept. When the combinations would exceed ``options.search_budget`` evaluations, the search runs
   in two passes: nearest rounding for every free choice, then all rounding directions for the
   best ``options.refine`` free choices.

Error metric (the score): the largest, over the band, of ``|ln(H_built / H_target)|`` — the complex
log of the response ratio, which is ``sqrt((ΔdB/8.686)² + (Δφ in rad)²)``: 1 dB of gain error
weighs as much as 6.6° of phase error. The band is ``options.band_hz`` or, by default, a decade
below the lowest corner to a decade above the highest.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field
from collections.abc import Mapping

import numpy as np

from convert.circuit import series as es
from convert.circuit.topologies import AUTO_ORDER, TargetShape, Topology, analyse_target, get_topology
from convert.controller import Controller
from convert.errors import InputError, UnrealizableError, LoopshiftError
from convert.compare.frequency import log_grid, compare_controllers, compare_responses
from convert.digital import read_analog
from convert.digital import add_derivative_filter as shared
from convert.values import format_value
from convert.circuit.opamp import OpAmpModel, gbw_response, swing_check
from convert.circuit.tolerance import (
    DEFAULT_TOLERANCES,
    worst_case,
    DEFAULT_DISTRIBUTION,
    DEFAULT_DRAWS,
    Comparison,
    run_tolerances,
)


@dataclass(frozen=True)
class DesignOptions:
    """Everything a design run is told. Resistances in ohms, capacitances in farads, Hz."""

    topology: str = "auto"
    resistors: str = "E96"
    capacitors: str = "E12"
    r_min: float = 1e3
    r_max: float = 1e6
    c_min: float = 100e-12
    c_max: float = 10e-6
    band_hz: tuple[float, float] | None = None
    points: int = 61
    derivative_filter_n: float = 10.0
    inverse_method: str = "tustin"
    top: int = 5
    search_budget: int = 4_000_000
    refine: int = 12
    max_opamps: int | None = None  # cap on op-amps (a cascade's stages and inverter); None = no cap

    def __post_init__(self):
        object.__setattr__(self, "resistors", es.normalize_name(self.resistors, key="resistors"))
        object.__setattr__(self, "capacitors", es.normalize_name(self.capacitors, key="capacitors"))
        for lo, hi, what in ((self.r_min, self.r_max, "resistor"), (self.c_min, self.c_max, "capacitor")):
            if not (lo > 0 and hi > 0 and math.isfinite(lo) and math.isfinite(hi)):
                raise InputError(
                    f"the {what} range needs positive finite limits, found {lo!r} .. {hi!r}", key=f"{what} range"
                )
            if lo > hi:
                raise InputError(f"the {what} range minimum {lo:g} is above its maximum {hi:g}", key=f"{what} range")
        if self.band_hz is not None and not (0 < self.band_hz[0] < self.band_hz[1]):
            raise InputError(f"a band needs 0 < low < high, found {self.band_hz!r}", key="band")
        if self.max_opamps is not None and not (isinstance(self.max_opamps, int) and self.max_opamps >= 1):
            raise InputError(
                f"the op-amp cap must be a whole number of at least 1, found {self.max_opamps!r}", key="max opamps"
            )
        if not self.derivative_filter_n > 0:
            raise InputError(
                f"the derivative filter ratio N must be positive, found {self.derivative_filter_n!r}",
                key="derivative filter",
            )

    def series_for(self, kind: str) -> str:
        return self.resistors if kind == "R" else self.capacitors

    def range_for(self, kind: str) -> tuple[float, float]:
        return (self.r_min, self.r_max) if kind == "R" else (self.c_min, self.c_max)


@dataclass(frozen=True)
class Candidate:
    """One scored part set."""

    parts: dict
    score: float
    max_gain_error_db: float
    max_phase_error_deg: float

    def summary(self) -> dict:
        return {
            "parts": self.parts,
            "score": self.score,
            "max_gain_error_db": self.max_gain_error_db,
            "max_phase_error_deg": self.max_phase_error_deg,
        }


@dataclass(frozen=True)
class CircuitDesign:
    """The result of :func:`design_circuit` (plain data; rendering lives elsewhere).

    ``target`` is the analog controller the circuit aims at (after any inverse conversion and the
    derivative filter); ``sign`` is the target's sign (−1 for direct action / negative gain);
    ``needs_inverter`` is True when the stage's own sign differs from it, so a unity inverter
    follows the stage to realize +C(s). ``realized`` is the controller of the rounded parts
    including that correction.
    """

    topology: Topology
    source: Controller
    target: Controller
    sign: int
    needs_inverter: bool
    params: dict
    nominal: dict
    rounded: dict
    realized: Controller
    band_hz: tuple[float, float]
    candidates: list
    options: DesignOptions
    notes: list = field(default_factory=list)
    filter_added: Controller | None = None
    settings: object = None
    cascade: object = None  # the convert.circuit.cascade.CascadePlan when the topology is a cascade

    @property
    def part_series(self) -> dict:
        out = {}
        for p in self.topology.parts:
            if self.topology.check_parts(self.rounded)[p.name].item() in (math.inf, 0.0):
                continue
            out[p.name] = self.options.series_for(p.kind)
        return out

    def fitted_parts(self) -> dict:
        """Rounded parts that are fitted (optional parts left open are omitted)."""
        return {k: v for k, v in self.rounded.items() if v not in (math.inf, 0.0)}

    def f_grid(self, points_per_decade: int = 50) -> np.ndarray:
        return log_grid(self.band_hz[0], self.band_hz[1], points_per_decade)

    def realized_parameters(self) -> dict:
        p = {k: np.asarray(v) for k, v in self.rounded.items()}
        return {k: float(v) for k, v in self.topology.parameters(p).items()}


# ----------------------------------------------------------------------------------- target prep


def prepare_target(controller: Controller, options: DesignOptions) -> tuple[Controller, Controller | None, list[str]]:
    """(analog proper target, the filtered-in version or None, notes)."""
    notes: list[str] = []
    c = controller
    if c.is_digital:
        reading = read_analog(c, options.inverse_method)
        c = reading.controller
        notes.append(f"digital target brought back to analog with the inverse {options.inverse_method} method")
        notes.extend(reading.notes)  # e.g. printed poles at z = 1 read as integrators
    filtered = None
    if not c.is_proper:
        if c.relative_degree < -1:
            raise UnrealizableError(
                f"the target has {-c.relative_degree} more zeros than poles; an op-amp stage "
                "realizes at most one extra zero (with a derivative filter)",
                key="target",
            )
        filtered = add_derivative_filter(c, options.derivative_filter_n)
        notes.append(
            f"the target is improper (ideal derivative); the circuit adds a derivative filter with "
            f"time constant Td/N, N = {options.derivative_filter_n:g}"
        )
    return (filtered or c), (filtered if filtered is not None else None), notes


def add_derivative_filter(controller: Controller, n: float) -> Controller:
    """The target with the circuit's derivative limit.

    The rule is :func:`convert.digital.add_derivative_filter` (τ = Td/N on the derivative part).
    A target with no proportional term (a pure differentiator, where Td is undefined) gets one pole
    at N times its highest zero instead: C(s)/(tf·s + 1) with tf = 1/(N·|highest zero|).
    """
    try:
        return shared(controller, n)
    except LoopshiftError:
        pass
    zeros = controller.zeros()
    top = float(np.max(np.abs(zeros))) if zeros.size else 1.0
    if not top > 0:
        raise UnrealizableError(
            "a pure differentiator (its zeros all at s = 0) has no corner to place the derivative "
            "filter pole from; write the filter into the controller, e.g. 2*s/(0.01*s + 1)",
            key="target",
        )
    tf = 1.0 / (n * top)
    return Controller.analog(controller.num, np.polymul(controller.den, [tf, 1.0]), controller.name)


def default_band(target: Controller) -> tuple[float, float]:
    """A decade below the lowest corner to a decade above the highest (Hz)."""
    corners = target.corner_frequencies_hz()
    freqs = corners["zeros"] + corners["poles"]
    if not freqs:
        if target.is_integrating:
            f0 = abs(target.gain) / (2 * math.pi)  # where |k/s| = 1
            return f0 / 100, f0 * 100
        return 1.0, 1e3
    return min(freqs) / 10, max(freqs) * 10


# ----------------------------------------------------------------------------------- choose


def choose_topology(target: Controller, options: DesignOptions, settings=None) -> tuple[Topology, list[dict]]:
    """The topology to use and its fitted design quantities."""
    if options.topology.lower() != "auto":
        topo = get_topology(options.topology)
        return topo, topo.fit(target, settings=settings)
    if settings is not None and (settings.b != 1 or settings.c != 1):
        topo = get_topology("pid-two-input")
        return topo, topo.fit(target, settings=settings)
    reasons = []
    for name in AUTO_ORDER:
        topo = get_topology(name)
        try:
            return topo, topo.fit(target, settings=settings)
        except UnrealizableError as exc:
            reasons.append(exc.message)
    shape = analyse_target(target)
    raise UnrealizableError(
        f"no catalog topology realizes this target exactly ({shape.describe()}); "
        "the catalog covers P, I, PI, first-order lag, lead/lag, PD and PID with a derivative "
        "filter",
        key="topology",
    )


# ----------------------------------------------------------------------------------- search


def _free_grid(topo: Topology, options: DesignOptions) -> dict[str, np.ndarray]:
    grids = []
    for name in topo.free_parts:
        kind = topo.part(name).kind
        lo, hi = options.range_for(kind)
        grids.append(es.values_in_range(options.series_for(kind), lo, hi))
    mesh = np.meshgrid(*grids, indexing="ij")
    return {name: m.ravel() for name, m in zip(topo.free_parts, mesh)}


def _is_open(topo: Topology, name: str, values: np.ndarray) -> bool:
    kind = topo.part(name).kind
    return bool(np.all(values == (math.inf if kind == "R" else 0.0)))


def rounded_names(topo: Topology, nominal: Mapping[str, np.ndarray]) -> list[str]:
    """Parts the search rounds: neither free, fixed, a copy, nor left open."""
    copies = {c for c, _ in topo.equal_parts}
    return [
        p.name
        for p in topo.parts
        if p.name not in topo.free_parts
        and p.name not in topo.fixed_parts
        and p.name not in copies
        and not _is_open(topo, p.name, nominal[p.name])
    ]


def _in_range(topo: Topology, parts: Mapping[str, np.ndarray], options: DesignOptions) -> np.ndarray:
    ok = None
    for p in topo.parts:
        v = np.asarray(parts[p.name])
        if _is_open(topo, p.name, v):
            continue
        lo, hi = options.range_for(p.kind)
        m = (v >= lo * (1 - 1e-9)) & (v <= hi * (1 + 1e-9)) & np.isfinite(v)
        ok = m if ok is None else ok & m
    return ok


def score_parts(
    topo: Topology, parts: Mapping[str, np.ndarray], f_hz: np.ndarray, reference: np.ndarray, chunk: int = 20000
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(score, max |gain error| dB, max |phase error| deg) per part set; reference = F target over f_hz."""
    n = np.broadcast_shapes(*[np.shape(v) for v in parts.values()])[0] if parts else 1
    scores = np.empty(n)
    gdb = np.empty(n)
    pdeg = np.empty(n)
    for i in range(0, n, chunk):
        sl = slice(i, min(n, i + chunk))
        sub = {
            k: (np.asarray(v)[sl] if np.ndim(v) else np.full(sl.stop - sl.start, float(v))) for k, v in parts.items()
        }
        with np.errstate(divide="ignore", invalid="ignore"):
            logr = np.log(topo.response(sub, f_hz) / reference)
        logr = np.nan_to_num(logr, nan=1e3, posinf=1e3, neginf=-1e3)
        scores[sl] = np.max(np.abs(logr), axis=1)
        gdb[sl] = np.max(np.abs(logr.real), axis=1) * 20 / math.log(10)
        pdeg[sl] = np.degrees(np.max(np.abs(logr.imag), axis=1))
    return scores, gdb, pdeg


def expand_roundings(
    topo: Topology, nominal: Mapping[str, np.ndarray], options: DesignOptions, names: list[str] | None = None
) -> dict[str, np.ndarray]:
    """Every down/up rounding of ``names`` for every row of ``nominal`` -> flat candidate arrays."""
    names = rounded_names(topo, nominal) if names is None else names
    m = np.broadcast_shapes(*[np.shape(v) for v in nominal.values()])[0]
    combos = np.array(list(itertools.product((0, 1), repeat=len(names))), dtype=int).reshape(
        2 ** len(names), len(names)
    )
    out = {}
    for k, v in nominal.items():
        out[k] = np.repeat(np.broadcast_to(np.asarray(v, dtype=float), (m,)), combos.shape[0])
    for j, name in enumerate(names):
        lo, hi = es.neighbours(np.broadcast_to(nominal[name], (m,)), options.series_for(topo.part(name).kind), key=name)
        choice = np.where(combos[:, j][None, :] == 1, hi[:, None], lo[:, None])
        out[name] = choice.ravel()
    for copy, original in topo.equal_parts:
        out[copy] = out[original]
    return out


def search_parts(
    topo: Topology, params: Mapping[str, float], options: DesignOptions, f_hz: np.ndarray, reference: np.ndarray
) -> tuple[list[Candidate], dict]:
    """Best part sets for one set of design quantities: (candidates sorted by score, diagnostics).

    Raises UnrealizableError naming the part that is out of range when no choice is in range.
    """
    free = _free_grid(topo, options)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        nominal = topo.solve(params, free)
    m = free[topo.free_parts[0]].size
    nominal = {k: np.broadcast_to(v, (m,)).astype(float) for k, v in nominal.items()}
    ok = _in_range(topo, nominal, options)
    if not np.any(ok):
        raise _out_of_range(topo, nominal, options)
    nominal = {k: v[ok] for k, v in nominal.items()}
    names = rounded_names(topo, nominal)
    m = int(np.sum(ok))
    n_eval = m * (2 ** len(names)) * f_hz.size
    if n_eval > options.search_budget and m > options.refine:
        near = {k: v.copy() for k, v in nominal.items()}
        for name in names:
            near[name] = es.round_to_series(nominal[name], options.series_for(topo.part(name).kind))
        for copy, original in topo.equal_parts:
            near[copy] = near[original]
        sc, _, _ = score_parts(topo, near, f_hz, reference)
        sc = np.where(_in_range(topo, near, options), sc, np.inf)
        keep = np.argsort(sc, kind="stable")[: options.refine]
        nominal = {k: v[keep] for k, v in nominal.items()}
    cands = expand_roundings(topo, nominal, options, names)
    rows = np.arange(np.broadcast_shapes(*[np.shape(v) for v in nominal.values()])[0]).repeat(2 ** len(names))
    ok2 = _in_range(topo, cands, options)
    if not np.any(ok2):
        raise _out_of_range(topo, cands, options)
    cands = {k: v[ok2] for k, v in cands.items()}
    rows = rows[ok2]
    sc, gdb, pdeg = score_parts(topo, cands, f_hz, reference)
    order = np.lexsort((rows, sc))  # by score, ties by the earlier (smaller) free choice
    out: list[Candidate] = []
    seen = set()
    best_nominal = {k: float(v[rows[order[0]]]) for k, v in nominal.items()}
    for i in order:
        parts = {k: float(v[i]) for k, v in cands.items()}
        key = tuple(sorted(parts.items()))
        if key in seen:
            continue
        seen.add(key)
        out.append(Candidate(parts, float(sc[i]), float(gdb[i]), float(pdeg[i])))
        if len(out) >= max(options.top, 1):
            break
    return out, {"nominal": best_nominal, "free_choices": int(m), "evaluated": int(sc.size)}


def _out_of_range(topo: Topology, parts: Mapping[str, np.ndarray], options: DesignOptions) -> UnrealizableError:
    """Name the part that keeps every choice out of range, and what to change."""
    worst = None
    n = np.broadcast_shapes(*[np.shape(v) for v in parts.values()])[0]
    violation = np.zeros(n)
    per_part = {}
    for p in topo.parts:
        v = np.broadcast_to(np.asarray(parts[p.name], dtype=float), (n,))
        if _is_open(topo, p.name, v):
            continue
        lo, hi = options.range_for(p.kind)
        with np.errstate(divide="ignore", invalid="ignore"):
            d = np.where(v > hi, np.log(v / hi), np.where(v < lo, np.log(lo / v), 0.0))
        d = np.nan_to_num(d, nan=1e9, posinf=1e9)
        per_part[p.name] = d
        violation = np.maximum(violation, d)
    best = int(np.argmin(violation))
    worst = max(per_part, key=lambda k: per_part[k][best])
    part = topo.part(worst)
    value = float(np.broadcast_to(parts[worst], (n,))[best])
    lo, hi = options.range_for(part.kind)

    kind = part.unit_kind
    above = value > hi
    limit = format_value(hi if above else lo, kind)
    shown = format_value(value, kind) if math.isfinite(value) and value > 0 else repr(value)
    free = ", ".join(
        f"{k} = {format_value(float(np.broadcast_to(parts[k], (n,))[best]), topo.part(k).unit_kind)}"
        for k in topo.free_parts
    )
    what = "resistor" if part.kind == "R" else "capacitor"
    if math.isnan(value):  # e.g. a multiple-feedback section whose capacitor spread is too small
        free_kinds = sorted({"resistor" if topo.part(k).kind == "R" else "capacitor" for k in topo.free_parts})
        return UnrealizableError(
            f"{topo.name}: its design equations give no real value for {worst} ({part.role}) with any choice of "
            f"{', '.join(topo.free_parts)} in the {' and '.join(free_kinds)} range; widen the "
            f"{' and '.join(free_kinds)} range",
            key=f"{free_kinds[0]} range",
            settings=tuple(f"{k} range" for k in free_kinds),
        )
    bound = f"{what} {'maximum' if above else 'minimum'}"
    change = f"{'raise' if above else 'lower'} the {bound}"
    other = "capacitor range" if part.kind == "R" else "resistor range"
    return UnrealizableError(
        f"{topo.name}: {worst} ({part.role}) would be {shown}, {'above' if above else 'below'} the {bound} {limit} "
        f"even with the best choice ({free}); {change}, or widen the {other}, or rescale the target (its gain or "
        "time constants)",
        key=f"{what} range",
        settings=(bound, other),
    )


# ----------------------------------------------------------------------------------- design


def design_circuit(
    controller: Controller,
    options: DesignOptions | None = None,
    *,
    settings=None,
    series_times: tuple[float, float] | None = None,
) -> CircuitDesign:
    """Design the circuit for ``controller`` (see the module docstring). ``settings``: the
    :class:`convert.pid.PidSettings` it came from, if any (needed for setpoint weights).
    ``series_times``: (Ti′, Td′) in seconds as the user gave a series PID, when ``settings`` is
    not passed (a case file's source); the parts then set that assignment of the zeros."""
    options = options or DesignOptions()
    pre_notes = []
    source = controller
    given_settings = settings
    if settings is not None and settings.kd > 0 and settings.tf == 0 and settings.kp > 0:
        import dataclasses

        settings = dataclasses.replace(settings, tf=settings.kd / settings.kp / options.derivative_filter_n)
        controller = settings.to_controller()
        pre_notes.append(
            f"the PID has no derivative filter; the circuit adds tf = td/N with N = "
            f"{options.derivative_filter_n:g} (tf = {settings.tf:.4g} s)"
        )
    target, filtered, notes = prepare_target(controller, options)
    notes = pre_notes + notes
    if pre_notes:
        filtered = controller
    if options.topology.lower() == "cascade":
        # imported here, not at the top: import cycle (convert.circuit.design -> convert.circuit.cascade -> convert.circuit.design)
        from convert.circuit.cascade import design_cascade  # cascade builds on this module

        return design_cascade(target, options, source=source, filtered=filtered, notes=notes)
    try:
        topo, alternatives = choose_topology(target, options, settings)
        if (
            options.max_opamps is not None
            and topo.amplifiers + (topo.sign != analyse_target(target).sign) > options.max_opamps
        ):
            raise UnrealizableError(
                f"{topo.name} needs more op-amps than the cap of {options.max_opamps}", key="max opamps"
            )
    except UnrealizableError as exc:
        weighted = settings is not None and (settings.b != 1 or settings.c != 1)
        if options.topology.lower() != "auto" or exc.key not in ("topology", "max opamps") or weighted:
            raise  # a cascade has one input: setpoint weights need the two-input stage
        # imported here, not at the top: import cycle (convert.circuit.design -> convert.circuit.cascade -> convert.circuit.design)
        from convert.circuit.cascade import design_cascade  # cascade builds on this module

        try:
            return design_cascade(target, options, source=source, filtered=filtered, notes=notes)
        except UnrealizableError as cascade_exc:
            if exc.key == "max opamps" or cascade_exc.key in ("max opamps", "resistor range", "capacitor range"):
                raise cascade_exc from None
            raise UnrealizableError(
                f"{exc.message}; nor does a cascade of catalog stages: {cascade_exc.message}", key="topology"
            ) from None
    shape: TargetShape = analyse_target(target)
    sign = shape.sign
    band = options.band_hz or default_band(target)
    f = np.logspace(math.log10(band[0]), math.log10(band[1]), max(options.points, 2))
    if topo.two_input:
        ref = target.frequency_response(f) * sign  # the error path Cy
    else:
        ref = target.frequency_response(f) * sign
    alternatives, wanted = _preferred_first(alternatives, given_settings, series_times)
    found = []
    last_error = None
    for params in alternatives:
        try:
            cands, diag = search_parts(topo, params, options, f, ref)
        except UnrealizableError as exc:
            last_error = last_error or exc  # the first alternative's reason (the one the user reads)
            continue
        found.append((params, cands, diag))
    if not found:
        raise last_error
    best_params, best, diag = found[0]
    best = _figures_off_grid(topo, target, sign, best, f)
    best_nominal = diag["nominal"]
    if wanted is not None:
        notes += _assignment_notes(alternatives[0], found, wanted)
    rounded = dict(best[0].parts)
    realized = topo.controller_from_parts(rounded).scaled(sign).with_name(f"{topo.name} (rounded parts)")
    needs_inverter = topo.sign != sign
    if needs_inverter:
        notes.append(
            f"{topo.name} is {'inverting' if topo.inverting else 'non-inverting'}; a unity inverter after it "
            "gives the target's sign"
        )
    return CircuitDesign(
        topology=topo,
        source=source,
        target=target,
        sign=sign,
        needs_inverter=needs_inverter,
        params=dict(best_params),
        nominal=best_nominal,
        rounded=rounded,
        realized=realized,
        band_hz=(float(band[0]), float(band[1])),
        candidates=best,
        options=options,
        notes=notes,
        filter_added=filtered,
        settings=settings,
    )


def _figures_off_grid(topo: Topology, target: Controller, sign: int, cands: list, f_hz: np.ndarray) -> list:
    """The shown part sets' gain and phase errors from the one frequency comparison (maxima refined
    on the continuous responses, roots on the axis found), so they match the rounding row; the
    score that ranks them stays the grid's."""
    from dataclasses import replace

    out = []
    for c in cands:
        e = compare_controllers(target, topo.controller_from_parts(dict(c.parts)).scaled(sign), f_hz)
        out.append(replace(c, max_gain_error_db=e.max_gain_error_db, max_phase_error_deg=e.max_phase_error_deg))
    return out


def _series_text(q: Mapping[str, float]) -> str:
    k, ti, td = q["kc'"], q["ti'"], q["td'"]
    return f"K′ = {k:.4g}, Ti′ = {ti:.4g} s, Td′ = {td:.4g} s"


def _preferred_first(alternatives: list[dict], settings, series_times=None) -> tuple[list[dict], str | None]:
    """Order the design alternatives of a series (interacting) PID — its two assignments of the
    zeros to Ti′ and Td′, the same transfer function — so that the one the user reads comes
    first: the assignment of the input's series settings (the one ``loopshift show`` prints, see
    :meth:`convert.pid.PidSettings.series`), else Ti′ ≥ Td′ (what ``show`` prints for any other
    input). Returns (alternatives, how the first was chosen) or (alternatives, None) when there is
    no such choice."""
    if len(alternatives) < 2 or "ti'" not in alternatives[0]:
        return alternatives, None
    want = None
    if settings is not None:
        try:
            want = settings.series().ti_s
        except LoopshiftError:
            want = None
    given = settings is not None and settings.given_series is not None
    if want is None and series_times is not None:
        want, given = series_times[0], True
    if want:
        ordered = sorted(alternatives, key=lambda a: abs(math.log(a["ti'"] / want)))
        how = (
            "the series settings as given"
            if given
            else "the series form `loopshift show` prints for these settings (Ti′ ≥ Td′)"
        )
    else:
        ordered = sorted(alternatives, key=lambda a: -a["ti'"])
        how = "the series form `loopshift show` prints (Ti′ ≥ Td′)"
    return ordered, how


def _assignment_notes(wanted_params: dict, found: list, how: str) -> list[str]:
    """Say which assignment of Ti′/Td′ the parts realize, and when the other one gives better parts."""
    chosen_params, chosen, _ = found[0]
    if chosen_params is not wanted_params:
        return [
            f"the series times as in {how} ({_series_text(wanted_params)}) need parts out of range; the other "
            f"assignment of the same transfer function is built: {_series_text(chosen_params)}"
        ]
    notes = [f"series PID: the parts set {_series_text(chosen_params)}, as in {how}"]
    for params, cands, _ in found[1:]:
        if cands[0].score < chosen[0].score:
            notes.append(
                f"the other assignment of the same transfer function ({_series_text(params)}) gives better "
                f"parts: {cands[0].max_gain_error_db:.3g} dB / {cands[0].max_phase_error_deg:.3g}° against "
                f"{chosen[0].max_gain_error_db:.3g} dB / {chosen[0].max_phase_error_deg:.3g}° after rounding; "
                "give the settings in that assignment to build it"
            )
    return notes


# ----------------------------------------------------------------------------------- error sources


def error_sources(
    design: CircuitDesign,
    *,
    tolerances: Mapping[str, float] | None = None,
    draws: int | None = None,
    seed: int = 1,
    distribution: str | None = None,
    opamp=None,
    amplitude_v: float | None = None,
    rail_v: float | None = None,
    points_per_decade: int = 50,
    run=None,
) -> dict:
    """Each error source alone, over the design's band, as plain numbers (dB, degrees, Hz).

    Rows: ``rounding`` (series values: response error, design quantities, corners),
    ``derivative_filter`` (the filter the circuit adds, if any), ``tolerance`` (the tolerance
    engine's figures — 99th percentile over the draws of each draw's largest gain and phase error
    over the band against the rounded parts, on the same band grid as ``loopshift report`` —, the
    0.5/99.5 % bands and design quantities, and worst-case corners; ``draws=0`` skips it; defaults
    from :mod:`convert.circuit.tolerance`), ``opamp`` (finite gain-bandwidth; output swing when an
    amplitude and rail are given), and for two-input stages ``setpoint_path``. ``run``:
    a :class:`convert.circuit.tolerance.ToleranceRun` already made for this design (the pipeline's
    :func:`convert.compare.stages.circuit_budget` run), used instead of a second run.
    """
    f = design.f_grid(points_per_decade)
    topo = design.topology
    out: dict = {"band_hz": list(design.band_hz)}
    rounding = compare_controllers(design.target, design.realized, f).summary()
    realized_q = design.realized_parameters()
    qerr = {}
    for k, v in design.params.items():
        if k in realized_q and v not in (0, None) and math.isfinite(realized_q[k]):
            qerr[k] = {"target": v, "realized": realized_q[k], "relative_error": realized_q[k] / v - 1}
    corners = {}
    for label in ("zeros", "poles"):
        t = design.target.corner_frequencies_hz()[label]
        r = design.realized.corner_frequencies_hz()[label]
        if len(t) == len(r) and t:
            corners[label] = [{"target_hz": a, "realized_hz": b, "relative_error": b / a - 1} for a, b in zip(t, r)]
    dc_t, dc_r = design.target.dc_gain(), design.realized.dc_gain()
    gain = {"dc_gain_target": dc_t, "dc_gain_realized": dc_r}
    if design.target.is_proper and design.realized.is_proper:
        hf_t, hf_r = design.target.high_frequency_gain(), design.realized.high_frequency_gain()
        gain.update({"hf_gain_target": hf_t, "hf_gain_realized": hf_r})
    out["rounding"] = {"response": rounding, "quantities": qerr, "corners": corners, "gains": gain}
    if design.filter_added is not None:
        fe = compare_controllers(design.source, design.target, f).summary()
        out["derivative_filter"] = {
            "response": fe,
            "note": "the target as given vs the target with the circuit's filter",
        }
    if design.topology.two_input and design.settings is not None:
        sp_t = design.settings.setpoint_controller()
        sp_r = topo.paths_from_parts(design.rounded)["setpoint"].scaled(design.sign)
        out["setpoint_path"] = {
            "response": compare_controllers(sp_t, sp_r, f).summary(),
            "target": {"num": list(sp_t.num), "den": list(sp_t.den)},
            "realized": {"num": list(sp_r.num), "den": list(sp_r.den)},
        }
    tol = dict(DEFAULT_TOLERANCES if tolerances is None else tolerances)
    if draws != 0:
        mc = run if run is not None else tolerance_run(design, tol, draws=draws, seed=seed, distribution=distribution)
        wc = worst_case(topo, design.rounded, tol, f)
        out["tolerance"] = {"monte_carlo": mc.summary(), "worst_case": wc.summary()}
    if opamp is not None and not opamp.ideal:
        parts = {k: np.asarray(v) for k, v in design.rounded.items()}
        real = gbw_response(topo, parts, f, opamp)
        ideal = topo.response({k: np.asarray([v]) for k, v in design.rounded.items()}, f)[0]
        out["opamp"] = {
            "gbw_hz": opamp.gbw_hz,
            "a0": opamp.a0,
            "response": compare_responses(ideal, np.asarray(real).reshape(-1), f).summary(),
        }
    if amplitude_v is not None and rail_v is not None:
        sw = swing_check(
            topo, {k: np.asarray(v) for k, v in design.rounded.items()}, f, amplitude_v, rail_v, opamp or OpAmpModel()
        )
        out.setdefault("opamp", {})["swing"] = sw.summary()
    return out


def tolerance_run(
    design: CircuitDesign,
    tolerances: Mapping[str, float],
    *,
    draws: int | None = None,
    seed: int = 1,
    distribution: str | None = None,
):
    """The Monte Carlo of the design's rounded parts (ideal op-amp) by the one tolerance engine,
    with the comparison ``loopshift report`` calls its "tolerances" row: the draws against the
    rounded parts, over the design band on the report's band grid (100 points per decade).
    Returns :class:`convert.circuit.tolerance.ToleranceRun`."""
    band = log_grid(design.band_hz[0], design.band_hz[1], 100)
    rounded = {k: np.asarray([v]) for k, v in design.rounded.items()}
    reference = design.sign * design.topology.response(rounded, band)[0]
    return run_tolerances(
        design.topology,
        design.rounded,
        tolerances,
        band_f_hz=band,
        comparisons=[Comparison("tolerances", reference)],
        draws=DEFAULT_DRAWS if draws is None else draws,
        seed=seed,
        distribution=distribution or DEFAULT_DISTRIBUTION,
        sign=design.sign,
        display_f_hz=band,
    )
