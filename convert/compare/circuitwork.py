"""The circuit target of a case: design, budget rows, Monte Carlo band, loop figures, files.

Monte Carlo: the circuit package's one tolerance engine
(:func:`convert.circuit.tolerance.run_tolerances`, the same that ``loopshift circuit`` runs):
each part drawn independently within ±its tolerance around its rounded (series) value, seeded;
the rows report the 99th percentile of the per-draw figures, computed in chunks of draws
(memory bounded whatever the draw count).
"""

from __future__ import annotations

import numpy as np

from convert.compare.loop import loop_margins, margin_grid
from convert.controller import Controller
from convert.errors import LoopshiftError
from convert.circuit.design import DesignOptions, design_circuit
from convert.circuit.opamp import swing_noted, swing_check
from convert.circuit.topologies.model import circuit_polynomials
from convert.values import format_value
from convert.circuit.card import _ratio
from convert.circuit.tolerance import Comparison, run_tolerances, LoopCount
from convert.circuit.bom import bom_csv, bom_rows
from convert.circuit.buylist import buy_list
from convert.circuit.netlist_out import design_netlist
from convert.circuit.schematic import schematic_of
from convert.jsonable import to_jsonable


def circuit_realization(
    case,
    src: Controller,
    analog_src: Controller,
    band,
    src_margins,
    duration,
    src_step,
    src_dist,
    *,
    draws=None,
    tick=lambda text: None,
    case_reduction=None,
    source_pid=None,
    setpoint_filter=None,
):
    # imported here, not at the top: import cycle (convert.compare.circuitwork -> convert.compare.evaluate -> convert.compare.stages -> convert.compare.circuitwork)
    from convert.compare.evaluate import WEIGHTS_NOT_CARRIED, Realization, _simulate_pair

    # imported here, not at the top: import cycle (convert.compare.circuitwork -> convert.compare.stages -> convert.compare.circuitwork)
    from convert.compare.stages import circuit_budget, circuit_response

    tgt = case.circuit
    options = DesignOptions(
        topology=tgt.topology,
        resistors=tgt.resistors,
        capacitors=tgt.capacitors,
        r_min=tgt.resistor_range[0],
        r_max=tgt.resistor_range[1],
        c_min=tgt.capacitor_range[0],
        c_max=tgt.capacitor_range[1],
        band_hz=tuple(case.criteria.band_hz),
        max_opamps=tgt.max_opamps,
    )
    # a two-input stage is built with the source PID's setpoint weights (it carries them)
    settings = source_pid if source_pid is not None and "two-input" in str(tgt.topology) else None
    try:
        design = design_circuit(
            analog_src, options, settings=settings, series_times=getattr(source_pid, "given_series", None)
        )
    except LoopshiftError as exc:
        # imported here, not at the top: import cycle (convert.compare.circuitwork -> convert.case -> convert.pipeline -> convert.compare.stages -> convert.compare.circuitwork)
        from convert.case import circuit_key

        exc.name_settings({k: circuit_key(k) for k in exc.settings})
        key = circuit_key(exc.key)
        raise type(exc)(exc.message, where=case.where(key), key=key) from None
    tick("circuit design")
    cb = circuit_budget(
        design,
        src,
        analog_src,
        band,
        tolerances=dict(tgt.tolerances),
        draws=int(draws if draws is not None else tgt.draws),
        seed=tgt.seed,
        distribution=tgt.distribution,
        opamp_gbw_hz=tgt.opamp_gbw_hz,
        plant=case.plant,
        source_margins=src_margins,
        reduction=case_reduction,
        tick=tick,
    )
    budget = list(cb.rows)
    topo, model, mc, tols, n_draws = design.topology, cb.opamp, cb.monte_carlo, dict(tgt.tolerances), cb.draws
    swing = swing_check_of(design, tgt, model)
    nominal, rounded = design.nominal, design.rounded

    def resp(parts, f, opamp=None):
        return circuit_response(design, parts, f, opamp)

    parts_text = {
        k: format_value(v, "ohm" if k.upper().startswith("R") else "farad") for k, v in design.fitted_parts().items()
    }
    realized: Controller = design.realized
    details = {
        "topology": topo.name,
        "parts": design.fitted_parts(),
        "parts_text": parts_text,
        "computed_parts": {k: float(v) for k, v in nominal.items()},
        "series": design.part_series,
        "tolerances": tols,
        "needs_inverter": design.needs_inverter,
        "opamp_gbw_hz": tgt.opamp_gbw_hz,
        "draws": n_draws,
        "seed": tgt.seed,
        "notes": swing_noted(design.notes, tgt.input_amplitude_v, tgt.rail_v),
    }
    if swing is not None:
        details["swing"] = swing.summary()
        details["swing_check"] = swing_judgement(swing)
    opamp_poles = opamp_stability_check(design, model)
    if opamp_poles is not None:
        details["opamp_stability_check"] = opamp_poles
    name = f"circuit {topo.name}"
    r = Realization(
        name=name,
        form="circuit",
        controller=realized,
        details=details,
        budget=budget,
        seen=lambda f: resp(rounded, f, model)[0],
        warnings=swing_noted(design.notes, tgt.input_amplitude_v, tgt.rail_v),
    )
    # Monte Carlo band for the figure (with the op-amp model, as the total row) and the per-draw
    # maxima the verdict uses (the error panels draw them with the limits)
    r.band = {
        "f_hz": mc.band.f_hz,
        "gain_db": mc.band.gain_db,
        "phase_deg": mc.band.phase_deg,
        "percentiles": mc.band.percentiles,
        "nominal_gain_db": mc.band.nominal_gain_db,
        "nominal_phase_deg": mc.band.nominal_phase_deg,
        "draws": n_draws,
        "seed": tgt.seed,
        "distribution": tgt.distribution,
        "total": mc.figures["total"],
    }
    # a two-input stage runs its own setpoint path (from its rounded parts); a one-input stage
    # has u = C·(r − y) and is judged against the source's weighted response
    own = None
    if topo.two_input:
        paths = topo.paths_from_parts(rounded)
        own = _ratio(paths["setpoint"], paths["measurement"], "setpoint filter F = Cr / Cy")
        if own.order == 0 and len(own.num) == 1 and abs(own.num[0] - 1.0) <= 1e-9:
            own = None
        else:
            # a plant log replays it on the setpoint, with the realization's sign (Cy = ±realized)
            r.setpoint_path = paths["setpoint"].scaled(float(np.sign(realized.gain * paths["measurement"].gain)))
    if case.plant is not None:
        r.margins = loop_margins(realized, case.plant.model, case.plant.dead_time_s)
        limits = case.signals.output_range
        if tgt.rail_v is not None:  # the op-amps cannot drive the output past their rail
            rail = (-tgt.rail_v, tgt.rail_v)
            limits = rail if limits is None else (max(limits[0], rail[0]), min(limits[1], rail[1]))
        r.step, r.disturbance = _simulate_pair(case, realized, duration, 0.0, limits, setpoint_filter=own)
        if tgt.rail_v is not None and any(
            resp is not None and np.max(np.abs(resp.u)) >= tgt.rail_v * (1 - 1e-9) for resp in (r.step, r.disturbance)
        ):
            r.warnings.append(
                f"the circuit's output reaches the {tgt.rail_v:g} V rail in the loop simulation: it is clipped there "
                "(an op-amp stage saturated at its rail leaves its linear law; the clipped response is a model of it)"
            )
        if setpoint_filter is not None and own is None:
            r.warnings.append(WEIGHTS_NOT_CARRIED)
    r.files = circuit_files(
        design,
        model,
        tols,
        rail_v=tgt.rail_v,
        amplitude_v=tgt.input_amplitude_v,
        seed=tgt.seed,
        draws=n_draws,
        distribution=tgt.distribution,
    )
    tick("circuit files")
    return r


