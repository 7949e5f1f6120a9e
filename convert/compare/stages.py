"""The stage functions of the pipeline that more than one command calls, so that one design gives
one set of figures whatever command shows it (:mod:`convert.pipeline` arranges them):

* :func:`digital_budget` — the budget of one digital target (one rate, one method):
  ``loopshift report`` per realization, ``loopshift digital --json`` per method;
* :func:`circuit_budget` — the budget of one circuit design with its Monte Carlo run:
  ``loopshift report`` for a circuit target, ``loopshift circuit`` (its ``budget`` and
  tolerance figures);
* :func:`loop_spec`, :func:`card_parasitics_row` — the pieces both share.

Plain data in, frozen :class:`convert.compare.budget.BudgetRow` out; nothing drawn or written.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from convert.compare import budget as bud
from convert.compare.budget import BudgetRow
from convert.compare.frequency import hold_and_delay_factor, response_seen_from_loop
from convert.compare.circuitwork import drawn_loop_grid, loop_count_of, monte_carlo_rows
from convert.compare.loop import margin_grid, margins_of_responses
from convert.controller import Controller
from convert.digital.quantized import realized_controller as of, realized_response
from convert.circuit.opamp import gbw_response, OpAmpModel
from convert.values import format_value


def loop_spec(plant, f_hz: np.ndarray) -> bud.LoopSpec | None:
    """What a budget row needs for its margin changes with ``plant`` (``.model``,
    ``.dead_time_s``) on the grid ``f_hz`` (Hz); None without a plant."""
    if plant is None:
        return None
    return bud.LoopSpec(f_hz=f_hz, margins=lambda r: margins_of_responses(f_hz, r, plant.model, plant.dead_time_s))


def realized_controller(realized) -> Controller:
    """The controller of a firmware layout as it runs (stored coefficients)."""
    return of(realized)


def digital_budget(
    source: Controller,
    analog: Controller,
    filtered: Controller,
    real,
    firmware,
    band: np.ndarray,
    *,
    delay_s: float,
    structure: str,
    word_format: str,
    filter_note: str | None = None,
    plant=None,
    reduction=None,
    stored: Controller | None = None,
    method_text: str | None = None,
    word_note: str | None = None,
) -> tuple[BudgetRow, ...]:
    """The error budget of one digital target (one rate, one method), as ``loopshift report``
    and ``loopshift digital`` show it: rows ``discretization``, ``hold_and_delay``,
    ``word_format``, ``derivative_filter``, ``card_parasitics`` (a card source read with its
    op-amps) and ``total``, in the table order of :data:`convert.compare.budget.ROWS`.

    ``source``: the controller the total is judged against, as the loop sees it (an analog source
    as is; a digital source through its own hold). ``analog``: its analog equivalent; ``filtered``:
    that with the derivative filter the target adds (``filter_note`` says which, None when none);
    ``real``: the :class:`convert.digital.realization.DigitalRealization` at fs; ``firmware``: its
    :func:`convert.digital.quantized.analyze` in ``structure`` x ``word_format``; ``band``: the
    band grid in Hz (:func:`convert.compare.frequency.log_grid`, 100 points per decade);
    ``delay_s``: the computation delay in seconds; ``plant`` (``.model``, ``.dead_time_s``): adds
    the margin changes of each row.

    A firmware that is not a linear layout (the PID block, :mod:`convert.digital.pidcheck`) gives
    ``stored``: the controller as its word format stores it, whose response is then the word-format
    row's candidate against ``real.controller``'s; ``real`` then needs only ``method``, ``fs_hz``,
    ``controller`` and ``frequency_response``. ``method_text`` and ``word_note`` replace the words
    of the discretization and word-format rows' notes.
    """
    src, analog_src, delay = source, analog, delay_s
    method = method_text or real.method
    fs = real.fs_hz
    cd = real.controller
    t = 1.0 / fs
    if stored is not None:
        cq = cd if firmware.realized is None else stored
        design_response, stored_response = real.frequency_response, stored.frequency_response
    else:
        cq = cd if firmware.realized is None else realized_controller(firmware.realized)
        design_response = real.frequency_response

        def stored_response(f):
            return realized_response(firmware.realized, f)

    ref_band = response_seen_from_loop(src, band, via="zpk")
    loop_f = margin_grid(cq, plant.model) if plant is not None else None
    spec = loop_spec(plant, loop_f) if loop_f is not None else None

    def lr(ctrl, delay_s=0.0, hold="none", f=loop_f):
        return None if f is None else response_seen_from_loop(ctrl, f, delay_s=delay_s, hold=hold, via="zpk")

    rows = {}
    rows["discretization"] = bud.error_row(
        "discretization",
        band,
        filtered.frequency_response(band, via="zpk"),
        cd.frequency_response(band, via="zpk"),
        note=f"{method} at {fmt_hz(fs)} alone: C(e^jωT) against the analog controller it was made from; "
        "no hold, no delay, float64 coefficients",
        loop=spec,
        loop_reference=lr(filtered),
        loop_candidate=lr(cd),
        forms=(filtered, cd),
        evaluate=lambda f: (filtered.frequency_response(f, via="zpk"), cd.frequency_response(f, via="zpk")),  # noqa: B023
    )
    hold = hold_and_delay_factor
    rows["hold_and_delay"] = bud.error_row(
        "hold_and_delay",
        band,
        filtered.frequency_response(band, via="zpk"),
        filtered.frequency_response(band, via="zpk") * hold(band, t, delay),
        note=f"zero-order hold at {fmt_hz(fs)} and {fmt_s(delay)} computation delay alone, applied to "
        "the analog controller",
        loop=spec,
        loop_reference=lr(filtered),
        loop_candidate=None
        if loop_f is None
        else filtered.frequency_response(loop_f, via="zpk") * hold(loop_f, t, delay),
        forms=(filtered, filtered),
        evaluate=lambda f: (
            filtered.frequency_response(f, via="zpk"),
            filtered.frequency_response(f, via="zpk") * hold(f, t, delay),  # noqa: B023
        ),
    )
    if firmware.realized is not None:
        rows["word_format"] = bud.error_row(
            "word_format",
            band,
            design_response(band),
            stored_response(band),
            note=word_note
            or f"{structure} in {word_format} alone: the stored coefficients' response against the "
            "directly mapped zeros/poles (both in z, no hold)",
            loop=spec,
            loop_reference=lr(cd),
            loop_candidate=None if loop_f is None else stored_response(loop_f),
            forms=(cd, cq),
            evaluate=lambda f: (design_response(f), stored_response(f)),
        )
    else:
        rows["word_format"] = bud.not_applicable(
            "word_format", f"{structure} in {word_format} cannot be built: {firmware.refused}"
        )
    if filter_note:
        rows["derivative_filter"] = bud.error_row(
            "derivative_filter",
            band,
            analog_src.frequency_response(band, via="zpk"),
            filtered.frequency_response(band, via="zpk"),
            note=f"{filter_note}, alone, in the analog controller",
            loop=spec,
            loop_reference=lr(analog_src),
            loop_candidate=lr(filtered),
            forms=(analog_src, filtered),
            evaluate=lambda f: (
                analog_src.frequency_response(f, via="zpk"),
                filtered.frequency_response(f, via="zpk"),
            ),
        )
    else:
        rows["derivative_filter"] = bud.not_applicable("derivative_filter", "the source is proper; no filter added")
    rows.update(card_parasitics_row(reduction, band, spec, loop_f))
    rows["total"] = bud.error_row(
        "total",
        band,
        ref_band,
        response_seen_from_loop(cq, band, delay_s=delay, via="zpk"),
        note="everything on: method, hold, delay, word format, filter"
        + (", card parasitics left out" if reduction is not None and reduction.changed else "")
        + "; against the source as the loop sees it",
        loop=spec,
        loop_reference=lr(src, hold="zoh"),
        loop_candidate=lr(cq, delay, "zoh"),
        forms=(src, cq),
        evaluate=lambda f: (
            response_seen_from_loop(src, f, via="zpk"),
            response_seen_from_loop(cq, f, delay_s=delay, via="zpk"),  # noqa: B023
        ),
    )
    return tuple(bud.assemble(rows, bud.DIGITAL_ROWS, "digital"))


@dataclass(frozen=True)
class CircuitBudget:
    """What :func:`circuit_budget` returns: the ``rows`` (table order), the tolerance engine's
    run (``monte_carlo``: :class:`convert.circuit.tolerance.ToleranceRun`, the percentiles and the
    display band), the op-amp model used, the number of ``draws`` and the loop grid (Hz; None
    without a plant)."""

    rows: tuple[BudgetRow, ...]
    monte_carlo: object
    opamp: object
    draws: int
    band_f_hz: np.ndarray
    loop_f_hz: np.ndarray | None = None

    def row(self, key: str) -> BudgetRow:
        """The row named ``key`` (e.g. "series_rounding", "tolerances", "opamp_gbw", "total")."""
        return next(r for r in self.rows if r.key == key)


def circuit_response(design, parts: dict, f_hz, opamp=None) -> np.ndarray:
    """The response (1, F) of ``design``'s topology with ``parts`` (its own sign included) on
    ``f_hz`` (Hz), with an ideal op-amp or the single-pole ``opamp`` model."""
    arr = {k: np.atleast_1d(np.asarray(v, dtype=float)) for k, v in parts.items()}
    if opamp is None or opamp.ideal:
        r = design.topology.response(arr, f_hz)
    else:
        r = gbw_response(design.topology, arr, f_hz, opamp)
    return design.sign * np.atleast_2d(r)


def circuit_budget(
    design,
    source: Controller,
    analog: Controller,
    band: np.ndarray,
    *,
    tolerances: dict,
    draws: int,
    seed: int,
    distribution: str,
    opamp_gbw_hz: float | None = None,
    plant=None,
    source_margins=None,
    reduction=None,
    tick=None,
    display_f_hz: np.ndarray | None = None,
    parameters: bool = False,
) -> CircuitBudget:
    """The error budget of one circuit design (:class:`convert.circuit.design.CircuitDesign`), as
    ``loopshift report`` and ``loopshift circuit`` show it: rows ``source_hold`` (a digital
    source), ``derivative_filter``, ``series_rounding``, ``tolerances`` (Monte Carlo, one run of
    the tolerance engine with the ``total``), ``opamp_gbw``, ``card_parasitics`` (a card source)
    and ``total`` (everything on, against ``source`` as the loop sees it).

    ``analog``: the analog controller the circuit aims at (``source`` itself when analog);
    ``band``: the band grid in Hz (:func:`convert.compare.frequency.log_grid`, 100 points per
    decade); ``tolerances``: part kind or name -> fraction; ``draws``, ``seed``,
    ``distribution``: the Monte Carlo; ``opamp_gbw_hz``: the single-pole op-amp model (None:
    ideal); ``plant`` and ``source_margins`` (the source loop's
    :class:`convert.compare.loop.Margins`): the margin changes and the unstable draws;
    ``display_f_hz`` (Hz): where the Monte Carlo gain/phase band is kept (default: the band
    widened 30 times either side); ``parameters``: also the design quantities' percentiles.
    ``draws=0`` leaves the tolerances out (row not applicable; the total is then the rounded parts
    with the op-amp model against the source, one response).
    """
    src, analog_src = source, analog
    tick = tick or (lambda text: None)
    topo = design.topology
    n_draws = int(draws)
    model = OpAmpModel(opamp_gbw_hz)

    def resp(parts, f, opamp=None):
        return circuit_response(design, parts, f, opamp)

    nominal, rounded = design.nominal, design.rounded
    loop_f = None
    if plant is not None:
        # around the source loop's crossovers (a figure may be absent: no crossover, or no
        # interior sensitivity peak)
        loop_f = drawn_loop_grid(
            source_margins.crossover_hz,
            source_margins.phase_crossover_hz,
            source_margins.sensitivity_peak_hz,
            band[-1],
        )
    spec = (
        bud.LoopSpec(loop_f, lambda r: margins_of_responses(loop_f, r, plant.model, plant.dead_time_s))
        if plant
        else None
    )

    def both(fn):
        if loop_f is None:
            return fn(band), None
        out = fn(np.concatenate([band, loop_f]))  # one evaluation over both grids
        return out[..., : band.size], out[..., band.size :]

    src_b, src_l = both(lambda f: response_seen_from_loop(src, f, via="zpk"))
    an_b, an_l = both(lambda f: analog_src.frequency_response(f, via="zpk"))
    tgt_b, tgt_l = both(lambda f: design.target.frequency_response(f, via="zpk"))
    nom_b, nom_l = both(lambda f: resp(nominal, f)[0])
    rnd_b, rnd_l = both(lambda f: resp(rounded, f)[0])
    rows = {}
    if src.is_digital:  # the circuit aims at the analog equivalent: the source's own hold is a row of its own
        rows["source_hold"] = bud.error_row(
            "source_hold",
            band,
            src_b,
            an_b,
            forms=(src, analog_src),
            note="the analog controller the circuit aims at against the digital source as the loop sees it "
            "(C(e^jωT) with its zero-order hold), alone",
            loop=spec,
            loop_reference=src_l,
            loop_candidate=an_l,
            evaluate=lambda f: (
                response_seen_from_loop(src, f, via="zpk"),
                analog_src.frequency_response(f, via="zpk"),
            ),
        )
    if design.filter_added is not None:
        rows["derivative_filter"] = bud.error_row(
            "derivative_filter",
            band,
            an_b,
            tgt_b,
            note="the derivative filter the circuit adds, alone (analog, exact)",
            loop=spec,
            loop_reference=an_l,
            loop_candidate=tgt_l,
            forms=(analog_src, design.target),
            evaluate=lambda f: (
                analog_src.frequency_response(f, via="zpk"),
                design.target.frequency_response(f, via="zpk"),
            ),
        )
    else:
        rows["derivative_filter"] = bud.not_applicable("derivative_filter", "the source is proper; no filter added")
    rows["series_rounding"] = bud.error_row(
        "series_rounding",
        band,
        nom_b,
        rnd_b,
        note=f"parts rounded to {design.options.resistors}/{design.options.capacitors} alone: rounded against computed values, ideal op-amp",
        loop=spec,
        loop_reference=nom_l,
        loop_candidate=rnd_l,
        forms=(design.target, design.realized),
        evaluate=lambda f: (resp(nominal, f)[0], resp(rounded, f)[0]),
    )
    tols = dict(tolerances)
    f_disp = (
        display_f_hz if display_f_hz is not None else np.logspace(np.log10(band[0] / 30), np.log10(band[-1] * 30), 200)
    )
    mc = None
    if n_draws:
        mc = monte_carlo_rows(
            topo,
            rounded,
            tols,
            band,
            sign=design.sign,
            draws=n_draws,
            seed=seed,
            distribution=distribution,
            rounded_response=rnd_b,
            source_response=src_b,
            opamp=model,
            loop_f_hz=loop_f,
            loop_margins=spec.margins if spec is not None else None,
            loop_rounded=rnd_l,
            loop_source=src_l,
            display_f_hz=f_disp,
            loop_count=loop_count_of(design.realized, plant) if plant is not None else None,
            parameters=parameters,
        )
        spread = ", ".join(f"{k} {v * 100:g} %" for k, v in tols.items())
        rows["tolerances"] = bud.drawn_row(
            "tolerances",
            mc.figures["tolerances"],
            note=f"{n_draws} draws ({distribution}) within ±tolerance ({spread}) around the rounded parts alone, "
            f"ideal op-amp; seed {seed}",
            reference_form=design.realized,
            band_f_hz=band,
        )
    else:
        rows["tolerances"] = bud.not_applicable("tolerances", "no Monte Carlo draws asked for")
    tick("Monte Carlo")
    if not model.ideal:
        g_b, g_l = both(lambda f: resp(nominal, f, model)[0])
        rows["opamp_gbw"] = bud.error_row(
            "opamp_gbw",
            band,
            nom_b,
            g_b,
            note=f"single-pole op-amp, GBW {fmt_hz(model.gbw_hz)}, alone (computed parts)",
            loop=spec,
            loop_reference=nom_l,
            loop_candidate=g_l,
            evaluate=lambda f: (resp(nominal, f)[0], resp(nominal, f, model)[0]),
        )
    else:
        rows["opamp_gbw"] = bud.not_applicable("opamp_gbw", "ideal op-amp (set target.circuit.opamp_gbw to check it)")

    rows.update(card_parasitics_row(reduction, band, spec, loop_f))
    total_note = (
        "everything on: filter, rounding"
        + (", tolerances" if mc is not None else "")
        + (", op-amp GBW" if not model.ideal else "")
        + "; against the source as the loop sees it"
    )
    if mc is not None:
        rows["total"] = bud.drawn_row("total", mc.figures["total"], note=total_note, reference_form=src, band_f_hz=band)
    else:
        t_b, t_l = both(lambda f: resp(rounded, f, model)[0])
        rows["total"] = bud.error_row(
            "total",
            band,
            src_b,
            t_b,
            note=total_note,
            loop=spec,
            loop_reference=src_l,
            loop_candidate=t_l,
            forms=(src, None),
            evaluate=lambda f: (response_seen_from_loop(src, f, via="zpk"), resp(rounded, f, model)[0]),
        )
    return CircuitBudget(
        tuple(bud.assemble(rows, bud.CIRCUIT_ROWS, "circuit")), mc, model, n_draws, np.asarray(band), loop_f
    )


def card_parasitics_row(reduction, band, spec=None, loop_f=None) -> dict:
    """The budget row of a card's op-amp / parasitic roots left out of the controller handed on
    (reduced controller against the full card), keyed for :func:`convert.compare.budget.assemble`;
    empty when the source is not a card read from a netlist."""
    if reduction is None:
        return {}
    if not reduction.changed:
        return {
            "card_parasitics": bud.not_applicable(
                "card_parasitics", f"nothing of the card lies beyond the cut ({reduction.cut_hz:.4g} Hz)"
            )
        }
    full, red = reduction.full, reduction.reduced

    def lr(c):
        return None if loop_f is None else c.frequency_response(loop_f, via="zpk")

    return {
        "card_parasitics": bud.error_row(
            "card_parasitics",
            band,
            full.frequency_response(band, via="zpk"),
            red.frequency_response(band, via="zpk"),
            note=f"the controller handed on against the full card, analog, alone: {reduction.rule}",
            loop=spec,
            loop_reference=lr(full),
            loop_candidate=lr(red),
        )
    }


def fmt_hz(f: float) -> str:
    return format_value(f, "hz")


def fmt_s(t: float) -> str:
    if t >= 1:
        return f"{t:.4g} s"

    return format_value(t, "second") if t > 0 else "0 s"
