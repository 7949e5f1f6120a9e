"""Cascade synthesis: any proper, stable-or-integrating controller as a chain of catalog stages.

Steps (:func:`plan_cascade`, then :func:`design_cascade`):

1. **Factor** the target into its gain, its real and complex poles and zeros (integrators are poles
   at s = 0). A pole in the right half-plane or on the imaginary axis away from 0 is refused.
2. **Pair** poles and zeros into first- and second-order sections: each complex pole pair, highest
   Q first, takes the complex zero pair nearest to it in frequency (the usual pairing rule of
   cascade design: it keeps each section's peak gain low); real poles take the nearest real zero;
   zeros left over go into second-order sections with the poles nearest to them.
3. **Merge** sections while one catalog stage realizes two of them on fewer op-amps (e.g. an
   integrator section and a lead section into one single-amplifier PID).
4. **Stage** each section: the catalog topology with the fewest op-amps whose design equations
   realize it (first-order stages; ``tow-thomas`` for a second-order section).
5. **Order and scale**: every order of the sections (up to 720; beyond that, ascending Q) is scored
   after equal-peak gain scaling — each stage output's peak gain over the band equals the
   output's, so no stage clips before the last one does — by the noise gain, the sum over stages of
   the peak gain from that stage's output to the cascade output (noise and offset a stage adds are
   amplified by what follows). The order with the smallest noise gain wins (ties: fewer sections
   moved). The target's sign is kept: the stages' own signs multiply, and a unity inverter follows
   only when their product differs from the target's.

The cascade is then one :class:`~convert.circuit.topologies.model.Topology` (its parts renumbered
R1.., C1.., its op-amps U1.. in signal order), so the netlist writer, schematic, bill of materials,
tolerance analysis, op-amp model and card reader treat it like any catalog circuit.
"""

from __future__ import annotations

import itertools
import math
import re
from dataclasses import dataclass, replace

import numpy as np

from convert.circuit.topologies import AUTO_ORDER, TOPOLOGIES, Topology, node_responses
from convert.circuit.topologies.networks import GROUND, C, Junction, R, Parallel, Series, Stage
from convert.controller import Controller
from convert.errors import UnrealizableError
from convert.circuit.design import search_parts, Candidate, CircuitDesign, _figures_off_grid, default_band, score_parts
from convert.circuit.opamp import SWING_HINT

SECOND_ORDER = ("mfb-low-pass", "mfb-band-pass", "tow-thomas")
"""Second-order stages the cascade may use besides the single-stage catalog (``AUTO_ORDER``). A
section takes the one with the fewest op-amps whose design equations realize it: the one-amplifier
multiple-feedback sections (internal node; pole Q up to their ``MAX_Q``, 10, where their component
spread 4·Q²·(1 + gain) stays inside one part range) before tow-thomas (three op-amps, any Q); when a
multiple-feedback stage's parts fall out of range, the part search falls back on tow-thomas."""

GAIN_SHIFTS = (1.0, 2.0, 0.5, 4.0, 0.25, 10.0, 0.1, 30.0, 1 / 30, 100.0, 0.01)
"""Factors a stage's gain may move from the equal-peak plan when its parts fall out of range (the
last stage takes the inverse product)."""

MAX_PLANS = 12  # orders the part search may fall back on when a stage's parts fall out of range
MAX_PERMUTED = 6  # sections; above this the order is ascending Q (720 orders at 6)


@dataclass(frozen=True)
class Section:
    """One section: ``controller`` is its positive-form transfer function (gain already scaled),
    ``topology`` the catalog stage realizing it, ``q`` its pole quality factor (0.5 or less for real
    poles, 0 for first-order sections), ``peak_gain`` the peak |gain| from the cascade input to
    this section's output over the band (V/V)."""

    controller: Controller
    topology: Topology
    q: float
    peak_gain: float = float("nan")


