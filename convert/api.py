"""Convenience entry points of the public API (re-exported by :mod:`convert`).

The three jobs from Python, each in a few lines (see docs/python.md):

* retrofit a card into firmware: :func:`read_card` then :func:`convert.discretize`;
* firmware into hardware: :func:`convert.design_circuit`;
* confirm equivalence: :func:`convert.case_from_dict` (or :func:`convert.load_case`), then
  :func:`evaluate` and :func:`convert.write_report`.
"""

from __future__ import annotations

from pathlib import Path
from convert.circuit.netlist import read_netlist, read_netlist_file
from convert.pipeline import read_card_source, run_pipeline


def read_card(
    netlist: str | Path,
    *,
    input: str = "VIN",
    output: str = "out",  # noqa: A002
    setpoint: str | None = None,
    measurement: str | None = None,
    sensitivities: bool = False,
    band_hz: tuple[float, float] | None = None,
    fs_hz: float | None = None,
):
    """Read the controller an op-amp card implements from its SPICE netlist.

    Parameters
    ----------
    netlist : str or pathlib.Path
        A path to a netlist file, or the netlist itself as text (text with a line break is read
        as a netlist; see docs/netlists.md for the subset read).
    input, output : str
        The input source (``VIN``) and the output node (``out``) of a one-input card.
    setpoint, measurement : str, optional
        The two input sources of a two-input card (give both or neither).
    sensitivities : bool
        Also compute the sensitivity of the gain, corners and PID parameters to each part.
    band_hz, fs_hz : optional
        The band of interest (low, high) in Hz and the planned firmware's sample rate in Hz: on a
        card with real op-amps, poles and zeros above min(10 × high, fs/2) are the op-amps' and
        are left out of ``.controller`` (``.full_controller`` keeps them, ``.reduction`` says
        what was cut). Without a band, the card's corners with ideal op-amps set it.

    Returns
    -------
    convert.circuit.card.CardAnalysis
        ``.controller`` (a :class:`convert.Controller`, from error to output), ``.pid`` (PID
        settings where it is one), ``.notes``, ``.clamps``, ``.sensitivities``.

    Examples
    --------
    >>> from convert import read_card
    >>> card = read_card('''PI card
    ... VIN in 0 AC 1
    ... R1 in n 100k
    ... R2 n mid 200k
    ... C1 mid out 10u
    ... X1 0 n out OPAMP
    ... ''')
    >>> card.controller.expression()
    '(-2*s - 1) / (s)'
    >>> round(card.pid.kp, 6), round(card.pid.ki, 6), card.pid.action  # the card inverts
    (2.0, 1.0, 'direct')
    """
    if isinstance(netlist, str) and "\n" in netlist:
        parsed = read_netlist(netlist, source="netlist")
    else:
        parsed = read_netlist_file(str(netlist))
    return read_card_source(
        parsed,
        input=input,
        output=output,
        setpoint=setpoint,
        measurement=measurement,
        sensitivities=sensitivities,
        band_hz=band_hz,
        fs_hz=fs_hz,
    )


def evaluate(case, *, draws: int | None = None):
    """Run everything a case asks for: realizations, comparisons, loop checks, budget, verdict.

    Parameters
    ----------
    case : convert.case.Case
        From :func:`convert.load_case` (a TOML file) or :func:`convert.case_from_dict`.
    draws : int, optional
        Monte Carlo draws for a circuit target, overriding the case.

    Returns
    -------
    convert.compare.evaluate.CaseResults
        ``.verdict.overall`` ("pass"/"fail"), ``.verdict.judgements``, ``.realizations`` (each
        with ``.controller`` and its budget), ``.source_margins``, ``.exit_code``: what
        :func:`convert.write_report` takes. The same run as typed frozen results:
        :func:`convert.run_pipeline`.

    Examples
    --------
    >>> from convert import case_from_dict, evaluate
    >>> case = case_from_dict({
    ...     "source": {"expression": "2*(1 + 1/(30*s))"},
    ...     "target": {"digital": {"fs": "10 Hz", "methods": ["tustin"]}},
    ...     "plant": {"model": "0.5/(20*s + 1)", "dead_time": "1 s"},
    ...     "criteria": {"band": ["1 mHz", "0.1 Hz"], "max_gain_error_db": 0.5,
    ...                  "max_phase_error_deg": 5}}, name="tank")
    >>> results = evaluate(case)
    >>> results.verdict.overall
    'pass'
    """
    return run_pipeline(case, draws=draws).results
