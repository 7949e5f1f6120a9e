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

import numpy as np

from convert.compare import budget as bud
from convert.compare.budget import BudgetRow
from convert.compare.frequency import hold_and_delay_factor, response_seen_from_loop
from convert.compare.loop import margin_grid, margins_of_responses
from convert.controller import Controller


def loop_spec(plant, f_hz: np.ndarray) -> bud.LoopSpec | None:
    """What a budget row needs for its margin changes with ``plant`` (``.model``,
    ``.dead_time_s``) on the grid ``f_hz`` (Hz); None without a plant."""
    if plant is None:
        return None
    return bud.LoopSpec(f_hz=f_hz, margins=lambda r: margins_of_responses(f_hz, r, plant.model, plant.dead_time_s))


def realized_controller(realized) -> Controller:
    """The controller of a firmware layout as it runs (stored coefficients)."""
    from convert.digital.quantized import realized_controller as of

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
    """
    src, analog_src, delay, method = source, analog, delay_s, real.method
    fs = real.fs_hz
    cd = real.controller
    t = 1.0 / fs
    cq = cd if firmware.realized is None else realized_controller(firmware.realized)
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
        from convert.digital.quantized import realized_response

        rows["word_format"] = bud.error_row(
            "word_format",
            band,
            real.frequency_response(band),
            realized_response(firmware.realized, band),
            note=f"{structure} in {word_format} alone: the stored coefficients' response against the "
            "directly mapped zeros/poles (both in z, no hold)",
            loop=spec,
            loop_reference=lr(cd),
            loop_candidate=None if loop_f is None else realized_response(firmware.realized, loop_f),
            forms=(cd, cq),
            evaluate=lambda f: (real.frequency_response(f), realized_response(firmware.realized, f)),  # noqa: B023
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
    from convert.values import format_value

    return format_value(f, "hz")


def fmt_s(t: float) -> str:
    if t >= 1:
        return f"{t:.4g} s"
    from convert.values import format_value

    return format_value(t, "second") if t > 0 else "0 s"