@dataclass(frozen=True)
class CascadePlan:
    """Sections in signal order, the target's sign, and the figures the choice was made on."""

    sections: tuple[Section, ...]
    sign: int
    noise_gain: float  # Σ over stages of the peak gain from the stage output to the cascade output
    band_hz: tuple[float, float]

    @property
    def amplifiers(self) -> int:
        return sum(s.topology.amplifiers for s in self.sections)

    @property
    def stage_sign(self) -> int:
        out = 1
        for s in self.sections:
            out *= s.topology.sign
        return out

    @property
    def needs_inverter(self) -> bool:
        return self.stage_sign != self.sign

    @property
    def total_amplifiers(self) -> int:
        """Op-amps including the unity inverter when the sign needs one."""
        return self.amplifiers + (1 if self.needs_inverter else 0)

    def summary(self) -> list[dict]:
        return [
            {
                "stage": i + 1,
                "topology": s.topology.name,
                "section": s.controller.expression(5),
                "q": s.q,
                "peak_gain_from_input": s.peak_gain,
            }
            for i, s in enumerate(self.sections)
        ]


# ----------------------------------------------------------------------------------- factoring


def _roots(c: Controller) -> tuple[np.ndarray, np.ndarray, float]:
    num = np.trim_zeros(np.array(c.num, dtype=float), "f")
    den = np.trim_zeros(np.array(c.den, dtype=float), "f")
    z = np.roots(num) if num.size > 1 else np.zeros(0, dtype=complex)
    p = np.roots(den) if den.size > 1 else np.zeros(0, dtype=complex)
    return z.astype(complex), p.astype(complex), float(num[0] / den[0])


def _split(roots: np.ndarray, scale: float) -> tuple[list[float], list[complex]]:
    """(real roots, complex roots with positive imaginary part), tiny parts cleaned to 0."""
    real, cplx = [], []
    for r in roots:
        if abs(r) <= 1e-9 * scale:
            real.append(0.0)
        elif abs(r.imag) <= 1e-7 * abs(r):
            real.append(float(r.real))
        elif r.imag > 0:
            cplx.append(complex(r))
    return real, cplx


def _poly(real: list[float], cplx: list[complex]) -> np.ndarray:
    out = np.array([1.0])
    for r in real:
        out = np.polymul(out, [1.0, -r])
    for c in cplx:
        out = np.polymul(out, [1.0, -2 * c.real, abs(c) ** 2])
    return out


def _dist(a: complex | float, b: complex | float) -> float:
    """Distance of two roots in log frequency (a root at 0 is far from everything but 0)."""
    ma, mb = abs(a), abs(b)
    if ma == 0 or mb == 0:
        return 0.0 if ma == mb else 1e9
    return abs(math.log(ma / mb))


def _q(p: complex) -> float:
    return abs(p) / (-2 * p.real) if p.real < 0 else math.inf


