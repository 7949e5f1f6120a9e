"""The circuit target of a case: design, budget rows, Monte Carlo band, loop figures, files.

Monte Carlo: each part is drawn independently and uniformly within ±its tolerance around its
rounded (series) value, by :func:`convert.circuit.tolerance.draw_parts` (seeded). Percentile rows report the 99th percentile
of the per-draw figures.
"""

from __future__ import annotations

import numpy as np

from convert.compare import budget as bud
from convert.compare.frequency import response_seen_from_loop
from convert.compare.loop import loop_margins, margins_of_responses
from convert.controller import Controller
from convert.errors import LoopshiftError

PERCENTILE = 99.0


def draw_parts(topology, rounded: dict, tolerances: dict, draws: int, seed: int) -> dict[str, np.ndarray]:
    """Part sets (name -> array of ``draws`` values) from the circuit package's Monte Carlo
    (uniform within ±tolerance; tolerance by part name, then by kind R/C)."""
    from convert.circuit.tolerance import draw_parts as _draw

    return _draw(topology, rounded, tolerances, int(draws), int(seed))


def circuit_realization(case, src: Controller, analog_src: Controller, band, src_margins, duration, src_step,
                        src_dist, *, draws=None, tick=lambda text: None, case_reduction=None, source_pid=None):
    from convert.circuit.design import DesignOptions, design_circuit
    from convert.circuit.opamp import OpAmpModel, gbw_response
    from convert.compare.evaluate import Realization, _fmt_hz, _simulate_pair

    tgt = case.circuit
    options = DesignOptions(topology=tgt.topology, resistors=tgt.resistors, capacitors=tgt.capacitors,
                            r_min=tgt.resistor_range[0], r_max=tgt.resistor_range[1], c_min=tgt.capacitor_range[0],
                            c_max=tgt.capacitor_range[1], band_hz=tuple(case.criteria.band_hz))
    settings = None
    try:
        design = design_circuit(analog_src, options, settings=settings,
                                series_times=getattr(source_pid, "given_series", None))
    except LoopshiftError as exc:
        from convert.case import circuit_key

        exc.name_settings({k: circuit_key(k) for k in exc.settings})
        key = circuit_key(exc.key)
        raise type(exc)(exc.message, where=case.where(key), key=key) from None
    tick("circuit design")
    topo = design.topology
    sign = design.sign
    n_draws = int(draws if draws is not None else tgt.draws)
    model = OpAmpModel(tgt.opamp_gbw_hz)

    def resp(parts, f, opamp=None):
        arr = {k: np.atleast_1d(np.asarray(v, dtype=float)) for k, v in parts.items()}
        if opamp is None or opamp.ideal:
            r = topo.response(arr, f)
        else:
            r = gbw_response(topo, arr, f, opamp)
        return sign * np.atleast_2d(r)

    nominal, rounded = design.nominal, design.rounded
    loop_f = None
    if case.plant is not None:
        # around the source loop's crossovers: the draws move them by a few per cent at most
        # (a figure may be absent: no crossover, or no interior sensitivity peak)
        marks = [x for x in (src_margins.crossover_hz, src_margins.phase_crossover_hz,
                             src_margins.sensitivity_peak_hz) if x]
        lo = (src_margins.crossover_hz or min(marks, default=float(band[-1]))) / 30
        hi = max(marks, default=float(band[-1])) * 30
        loop_f = np.logspace(np.log10(lo), np.log10(hi), 320)
    spec = bud.LoopSpec(loop_f, lambda r: margins_of_responses(loop_f, r, case.plant.model, case.plant.dead_time_s)) \
        if case.plant else None

    def both(fn):
        if loop_f is None:
            return fn(band), None
        out = fn(np.concatenate([band, loop_f]))  # one evaluation over both grids
        return out[..., :band.size], out[..., band.size:]

    src_b, src_l = both(lambda f: response_seen_from_loop(src, f, via="zpk"))
    an_b, an_l = both(lambda f: analog_src.frequency_response(f, via="zpk"))
    tgt_b, tgt_l = both(lambda f: design.target.frequency_response(f, via="zpk"))
    nom_b, nom_l = both(lambda f: resp(nominal, f)[0])
    rnd_b, rnd_l = both(lambda f: resp(rounded, f)[0])
    rows = {}
    if design.filter_added is not None:
        rows["derivative_filter"] = bud.error_row(
            "derivative_filter", band, an_b, tgt_b, note="the derivative filter the circuit adds, alone (analog, exact)",
            loop=spec, loop_reference=an_l, loop_candidate=tgt_l)
    else:
        rows["derivative_filter"] = bud.not_applicable("derivative_filter", "the source is proper; no filter added")
    rows["series_rounding"] = bud.error_row(
        "series_rounding", band, nom_b, rnd_b,
        note=f"parts rounded to {tgt.resistors}/{tgt.capacitors} alone: rounded against computed values, ideal op-amp",
        loop=spec, loop_reference=nom_l, loop_candidate=rnd_l)
    tols = dict(tgt.tolerances)
    drawn = draw_parts(topo, rounded, tols, n_draws, tgt.seed)
    d_b, d_l = both(lambda f: resp(drawn, f))
    rows["tolerances"] = bud.error_row(
        "tolerances", band, rnd_b, d_b, percentile=PERCENTILE,
        note=f"{n_draws} draws within ±tolerance ({', '.join(f'{k} {v * 100:g} %' for k, v in tols.items())}) around "
             f"the rounded parts alone, ideal op-amp; seed {tgt.seed}",
        loop=spec, loop_reference=rnd_l, loop_candidate=d_l)
    tick("Monte Carlo")
    if not model.ideal:
        g_b, g_l = both(lambda f: resp(nominal, f, model)[0])
        rows["opamp_gbw"] = bud.error_row(
            "opamp_gbw", band, nom_b, g_b, note=f"single-pole op-amp, GBW {_fmt_hz(model.gbw_hz)}, alone (computed parts)",
            loop=spec, loop_reference=nom_l, loop_candidate=g_l)
        t_b, t_l = both(lambda f: resp(drawn, f, model))
    else:
        rows["opamp_gbw"] = bud.not_applicable("opamp_gbw", "ideal op-amp (set target.circuit.opamp_gbw to check it)")
        t_b, t_l = d_b, d_l
    from convert.compare.evaluate import card_parasitics_row

    rows.update(card_parasitics_row(case_reduction, band, spec, loop_f))
    rows["total"] = bud.error_row(
        "total", band, src_b, t_b, percentile=PERCENTILE,
        note="everything on: filter, rounding, tolerances" + (", op-amp GBW" if not model.ideal else "")
             + "; against the source as the loop sees it",
        loop=spec, loop_reference=src_l, loop_candidate=t_l)
    budget = bud.assemble(rows, bud.CIRCUIT_ROWS, "circuit")

    from convert.values import format_value

    parts_text = {k: format_value(v, "ohm" if k.upper().startswith("R") else "farad")
                  for k, v in design.fitted_parts().items()}
    realized: Controller = design.realized
    details = {"topology": topo.name, "parts": design.fitted_parts(), "parts_text": parts_text,
               "computed_parts": {k: float(v) for k, v in nominal.items()}, "series": design.part_series,
               "tolerances": tols, "needs_inverter": design.needs_inverter, "opamp_gbw_hz": tgt.opamp_gbw_hz,
               "draws": n_draws, "seed": tgt.seed, "notes": list(design.notes)}
    name = f"circuit {topo.name}"
    r = Realization(name=name, form="circuit", controller=realized, details=details, budget=budget,
                    seen=lambda f: resp(rounded, f, model)[0], warnings=list(design.notes))
    # Monte Carlo band for the figure
    f_disp = np.logspace(np.log10(band[0] / 30), np.log10(band[-1] * 30), 200)
    mc = resp(drawn, f_disp, model)
    gain_db = 20 * np.log10(np.abs(mc))
    phase = np.degrees(np.unwrap(np.angle(mc), axis=1))
    r.band = {"f_hz": f_disp, "gain_db": np.percentile(gain_db, [0.5, 50, 99.5], axis=0),
              "phase_deg": np.percentile(phase, [0.5, 50, 99.5], axis=0), "draws": n_draws, "seed": tgt.seed}
    if case.plant is not None:
        r.margins = loop_margins(realized, case.plant.model, case.plant.dead_time_s)
        r.step, r.disturbance = _simulate_pair(case, realized, duration, 0.0, case.signals.output_range)
    r.files = circuit_files(design, model, tols)
    tick("circuit files")
    return r


def circuit_files(design, model, tolerances=None) -> dict:
    """BOM (CSV), SPICE netlist and schematic (PNG) of the design, from the circuit
    package's writers."""
    import tempfile
    from pathlib import Path

    from convert.circuit.bom import bom_csv, bom_rows
    from convert.circuit.netlist_out import design_netlist
    from convert.circuit.schematic import design_schematic

    files: dict = {"circuit.cir": design_netlist(design, opamp=model),
                   "bom.csv": bom_csv(bom_rows(design, tolerances))}
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "schematic.png"  # PNG only: each drawing costs about a second
        design_schematic(design, str(path))
        files["schematic.png"] = path.read_bytes()
    return files