def monte_carlo_rows(
    topology,
    rounded: dict,
    tolerances: dict,
    band_f_hz,
    *,
    sign: float,
    draws: int,
    seed: int,
    distribution: str,
    rounded_response,
    source_response,
    opamp=None,
    loop_f_hz=None,
    loop_margins=None,
    loop_rounded=None,
    loop_source=None,
    display_f_hz=None,
    loop_count=None,
    parameters=False,
):
    """The Monte Carlo a circuit budget needs, in one run of the tolerance engine: the
    ``tolerances`` comparison (draws, ideal op-amp, against the rounded parts) and the ``total``
    (draws with the op-amp model against the source as the loop sees it), with the margin
    changes on the loop grid when ``loop_margins`` is given, and the gain/phase band on
    ``display_f_hz`` (with the op-amp model)."""
    comparisons = [
        Comparison("tolerances", np.asarray(rounded_response), None, loop_rounded),
        Comparison("total", np.asarray(source_response), opamp, loop_source),
    ]
    return run_tolerances(
        topology,
        rounded,
        tolerances,
        band_f_hz=band_f_hz,
        comparisons=comparisons,
        draws=draws,
        seed=seed,
        distribution=distribution,
        sign=sign,
        loop_f_hz=loop_f_hz,
        loop_margins=loop_margins,
        display_f_hz=display_f_hz,
        display_opamp=opamp,
        parameters=parameters,
        loop_count=loop_count,
    )