def _groups(target: Controller) -> tuple[list[tuple[list, list, list, list]], float]:
    """Pole-zero pairing: [(real zeros, complex zeros, real poles, complex poles)], overall gain."""
    z, p, lead = _roots(target)
    scale = max([1.0] + [abs(r) for r in np.concatenate([z, p])])
    rz, cz = _split(z, scale)
    rp, cp = _split(p, scale)
    for r in rp:
        if r > 0:
            raise UnrealizableError(
                f"the target has a pole in the right half-plane (s = +{r:.4g} rad/s): it is "
                "unstable and no cascade of stable stages realizes it",
                key="target",
            )
    for c in cp:
        if c.real >= -1e-9 * abs(c):
            raise UnrealizableError(
                f"the target has poles on or right of the imaginary axis ({c.real:.4g} ± "
                f"{abs(c.imag):.4g}j rad/s); a cascade realizes stable or integrating "
                "controllers only",
                key="target",
            )
    groups: list[tuple[list, list, list, list]] = []
    rz = sorted(rz, key=abs)
    cz = sorted(cz, key=abs)
    # zeros at s = 0 and surplus real zeros must go with second-order sections
    for pole in sorted(cp, key=_q, reverse=True):
        zc: list = []
        zr: list = []
        if cz:
            zc = [min(cz, key=lambda z0: _dist(z0, pole))]
            cz.remove(zc[0])
        else:
            surplus = len(rz) - len(rp)
            need_zero_at_0 = [r for r in rz if r == 0.0]
            take = max(0, min(2, max(surplus, len(need_zero_at_0))))
            for _ in range(take):
                pick = need_zero_at_0.pop() if need_zero_at_0 else min(rz, key=lambda z0: _dist(z0, pole))
                rz.remove(pick)
                zr.append(pick)
        groups.append((zr, zc, [], [pole]))
    # complex zeros with no complex poles left: two real poles (non-integrating first) each
    for zpair in cz:
        if len(rp) < 2:
            raise UnrealizableError(
                "the target has more complex zeros than a cascade can place: each complex zero "
                "pair needs two poles in its section",
                key="target",
            )
        chosen = sorted(rp, key=lambda r: (r == 0.0, _dist(r, zpair)))[:2]
        for r in chosen:
            rp.remove(r)
        groups.append(([], [zpair], chosen, []))
    # real poles, each with its nearest real zero; integrators first take the zeros below the rest
    for pole in sorted(rp, key=lambda r: (r != 0.0, -abs(r))):
        zr = []
        candidates = [r for r in rz if r != 0.0 or pole != 0.0]
        if candidates:
            pick = min(candidates, key=lambda z0: _dist(z0, pole) if pole != 0.0 else abs(z0))
            rz.remove(pick)
            zr = [pick]
        groups.append((zr, [], [pole], []))
    if rz:
        if len(rz) > 1 or not groups:
            raise UnrealizableError(
                f"the target has {len(rz)} real zero(s) no pole is left to pair with; a stage "
                "realizes at most as many zeros as poles",
                key="target",
            )
        # one zero left: it joins a first-order section that has none (a lag becomes a lead/lag)
        for i, (zr, zc, pr, pc) in enumerate(groups):
            if not zr and not zc and len(pr) + 2 * len(pc) > len(zr):
                groups[i] = ([rz[0]], zc, pr, pc)
                rz = []
                break
        if rz:
            raise UnrealizableError("the target has a real zero no section can take", key="target")
    return groups, lead


def _section_controller(zr, zc, pr, pc) -> Controller:
    """The section with unit gain in its own positive form (high-frequency or dc scaling aside)."""
    num = _poly(zr, zc)
    den = _poly(pr, pc)
    return Controller.analog(list(num), list(den))


def _stage_for(section: Controller, allowed: tuple[str, ...]) -> tuple[Topology, list[dict]]:
    """The fewest-amplifier topology in ``allowed`` whose design equations realize ``section``."""
    reasons = []
    for name in sorted(allowed, key=lambda n: (TOPOLOGIES[n].amplifiers, allowed.index(n))):
        topo = TOPOLOGIES[name]
        try:
            return topo, topo.fit(section)
        except UnrealizableError as exc:
            reasons.append(exc.message)
    raise UnrealizableError(f"no catalog stage realizes the section {section.expression(5)}", key="topology")


def _fits(section: Controller, allowed) -> Topology | None:
    try:
        return _stage_for(section, allowed)[0]
    except UnrealizableError:
        return None


# ----------------------------------------------------------------------------------- planning


def _response(c: Controller, f: np.ndarray) -> np.ndarray:
    return np.asarray(c.frequency_response(f), dtype=complex)


def _scale_order(units: list[Controller], responses: list[np.ndarray], gain: float) -> tuple[list[float], float]:
    """Equal-peak gains for sections in this order, and the order's noise gain."""
    n = len(units)
    cum = np.ones_like(responses[0])
    peaks = []
    for h in responses:
        cum = cum * h
        peaks.append(float(np.max(np.abs(cum))))
    final = peaks[-1] * gain
    cumulative_gain = [final / pk for pk in peaks]  # G_k so that G_k·peak_k = final peak
    cumulative_gain[-1] = gain
    gains = [cumulative_gain[0]] + [cumulative_gain[k] / cumulative_gain[k - 1] for k in range(1, n)]
    noise = 0.0
    tail = np.ones_like(responses[0])
    for k in range(n - 1, 0, -1):
        tail = tail * gains[k] * responses[k]
        noise += float(np.max(np.abs(tail)))
    return gains, noise


