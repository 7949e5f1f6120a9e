"""A card's clamp limits carried to the output through plain resistive stages (review 2: the kiln
card clamps its first stage with back-to-back zeners, then a unity inverter drives the output).

Hand calculation (common practice): a zener of BV = 6.2 V in series with a forward diode
(0.65 V) across the feedback of the first stage holds V(o1) to ±6.85 V; an inverting stage of
gain −Rf/Rin maps that to ∓6.85·Rf/Rin (ends swapped), a non-inverting stage 1 + Rf/Rg keeps the
ends. Checked against ngspice (independent reference simulator): a transient of the card with a
large input step, ideal op-amps replaced by a gain of 1e6, settles the output at the carried limit
within the knee's softness (the zener's own knee current model; 0.15 V allowed).
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from convert.circuit.clamps import output_limits, unreached_clamp_note
from convert.circuit.netlist import read_netlist
from tests.spice import require_ngspice, transient

KILN = (Path(__file__).parent / "netlists" / "kiln_clamp_inverter.cir").read_text()


def _variant(rf_ohm: float | None = None, extra: str = "") -> str:
    text = KILN
    if rf_ohm is not None:
        text = re.sub(r"^R6 n2 out 10k", f"R6 n2 out {rf_ohm:.6g}", text, flags=re.M)
    return text.replace(".end", extra + ".end") if extra else text


def _spice_out(text: str, vin: float) -> tuple[float, float]:
    """(V(out), V(o1)) at the end of a 3 s transient with VIN stepped to ``vin`` (ngspice)."""
    deck = re.sub(r"^X(\w+) (\S+) (\S+) (\S+) OPAMP\s*$", r"E\1 \4 0 \2 \3 1e6", text, flags=re.M)
    deck = re.sub(r"^VIN .*$", f"VIN in 0 DC 0 PWL(0 0 1e-3 {vin:g})", deck, flags=re.M)
    deck = deck.replace(".end", "").rstrip() + "\n"
    _, out = transient(deck, 3.0, 1e-3, "out", reltol=1e-4)
    _, o1 = transient(deck, 3.0, 1e-3, "o1", reltol=1e-4)
    return float(out[-1]), float(o1[-1])


@pytest.mark.parametrize("rf_ohm,gain", [(None, -1.0), (20e3, -2.0), (4.7e3, -0.47)])
def test_inverting_stage_carries_the_clamp_with_swapped_ends(rf_ohm, gain):
    """Hand calculation: limits = sorted(gain × (−6.85, +6.85)), gain = −R6/R5."""
    net = read_netlist(_variant(rf_ohm))
    lo, hi = output_limits(net, "out")
    want = sorted((gain * -6.85, gain * 6.85))
    assert (lo, hi) == pytest.approx(want, rel=1e-9)
    assert unreached_clamp_note(net, "out") is None


@pytest.mark.parametrize("rf_ohm", [None, 20e3])
@pytest.mark.parametrize("vin", [2.0, -2.0])
def test_ngspice_output_saturates_at_the_carried_limits(rf_ohm, vin):
    """ngspice transient: a 2 V step (proportional gain 10 alone asks for 20 V at o1) drives the
    first stage into its clamp; the output settles at the carried limit of the matching side
    (positive input -> o1 at the negative clamp -> inverted -> output at the high limit)."""
    require_ngspice()
    text = _variant(rf_ohm)
    lo, hi = output_limits(read_netlist(text), "out")
    out, o1 = _spice_out(text, vin)
    # the clamp itself: ngspice's knee (zener current well below its IBV = 1 mA, forward drop at
    # about 0.1 mA) sits a little inside the tool's 6.85 V; 0.2 V allowed for that softness
    assert abs(abs(o1) - 6.85) < 0.2, o1
    expected = hi if vin > 0 else lo  # the side the tool says the output stops at
    assert out == pytest.approx(expected * abs(o1) / 6.85, rel=1e-4)  # the same gain and sign carried


def test_non_inverting_stage_keeps_the_ends():
    """A non-inverting stage R5 from n2 to ground, R6 from n2 to out, + input at o1:
    gain 1 + 10k/4.7k = 3.128; limits ±6.85 × 3.128."""
    text = KILN.replace("R5 o1 n2 10k\n", "R5 n2 0 4.7k\n").replace("X2 0 n2 out OPAMP", "X2 o1 n2 out OPAMP")
    lo, hi = output_limits(read_netlist(text), "out")
    g = 1 + 10e3 / 4.7e3
    assert (lo, hi) == pytest.approx((-6.85 * g, 6.85 * g), rel=1e-9)


def test_reactive_path_gives_no_limits_but_a_note_naming_the_node():
    """A capacitor across the output stage's feedback makes it a filter: the clamp is not carried;
    the note names V(o1) and asks for the output limits."""
    net = read_netlist(_variant(extra="C9 n2 out 1n\n"))
    assert output_limits(net, "out") is None
    note = unreached_clamp_note(net, "out")
    assert note and "V(o1)" in note and "output limits" in note


def test_code_card_uses_the_carried_limits(run_cli, tmp_path):
    """`code --card` of the kiln card takes the carried limits as its output limits."""
    card = tmp_path / "kiln.cir"
    card.write_text(KILN)
    r = run_cli(
        "code",
        "--card",
        str(card),
        "--fs",
        "10Hz",
        "--format",
        "float",
        "--name",
        "kiln",
        "--out",
        str(tmp_path / "fw"),
    )
    assert r.code == 0, r.err
    assert "-6.85 .. 6.85" in (tmp_path / "fw" / "kiln.h").read_text()