#: Points of the log grid on which a Monte Carlo takes each draw's loop margins.
DRAWN_LOOP_POINTS = 320


def drawn_loop_grid(crossover_hz, phase_crossover_hz, sensitivity_peak_hz, band_top_hz: float) -> np.ndarray:
    """The grid (Hz) on which a Monte Carlo takes every draw's margins: :data:`DRAWN_LOOP_POINTS`
    log-spaced points around the nominal loop's marks (gain and phase crossovers, sensitivity
    peak; each None or NaN when the loop has none), from 1/30 of the gain crossover (else of the
    lowest mark) to 30 times the highest mark; the band's top stands in when there is no mark.
    The draws move the marks by a few per cent at most. One rule for a designed circuit
    (:func:`convert.compare.stages.circuit_budget`) and a given card."""
    marks = [float(x) for x in (crossover_hz, phase_crossover_hz, sensitivity_peak_hz) if x and np.isfinite(x)]
    cross = float(crossover_hz) if crossover_hz and np.isfinite(crossover_hz) else None
    lo = (cross or min(marks, default=float(band_top_hz))) / 30
    hi = max(marks, default=float(band_top_hz)) * 30
    return np.logspace(np.log10(lo), np.log10(hi), DRAWN_LOOP_POINTS)


#: Grid density (points per decade) of the stability count's walk along 1 + L. The count follows
#: arg(1 + L) from point to point and refines any step above 60° (up to 32⁴ times finer), so its
#: result does not rest on the density; 50 a decade keeps the steps of a draw's loop far below
#: the refinement threshold except where 1 + L passes near 0, where the refinement takes over.
COUNT_POINTS_PER_DECADE = 50


def loop_count_of(controller, plant):
    """What the tolerance engine needs to count unstable draws of a circuit's loop with ``plant``
    (the case's plant, dead time exact): a log grid over the nominal loop's margin range
    (:data:`COUNT_POINTS_PER_DECADE`), widened until |L| is below 1/100 at the top."""
    f = margin_grid(controller, plant.model, points_per_decade=COUNT_POINTS_PER_DECADE)
    theta = plant.dead_time_s

    def p_of(fx):
        fx = np.asarray(fx, dtype=float)
        return plant.model.frequency_response(fx, via="zpk") * np.exp(-2j * np.pi * fx * theta)

    with np.errstate(all="ignore"):
        for _ in range(6):  # the top of the grid where every draw's |L| has fallen well below 1/2
            top = abs(controller.frequency_response(f[-1:], via="zpk")[0] * p_of(f[-1:])[0])
            if not top > 0.01:
                break
            f = np.concatenate([f, f[-1] * np.logspace(0, 1, COUNT_POINTS_PER_DECADE + 1)[1:]])
    return LoopCount(f, p_of)