def _peak_grid(band_hz) -> np.ndarray:
    """Frequencies for peak gains: 100 points per decade over the band (a Q = 10 resonance's peak is
    then missed by under 0.1 %)."""
    decades = max(math.log10(band_hz[1] / band_hz[0]), 0.1)
    return np.logspace(math.log10(band_hz[0]), math.log10(band_hz[1]), int(math.ceil(100 * decades)) + 1)


def stage_peaks(design) -> dict[str, float]:
    """Peak |gain| from the input to every op-amp output of a design over its band (V/V), from the
    circuit with its rounded parts (ideal op-amps)."""
    f = _peak_grid(design.band_hz)
    topo = design.topology
    nodes = node_responses(topo, {k: np.asarray(v) for k, v in design.rounded.items()}, f)
    return {st.amp: float(np.max(np.abs(nodes[st.output]))) for st in topo.stages}


def plan_cascade(target: Controller, band_hz: tuple[float, float], *, max_opamps: int | None = None) -> CascadePlan:
    """Sections, their stages, order and gains for an analog proper ``target`` (see the module
    docstring). ``band_hz`` is where peak gains are taken. Raises UnrealizableError."""
    return plan_cascades(target, band_hz, max_opamps=max_opamps)[0]


def plan_cascades(
    target: Controller, band_hz: tuple[float, float], *, max_opamps: int | None = None, merge: bool = True
) -> list[CascadePlan]:
    """The plans of :func:`plan_cascade`, best first: the same sections in the orders with the
    smallest noise gain (at most :data:`MAX_PLANS`), for the part search to fall back on.
    ``merge=False`` skips step 3 (one stage per section: more op-amps, more freedom in gains)."""
    if target.is_digital:
        raise UnrealizableError("a cascade realizes an analog controller", key="target")
    if not target.is_proper:
        raise UnrealizableError("a cascade realizes a proper controller (no more zeros than poles)", key="target")
    groups, lead = _groups(target)
    if not groups:
        raise UnrealizableError("a constant gain needs no cascade: use inverting-gain", key="topology")
    allowed = tuple(AUTO_ORDER) + SECOND_ORDER
    units = [_section_controller(*g) for g in groups]
    # overall gain: lead coefficient ratio of the target over the product of monic sections
    gain = lead
    sign = -1 if gain < 0 else 1
    # merge pairs that one stage realizes on fewer amplifiers; of several, the one saving the most
    # op-amps with the sign's inverter counted (a merge that flips the stages' sign adds or removes
    # it: two inverting lags are two op-amps, one inverting low-pass and an inverter also two — a
    # tie, merged as before, fewer parts —, while for a target of the other sign the merge saves two)
    merged = merge
    while merged and len(units) > 1:
        merged = False
        best = None
        stages = [_fits(u, allowed) for u in units]
        parity = 1
        for t in stages:
            parity *= t.sign if t is not None else 1
        for i, j in itertools.combinations(range(len(units)), 2):
            a, b = stages[i], stages[j]
            if a is None or b is None:
                continue
            both = _fits(units[i].series(units[j]), allowed)
            if both is None:
                continue
            if both.amplifiers >= a.amplifiers + b.amplifiers:
                continue
            now = a.amplifiers + b.amplifiers + (parity != sign)
            after = both.amplifiers + (parity * a.sign * b.sign * both.sign != sign)
            saving = (now - after, a.amplifiers + b.amplifiers - both.amplifiers)
            if best is None or saving > best[0]:
                best = (saving, i, j)
        if best is not None:
            _, i, j = best
            units[i] = units[i].series(units[j])
            del units[j]
            merged = True
    # reference frequency response of the unit sections over the band
    f = _peak_grid(band_hz)
    responses = [_response(u, f) for u in units]
    qs = []
    for u in units:
        poles = u.poles()
        cpx = [p for p in poles if abs(p.imag) > 0]
        qs.append(_q(complex(cpx[0])) if cpx else (0.5 if len(poles) == 2 else 0.0))
    n = len(units)
    if n <= MAX_PERMUTED:
        orders = list(itertools.permutations(range(n)))
    else:
        orders = [tuple(sorted(range(n), key=lambda i: qs[i]))]
    ranked = []
    for order in orders:
        gains, noise = _scale_order([units[i] for i in order], [responses[i] for i in order], abs(gain))
        moved = sum(1 for a, b in zip(order, range(n)) if a != b)
        ranked.append(((round(noise, 9), moved), order, gains, noise))
    ranked.sort(key=lambda r: r[0])
    plans = []
    for _, order, gains, noise in ranked[:MAX_PLANS]:
        sections = []
        cum = np.ones(f.size, dtype=complex)
        for i, g in zip(order, gains):
            c = units[i].scaled(g)
            topo, _ = _stage_for(c, allowed)
            cum = cum * responses[i] * g
            sections.append(Section(c, topo, qs[i], float(np.max(np.abs(cum)))))
        plans.append(CascadePlan(tuple(sections), sign, float(noise), (float(band_hz[0]), float(band_hz[1]))))
    plan = plans[0]
    if max_opamps is not None and plan.total_amplifiers > max_opamps:
        raise UnrealizableError(
            f"the cascade needs {plan.total_amplifiers} op-amps "
            f"({', '.join(s.topology.name for s in plan.sections)}"
            f"{' and a unity inverter' if plan.needs_inverter else ''}), more than the cap of "
            f"{max_opamps}",
            key="max opamps",
        )
    return plans


