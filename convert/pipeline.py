"""One pipeline from a case to a verdict, as typed immutable results.

case -> source (and targets) -> realizations -> comparisons -> loop checks -> budget -> verdict.

:func:`run_pipeline` runs the whole of it (what ``loopshift report``, ``batch`` and ``compare``
run); the commands that show one piece call the same stage functions, so one design gives one
set of figures whatever command shows it:

* :func:`digital_budget` — a digital target's budget (one rate, one method): the report's rows
  and ``loopshift digital``'s per-method figures;
* :func:`circuit_budget` — a circuit design's budget and its Monte Carlo run: the report's rows
  and ``loopshift circuit``'s rounding, tolerance, op-amp and total figures;
* :func:`read_card_source` — a card netlist read as a source: ``loopshift card`` and a case whose
  source is that netlist;
* :func:`loop_check` — one controller in its loop with a plant: margins and closed-loop stability.

The results hold :class:`convert.Controller` objects; python-control objects only at the edge
(``.to_control()``). Nothing here draws or writes a file.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from convert.compare.budget import BudgetRow
from convert.compare.stages import circuit_budget, digital_budget
from convert.compare.verdict import Verdict
from convert.controller import Controller
from convert.circuit.card import analyze_card
from convert.compare.loop import loop_margins
from convert.compare.stability import loop_stability
from convert.errors import InputError
from convert.given import command_line_context

__all__ = [
    "AnalogSource",
    "BudgetRow",
    "CardSource",
    "CircuitResult",
    "DigitalResult",
    "DigitalSource",
    "GivenResult",
    "LoopCheck",
    "PidSource",
    "PipelineResult",
    "Verdict",
    "circuit_budget",
    "digital_budget",
    "loop_check",
    "plant_from_words",
    "read_card_source",
    "run_pipeline",
]


# ----------------------------------------------------------------------------- sources
@dataclass(frozen=True)
class _Source:
    controller: Controller  # error -> output, as it runs
    notes: tuple[str, ...] = ()

    def to_control(self):
        """The source as a python-control ``TransferFunction``."""
        return self.controller.to_control()


@dataclass(frozen=True)
class AnalogSource(_Source):
    """An analog transfer function given as an expression (``controller``, from error to output).

    Examples
    --------
    >>> from convert import AnalogSource, from_expression
    >>> source = AnalogSource(from_expression("2*(1 + 1/(30*s))"))
    >>> source.form, source.to_control().dt
    ('analog', 0)
    """

    form = "analog"


@dataclass(frozen=True)
class PidSource(_Source):
    """PID settings (:class:`convert.PidSettings` in ``settings``) and their ``controller``.

    Examples
    --------
    >>> from convert import PidSource, pid_from_words
    >>> pid = pid_from_words(["kc=2", "ti=30s"])
    >>> PidSource(pid.to_controller(), settings=pid).settings.ki
    0.0666...
    """

    settings: Any = None
    form = "pid"


@dataclass(frozen=True)
class DigitalSource(_Source):
    """Firmware coefficients b/a (ascending powers of z^-1, a0 = 1) at a sample rate
    (``controller.fs_hz``, Hz).

    Examples
    --------
    >>> from convert import Controller, DigitalSource
    >>> DigitalSource(Controller.from_b_a([2.0033, -1.9967], [1, -1], 0.1)).controller.fs_hz
    10.0
    """

    form = "digital"


@dataclass(frozen=True)
class CardSource(_Source):
    """An op-amp card: a catalog topology with parts, or a SPICE netlist. ``controller`` is the
    card as it runs (with its op-amps' poles); ``handed_on`` the controller the targets are built
    from (without them, :class:`convert.circuit.card.CardReduction` in ``reduction``); ``pid``
    its PID settings where it is one; ``output_limits`` its clamps (V)."""

    handed_on: Controller | None = None
    pid: Any = None
    reduction: Any = None
    output_limits: tuple[float, float] | None = None
    parts: dict | None = None
    topology: str | None = None
    form = "card"


def source_of(case, info) -> _Source:
    """The typed source of ``case`` from :func:`convert.case.source_controller`'s ``info``."""
    form = case.source.form
    notes = tuple(info.notes)
    if form == "pid":
        return PidSource(info.controller, notes, settings=info.pid)
    if form == "digital":
        return DigitalSource(info.controller, notes)
    if form in ("card", "netlist"):
        reduction = info.extra.get("reduction")
        handed = reduction.reduced if reduction is not None and reduction.changed else info.controller
        return CardSource(
            info.controller,
            notes,
            handed_on=handed,
            pid=info.pid,
            reduction=reduction,
            output_limits=info.extra.get("output_limits"),
            parts=info.parts,
            topology=info.topology,
        )
    return AnalogSource(info.controller, notes)


def read_card_source(
    netlist,
    *,
    input="VIN",
    output="out",
    setpoint=None,
    measurement=None,
    band_hz=None,
    fs_hz=None,
    sensitivities=False,
):  # noqa: A002
    """Read the controller a card netlist (:class:`convert.circuit.netlist.Netlist`) implements,
    as ``loopshift card`` shows it and as a case with ``[source] netlist`` uses it:
    :func:`convert.circuit.card.analyze_card` with the band (Hz) and the planned sample rate (Hz)
    that decide which op-amp poles are left out."""
    return analyze_card(
        netlist,
        input=input,
        output=output,
        setpoint=setpoint,
        measurement=measurement,
        with_sensitivities=sensitivities,
        band_hz=band_hz,
        fs_hz=fs_hz,
    )


# ----------------------------------------------------------------------------- loop checks
@dataclass(frozen=True)
class LoopCheck:
    """One controller in its loop with the plant: ``margins``
    (:class:`convert.compare.loop.Margins`: phase margin in degrees, gain margin and sensitivity
    peak in dB, crossovers in Hz), ``stability``
    (:class:`convert.compare.stability.LoopStability`, None when it could not be decided), and
    the setpoint-step and load-disturbance responses (``step``, ``disturbance``; None when not
    simulated).

    Examples
    --------
    >>> from convert import from_expression
    >>> from convert.pipeline import loop_check
    >>> check = loop_check(from_expression("2*(1 + 1/(30*s))"), from_expression("0.5/(20*s + 1)"), 1.0)
    >>> round(check.margins.phase_margin_deg, 1), check.stability.stable
    (99.2, True)
    """

    margins: Any = None
    stability: Any = None
    step: Any = None
    disturbance: Any = None

    def as_dict(self) -> dict:
        return {
            "margins": None if self.margins is None else self.margins.as_dict(),
            "stability": None if self.stability is None else self.stability.as_dict(),
        }


def loop_check(
    controller: Controller, model: Controller, dead_time_s: float = 0.0, *, delay_s: float = 0.0
) -> LoopCheck:
    """Margins and closed-loop stability of ``controller`` with the plant ``model`` (analog),
    its dead time and a computation delay (s), by the same functions the report uses."""
    margins = loop_margins(controller, model, dead_time_s, delay_s=delay_s)
    try:
        stability = loop_stability(controller, model, dead_time_s, delay_s=delay_s)
    except ValueError:
        stability = None
    return LoopCheck(margins, stability)


def plant_from_words(
    expression: str | None, dead_time_s: float = 0.0, *, where: str = "plant", dead_where: str = "dead time"
):
    """The plant of a loop check from an expression in s and a dead time (s), read and checked
    as a case file's ``[plant]`` is; None without an expression (then a dead time is refused).
    Errors name ``where`` / ``dead_where`` (what the user typed: an option, a field)."""
    # imported here, not at the top: import cycle (convert.pipeline -> convert.case -> convert.pipeline)
    from convert.case import _read_plant

    if expression is None:
        if dead_time_s:
            raise InputError(f"a dead time belongs to a plant; give the plant ({where}) too", where=dead_where)
        return None
    try:
        return _read_plant(command_line_context(where), {"plant": {"model": expression, "dead_time": dead_time_s}})
    except InputError as exc:
        raise InputError(exc.message, where=dead_where if str(exc.key).endswith("dead_time") else where) from None


# ----------------------------------------------------------------------------- realizations
@dataclass(frozen=True)
class _Result:
    name: str
    controller: Controller
    budget: tuple[BudgetRow, ...]
    loop: LoopCheck | None = None
    warnings: tuple[str, ...] = ()
    details: dict = field(default_factory=dict)

    def to_control(self):
        """The realization as a python-control ``TransferFunction`` (discrete ones with their
        sample period)."""
        return self.controller.to_control()

    def row(self, key: str) -> BudgetRow:
        """The budget row ``key`` ("discretization", "series_rounding", "total", ...)."""
        return next(r for r in self.budget if r.key == key)


@dataclass(frozen=True)
class DigitalResult(_Result):
    """A digital target built: ``method`` at ``fs_hz`` with ``delay_s``; ``controller`` the
    coefficients as stored (its word format)."""

    form = "digital"

    @property
    def method(self) -> str:
        return self.details["method"]

    @property
    def fs_hz(self) -> float:
        return self.details["fs_hz"]


@dataclass(frozen=True)
class CircuitResult(_Result):
    """A circuit target built: its ``topology`` and rounded ``parts`` (ohm, farad), the budget
    rows (``series_rounding``, ``tolerances``, ``opamp_gbw``, ``total``, ...).

    Examples
    --------
    >>> from convert import case_from_dict, run_pipeline
    >>> case = case_from_dict({
    ...     "source": {"expression": "2*(1 + 1/(0.3*s))"},
    ...     "target": {"circuit": {"resistors": "E24", "capacitors": "E6", "draws": 200}},
    ...     "criteria": {"band": ["0.05 Hz", "20 Hz"], "max_gain_error_db": 1}}, name="pi")
    >>> circuit = run_pipeline(case).realizations[0]
    >>> type(circuit).__name__, circuit.topology, sorted(circuit.parts)
    ('CircuitResult', 'pi-rc-feedback', ['C1', 'R1', 'R2'])
    >>> circuit.row("tolerances").percentile
    99.0
    """

    form = "circuit"

    @property
    def topology(self) -> str:
        return self.details["topology"]

    @property
    def parts(self) -> dict:
        return dict(self.details["parts"])


@dataclass(frozen=True)
class GivenResult(_Result):
    """A form that exists (firmware, PID block, card, netlist) given in the case as a target."""

    form = "given"


_KINDS = {"digital": DigitalResult, "circuit": CircuitResult}


def _typed(r) -> _Result:
    loop = None
    if r.margins is not None or r.stability is not None:
        loop = LoopCheck(r.margins, r.stability, r.step, r.disturbance)
    # forms given in the case are named "given <name>" (convert.compare.givenwork)
    kind = GivenResult if r.name.startswith("given ") else _KINDS.get(r.form, GivenResult)
    return kind(r.name, r.controller, tuple(r.budget), loop, tuple(r.warnings), dict(r.details))


@dataclass(frozen=True)
class PipelineResult:
    """Everything :func:`run_pipeline` found. ``realizations`` in the case's order; ``verdict``
    (:class:`convert.compare.verdict.Verdict`); ``source_loop`` the source's own loop check;
    ``results`` the same evaluation as the report writers take it
    (:class:`convert.compare.evaluate.CaseResults`: responses, figures' data, files)."""

    source: _Source
    band_f_hz: Any
    realizations: tuple[_Result, ...]
    source_loop: LoopCheck | None
    verdict: Verdict
    results: Any

    @property
    def exit_code(self) -> int:
        """0 when the verdict passes, 1 otherwise (fail or unchecked)."""
        return self.results.exit_code

    def realization(self, name: str) -> _Result:
        """The realization called ``name`` (e.g. "tustin @ 10 Hz")."""
        return next(r for r in self.realizations if r.name == name)


def run_pipeline(case, *, draws: int | None = None, progress=None) -> PipelineResult:
    """Run ``case`` (a :class:`convert.Case`) through the whole pipeline.

    Parameters
    ----------
    case : convert.Case
        From :func:`convert.load_case` or :func:`convert.case_from_dict`.
    draws : int, optional
        Monte Carlo draws of a circuit target, overriding the case.
    progress : callable, optional
        Called with a short text after each finished step.

    Returns
    -------
    PipelineResult
        ``.source`` (:class:`AnalogSource`, :class:`PidSource`, :class:`DigitalSource` or
        :class:`CardSource`), ``.realizations`` (:class:`DigitalResult`,
        :class:`CircuitResult`, :class:`GivenResult`, each with ``.budget`` rows and ``.loop``),
        ``.verdict``.

    Examples
    --------
    >>> from convert import case_from_dict, run_pipeline
    >>> case = case_from_dict({
    ...     "source": {"expression": "2*(1 + 1/(30*s))"},
    ...     "target": {"digital": {"fs": "10 Hz", "methods": ["tustin"]}},
    ...     "plant": {"model": "0.5/(20*s + 1)", "dead_time": "1 s"},
    ...     "criteria": {"band": ["1 mHz", "0.1 Hz"], "max_gain_error_db": 0.5}}, name="tank")
    >>> result = run_pipeline(case)
    >>> result.verdict.overall, type(result.source).__name__
    ('pass', 'AnalogSource')
    >>> firmware = result.realizations[0]
    >>> firmware.name, firmware.row("total").max_gain_error_db < 0.5
    ('tustin @ 10 Hz', True)
    >>> round(firmware.loop.margins.phase_margin_deg - result.source_loop.margins.phase_margin_deg, 1)
    -0.1
    """
    # imported here, not at the top: import cycle (convert.pipeline -> convert.compare.evaluate -> convert.case -> convert.pipeline)
    from convert.compare.evaluate import evaluate_case

    results = evaluate_case(case, draws=draws, progress=progress)
    source_loop = None
    if results.source_margins is not None or results.source_stability is not None:
        source_loop = LoopCheck(
            results.source_margins, results.source_stability, results.source_step, results.source_disturbance
        )
    return PipelineResult(
        source=source_of(case, results.source),
        band_f_hz=results.band_f_hz,
        realizations=tuple(_typed(r) for r in results.realizations),
        source_loop=source_loop,
        verdict=results.verdict,
        results=results,
    )