def opamp_stability_check(design, model) -> dict | None:
    """The always-on check an op-amp model adds: the circuit with its rounded parts and op-amps of
    that gain-bandwidth, written out as one rational function (:func:`circuit_polynomials`), may
    have no more right-half-plane poles than with ideal op-amps (a stage that oscillates with real
    op-amps is not the controller, whatever its response with ideal ones). Figure: the largest real
    part of its poles (1/s). None with ideal op-amps, or when the circuit is not written out."""
    if model is None or model.ideal:
        return None
    parts = {k: np.array([float(v)]) for k, v in design.rounded.items()}
    poly = circuit_polynomials(design.topology, parts, model.open_loop_polynomials())
    if poly is None:
        return None
    den = np.trim_zeros(np.array([float(np.ravel(c)[0]) for c in poly[1]]), "f")
    poles = np.roots(den) if den.size > 1 else np.zeros(0, complex)
    scale = max(1.0, float(np.max(np.abs(poles)))) if poles.size else 1.0
    ideal = design.realized.poles()
    n_ideal = int(np.sum(ideal.real > 1e-9 * max(1.0, float(np.max(np.abs(ideal))) if ideal.size else 1.0)))
    unstable = poles[poles.real > 1e-9 * scale]
    ok = unstable.size <= n_ideal
    worst = float(np.max(poles.real)) if poles.size else None
    gbw = format_value(model.gbw_hz, "hz")
    note = (
        f"with {gbw} op-amps: {poles.size} poles, none in the right half-plane beyond those with ideal op-amps"
        if ok
        else f"with {gbw} op-amps the circuit has {unstable.size} pole(s) in the right half-plane ("
        + ", ".join(f"{p.real:.4g}{p.imag:+.4g}j 1/s" for p in unstable[:4])
        + f"; {n_ideal} with ideal op-amps): it oscillates, it is not the controller (choose faster op-amps or "
        "another topology)"
    )
    return {
        "key": "controller_stable_opamps",
        "label": "circuit stable with its op-amps",
        "unit": "1/s",
        "limit": None,
        "value": worst,
        "status": "pass" if ok else "fail",
        "note": note,
    }


def swing_check_of(design, target, model):
    """The output-swing check of the circuit target's stated ``rail`` and ``input_amplitude``
    (:func:`convert.circuit.opamp.swing_check` on the rounded parts over the design band, the
    same check as ``loopshift circuit --rail --amplitude``), or None when they are not stated."""
    if target.rail_v is None or target.input_amplitude_v is None:
        return None

    parts = {k: np.asarray(v) for k, v in design.rounded.items()}
    return swing_check(design.topology, parts, design.f_grid(50), target.input_amplitude_v, target.rail_v, model)


def swing_judgement(swing) -> dict:
    """The always-on check a stated rail and input amplitude add: every op-amp output's peak over
    the band (V) within the rail, else FAIL (the stage clips and the circuit is not the controller)."""
    peaks = {k: float(np.max(v)) for k, v in swing.peak_v.items()}
    worst = max(peaks, key=peaks.get)
    over = [f"{k} {v:.3g} V" for k, v in peaks.items() if v > swing.rail_v]
    note = f"for a {swing.amplitude_v:g} V input over the band: " + (
        ", ".join(over) + f" above the {swing.rail_v:g} V rail (the stage clips)"
        if over
        else f"largest {worst} {peaks[worst]:.3g} V"
    )
    return {
        "key": "output_swing",
        "label": "op-amp outputs within the rail",
        "unit": "V",
        "limit": swing.rail_v,
        "value": peaks[worst],
        "status": "pass" if swing.ok else "fail",
        "note": note,
    }


def circuit_files(
    design,
    model,
    tolerances=None,
    *,
    rail_v=None,
    amplitude_v=None,
    seed: int = 1,
    draws: int = 0,
    distribution: str | None = None,
) -> dict:
    """BOM (CSV text), buy list (CSV and JSON text, :mod:`convert.circuit.buylist`; ratings from
    ``rail_v`` and ``amplitude_v`` in volts, default a 15 V rail; the suggested tolerances priced by
    the Monte Carlo of ``draws`` draws and ``seed``), SPICE netlist (text) and schematic (a
    :class:`convert.circuit.schematic.Schematic` that the report layer draws as PNG) of the design."""
    import json

    order = buy_list(
        design,
        tolerances,
        rail_v=rail_v or 15.0,
        amplitude_v=amplitude_v,
        draws=draws,
        seed=seed,
        distribution=distribution,
    )
    return {
        "circuit.cir": design_netlist(design, opamp=model),
        "bom.csv": bom_csv(bom_rows(design, tolerances)),
        "buy_list.csv": order.csv(),
        "buy_list.json": json.dumps(to_jsonable(order.summary()), indent=2, ensure_ascii=True) + "\n",
        "schematic.png": schematic_of(design),
    }