# ----------------------------------------------------------------------------------- the circuit


def _polymul(a: list, b: list) -> list:
    """Product of two coefficient lists whose entries are arrays (draws) or numbers."""
    out = [0.0] * (len(a) + len(b) - 1)
    for i, x in enumerate(a):
        for j, y in enumerate(b):
            out[i + j] = out[i + j] + np.asarray(x) * np.asarray(y)
    return out


def _renamed(text: str, names: dict) -> str:
    """``text`` with a stage's own part names (R1, C2, ...) replaced by the cascade's."""
    return re.sub(r"\b([RC]\d+)\b", lambda m: names.get(m.group(1), m.group(1)), text)


def _rename_net(net, names: dict):
    if isinstance(net, R):
        return R(names[net.name])
    if isinstance(net, C):
        return C(names[net.name])
    kind = Series if isinstance(net, Series) else Parallel
    return kind(*[_rename_net(i, names) for i in net.items])


def cascade_topology(stages: list[Topology], w_ref: float | None = None) -> tuple[Topology, list[dict[str, str]]]:
    """One Topology chaining ``stages`` (single-input catalog topologies) in signal order.

    Parts are renumbered R1.., C1.. and op-amps U1.. in signal order; returns the topology and, per
    stage, the map from the stage's own part names to the cascade's. ``w_ref`` (rad/s, e.g. the
    band's geometric mean): the coefficients are divided, numerator and denominator alike, by
    |D(j·w_ref)| of each part set, so that a high-order product stays near 1 around the band (the
    transfer function is unchanged; arithmetic in float32 keeps away from overflow).
    """
    counters = {"R": 0, "C": 0}
    amp = 0
    parts, new_stages, maps, junctions = [], [], [], []
    previous = "in"
    for k, topo in enumerate(stages, start=1):
        if topo.two_input:
            raise UnrealizableError(f"{topo.name} has two inputs and cannot be a cascade stage", key="topology")
        names = {}
        for p in topo.parts:
            counters[p.kind] += 1
            names[p.name] = f"{p.kind}{counters[p.kind]}"
        for p in topo.parts:
            parts.append(replace(p, name=names[p.name], role=f"stage {k} ({topo.name}): {_renamed(p.role, names)}"))
        maps.append(names)
        last = k == len(stages)
        local_out = topo.stages[-1].output
        nodes = {"in": previous, local_out: "out" if last else f"s{k}_out"}

        def node(x, k=k, nodes=nodes):
            return nodes.get(x, f"s{k}_{x}")

        for st in topo.stages:
            amp += 1
            plus = (
                None
                if st.plus is None
                else (node(st.plus[0]), _rename_net(st.plus[1], names), _rename_net(st.plus[2], names))
            )
            new_stages.append(
                Stage(
                    f"U{amp}",
                    node(st.output),
                    _rename_net(st.feedback, names),
                    tuple((node(src), _rename_net(net, names)) for src, net in st.inputs),
                    plus,
                    role=f"stage {k} {st.role}",
                )
            )
        for jn in topo.junctions:
            junctions.append(
                Junction(
                    node(jn.name),
                    tuple(
                        (GROUND if other == GROUND else node(other), _rename_net(net, names))
                        for other, net in jn.branches
                    ),
                    role=f"stage {k} {jn.role}",
                )
            )
        previous = nodes[local_out]

    def coefficients(p):
        num, den = [1.0], [1.0]
        for topo, names in zip(stages, maps):
            n, d = topo.coefficients({local: p[glob] for local, glob in names.items()})
            num, den = _polymul(num, n), _polymul(den, d)
        if w_ref:
            at = 0j
            for c in den:
                at = at * (1j * w_ref) + np.asarray(c, dtype=float)
            scale = np.abs(at)
            scale = np.where(np.isfinite(scale) & (scale > 0), scale, 1.0)
            num = [np.asarray(c, dtype=float) / scale for c in num]
            den = [np.asarray(c, dtype=float) / scale for c in den]
        return num, den

    def parameters(p):
        out = {}
        for k, (topo, names) in enumerate(zip(stages, maps), start=1):
            for key, v in topo.parameters({local: p[glob] for local, glob in names.items()}).items():
                out[f"stage{k}.{key}"] = v
        return out

    def fit(topo, shape, settings):
        raise UnrealizableError(
            "a cascade is designed from its target (topology auto or cascade), not fitted as one stage",
            key="topology",
        )

    inverting = sum(1 for t in stages if t.inverting) % 2 == 1
    topo = Topology(
        name="cascade",
        description=f"cascade of {len(stages)} stage{'s' if len(stages) != 1 else ''}: "
        + ", ".join(t.name for t in stages),
        parts=tuple(parts),
        stages=tuple(new_stages),
        junctions=tuple(junctions),
        inverting=inverting,
        represents="the product of its stages' transfer functions",
        equations=tuple(
            f"stage {k}: {_renamed(eq, names)}"
            for k, (t, names) in enumerate(zip(stages, maps), start=1)
            for eq in t.equations
        ),
        _coefficients=coefficients,
        _parameters=parameters,
        _fit=fit,
    )
    return topo, maps


# ----------------------------------------------------------------------------------- design


def _search_section(stage: Topology, section: Controller, options, f: np.ndarray):
    """(design quantities, candidates, diagnostics) of the best-scoring alternative of one stage."""
    ref = section.frequency_response(f)
    found, last = None, None
    for q in stage.fit(section):
        try:
            cands, diag = search_parts(stage, q, options, f, ref)
        except UnrealizableError as exc:
            last = last or exc
            continue
        if found is None or cands[0].score < found[1][0].score:
            found = (q, cands, diag)
    if found is None:
        raise last
    return found


def _fallbacks(section: Section) -> list[Topology]:
    """The section's planned stage, then the other second-order stages that realize it with more
    op-amps (a multiple-feedback section whose parts fall out of range falls back on tow-thomas)."""
    out = [section.topology]
    if section.topology.name in SECOND_ORDER:
        for name in SECOND_ORDER:
            topo = TOPOLOGIES[name]
            if topo is section.topology or topo.amplifiers <= section.topology.amplifiers:
                continue
            if topo.sign == section.topology.sign and _fits(section.controller, (name,)) is not None:
                out.append(topo)
    return out


def _build(plan: CascadePlan, options, f: np.ndarray, strict: bool):
    """Parts for every stage of ``plan`` -> (topology, rounded, nominal, design quantities, gain moves,
    stages used).

    A stage whose parts fall out of range may move its gain by a factor of :data:`GAIN_SHIFTS` (the
    last stage takes the inverse product); when ``strict``, only as far as the stage's output still
    peaks no higher than max(input, output). When no gain keeps the planned stage's parts in range,
    a second-order section tries its :func:`_fallbacks` (within ``options.max_opamps``)."""
    w_ref = 2 * math.pi * math.sqrt(plan.band_hz[0] * plan.band_hz[1])
    limit = max(plan.sections[-1].peak_gain, 1.0)
    moved = 1.0  # product of the gain factors applied so far against the plan's equal-peak gains
    shifted = []
    chosen: list[tuple[Topology, dict, list, dict]] = []
    extra = 0  # op-amps added by fallbacks
    for k, section in enumerate(plan.sections, start=1):
        last_stage = k == len(plan.sections)
        factors = [1.0 / moved] if last_stage else [x / moved for x in GAIN_SHIFTS]
        found, last, capped = None, None, ""
        for stage in _fallbacks(section):
            added = stage.amplifiers - section.topology.amplifiers
            if added and options.max_opamps is not None and plan.total_amplifiers + extra + added > options.max_opamps:
                capped = (
                    f"; {stage.name} would realize it with {added} op-amps more, above the cap of {options.max_opamps}"
                )
                continue
            for x in factors:
                if strict and not last_stage and section.peak_gain * moved * x > limit * (1 + 1e-9):
                    continue  # this stage's output would peak above max(input, output)
                try:
                    found = (stage, *_search_section(stage, section.controller.scaled(x), options, f))
                except UnrealizableError as exc:
                    last = last or exc
                    continue
                moved *= x
                extra += added
                if not math.isclose(x, 1.0):
                    shifted.append((k, x))
                break
            if found is not None:
                break
        if found is None:
            if last is None:
                raise UnrealizableError(
                    f"cascade stage {k} ({section.topology.name}) has no gain left that keeps its "
                    "output below the input's and output's peak",
                    key="topology",
                )
            raise UnrealizableError(
                f"cascade stage {k} ({section.topology.name}, {section.controller.expression(4)}): {last.message}"
                + capped,
                key=last.key,
                settings=last.settings,
            )
        chosen.append(found)
    topo, maps = cascade_topology([c[0] for c in chosen], w_ref)
    rounded, nominal, params = {}, {}, {}
    for k, ((_, q, cands, diag), names) in enumerate(zip(chosen, maps), start=1):
        for local, glob in names.items():
            rounded[glob] = cands[0].parts[local]
            nominal[glob] = diag["nominal"][local]
        params.update({f"stage{k}.{key}": v for key, v in q.items()})
    return topo, rounded, nominal, params, shifted, [c[0] for c in chosen]


def design_cascade(
    target: Controller,
    options,
    *,
    source: Controller | None = None,
    filtered=None,
    notes: list[str] | None = None,
    band_hz: tuple[float, float] | None = None,
):
    """A :class:`~convert.circuit.design.CircuitDesign` whose topology is the cascade of
    :func:`plan_cascade`: each section's parts searched over the series on its own (the log error of
    a product is the sum of the sections' log errors), then joined and scored as one circuit. When a
    stage's parts fall out of range the next order of :func:`plan_cascades` is tried; only when none
    keeps every stage output within max(input, output) peak is a stage allowed above it (noted)."""
    band = band_hz or options.band_hz or default_band(target)
    plans = plan_cascades(target, band, max_opamps=options.max_opamps)
    f = np.logspace(math.log10(band[0]), math.log10(band[1]), max(options.points, 2))
    built, first_error = None, None
    try:
        unmerged = [
            p
            for p in plan_cascades(target, band, max_opamps=options.max_opamps, merge=False)
            if p.amplifiers > plans[0].amplifiers
        ]
    except UnrealizableError:  # over the op-amp cap
        unmerged = []
    for strict, tries in ((True, plans), (True, unmerged), (False, plans[:1])):
        for plan in tries:
            try:
                built = (plan, *_build(plan, options, f, strict), strict)
                break
            except UnrealizableError as exc:
                first_error = first_error or exc
        if built is not None:
            break
    if built is None:
        raise first_error
    plan, topo, rounded, nominal, params, shifted, used, strict = built
    fell_back = [
        (k, s.topology.name, t.name) for k, (t, s) in enumerate(zip(used, plan.sections), 1) if t is not s.topology
    ]
    if fell_back:
        plan = replace(plan, sections=tuple(replace(s, topology=t) for t, s in zip(used, plan.sections)))
    sign = plan.sign
    ref = target.frequency_response(f) * sign
    sc, gdb, pdeg = score_parts(topo, {k: np.asarray([v]) for k, v in rounded.items()}, f, ref)
    best = Candidate(dict(rounded), float(sc[0]), float(gdb[0]), float(pdeg[0]))
    best = _figures_off_grid(topo, target, sign, [best], f)[0]  # the same figures as the rounding row
    realized = topo.controller_from_parts(rounded).scaled(sign).with_name("cascade (rounded parts)")
    needs_inverter = topo.sign != sign
    notes = list(notes or [])
    n_st = len(plan.sections)
    stages_text = f"{n_st} stage{'s' if n_st != 1 else ''} on {plan.total_amplifiers} op-amp" + (
        "s" if plan.total_amplifiers != 1 else ""
    )
    why = (
        "a cascade was asked for (topology cascade)"
        if options.topology.lower() == "cascade"
        else "no single catalog stage realizes this target"
    )
    notes.append(
        f"{why}; a cascade of {stages_text} does: "
        + "; ".join(
            # each stage with its own sign (an inverting stage turns its section over)
            f"stage {i} {s.topology.name} {s.controller.scaled(s.topology.sign).expression(4)}"
            for i, s in enumerate(plan.sections, start=1)
        )
    )
    if n_st > 1:  # one stage feeds no other: no noise gain between stages to report
        notes.append(
            "stage gains scaled so that every stage output peaks at the output's peak gain over the band "
            f"({plan.sections[-1].peak_gain:.4g} V/V); noise gain (sum of peak gains from each stage "
            f"output to the output) {plan.noise_gain:.4g}"
        )
    for k, was, now in fell_back:
        notes.append(f"stage {k}: {was} had no parts in range at any gain; {now} realizes the section")
    for k, x in shifted:
        notes.append(f"stage {k}'s gain moved by a factor {x:.4g} from the equal-peak plan to keep its parts in range")
    if not strict:
        notes.append(
            "CAUTION: no stage order keeps every stage output within the input's and output's peak with "
            "parts in range; check the peak gains below against the swing for your input range"
        )
    if needs_inverter:
        notes.append("the stages' signs multiply to the opposite of the target's; a unity inverter follows them")
    design = CircuitDesign(
        topology=topo,
        source=source or target,
        target=target,
        sign=sign,
        needs_inverter=needs_inverter,
        params=params,
        nominal=nominal,
        rounded=rounded,
        realized=realized,
        band_hz=(float(band[0]), float(band[1])),
        candidates=[best],
        options=options,
        notes=notes,
        filter_added=filtered,
        cascade=plan,
    )

    peaks = stage_peaks(design)
    notes.append(
        "peak gain from the input at each op-amp output over the band (ideal op-amps): "
        + ", ".join(f"{amp} {v:.3g}" for amp, v in peaks.items())
        + SWING_HINT
    )
    return design
