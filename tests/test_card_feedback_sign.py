"""A card whose op-amp has its inputs swapped (positive feedback) is refused, not read as a
working controller: with ideal op-amps its transfer function looks like an inverting PI. The
netlists are the reviewer's (tests/cases/review)."""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pytest

from convert.circuit.card import analyze_card, reduce_controller
from convert.circuit.netlist import read_netlist
from convert.controller import Controller
from convert.errors import InputError

CASES = Path(__file__).parent / "cases" / "review"


def _swapped_poles(r1=10e3, r2=47e3, c=1e-6, a0=1e5, gbw=1e6):
    """Poles of the swapped inverting PI (X1 n1 0 out: + input on the summing node), worked out by
    hand with A(s) = a0·wp/(s + wp), wp = 2π·gbw/a0: node n1 gives R2 + 1/(sC) + R1·(1 − A) = 0,
    i.e. (R1+R2)C s² + ((R1+R2)C·wp + 1 − R1·a0·wp·C) s + wp = 0; roots by numpy.roots."""
    wp = 2 * math.pi * gbw / a0
    return np.roots([(r1 + r2) * c, (r1 + r2) * c * wp + 1 - r1 * a0 * wp * c, wp])


@pytest.mark.parametrize("name", ["swap.cir", "swap1p.cir"])
def test_swapped_inputs_are_refused_naming_the_op_amp(name):
    """Both the ideal (OPAMP) and the single-pole (OPAMP1P) swapped cards are refused with the
    op-amp's name and line; the right-half-plane pole quoted is the hand-derived one (numpy.roots,
    about +1.1e6 rad/s)."""
    net = read_netlist((CASES / name).read_text(), source=name)
    with pytest.raises(InputError) as err:
        analyze_card(net)
    text = err.value.one_line()
    assert "X1's feedback is positive: are its inputs swapped?" in text and f"{name}:6" in text
    quoted = float(re.search(r"s = ([-+0-9.e]+) rad/s", text).group(1))
    assert quoted == pytest.approx(max(_swapped_poles().real), rel=1e-3)
    assert min(_swapped_poles().real) > 0  # both poles in the right half-plane


def test_same_card_wired_right_still_reads_as_the_inverting_pi():
    """X1 0 n1 out (the + input grounded): −(R2 + 1/(sC))/R1 = (−4.7 s − 100)/s, read as before."""
    text = (CASES / "swap.cir").read_text().replace("X1 n1 0 out OPAMP", "X1 0 n1 out OPAMP")
    card = analyze_card(read_netlist(text, source="ok.cir"))
    np.testing.assert_allclose(card.controller.num, [-4.7, -100.0], rtol=1e-9)
    np.testing.assert_allclose(card.controller.den, [1.0, 0.0], atol=1e-12)


def test_case_with_a_swapped_card_as_source_never_passes(run_cli, tmp_path):
    """swap.toml (source = the swapped single-pole card): refused with exit 2, one line, no PASS."""
    out = run_cli("report", str(CASES / "swap.toml"), "--out", str(tmp_path / "out"))
    assert out.code == 2 and "X1's feedback is positive" in out.err and "PASS" not in out.out
    assert not (tmp_path / "out").exists()


def test_reduction_keeps_right_half_plane_poles():
    """The reduction may leave out op-amp poles far above the band and read a slow LHP pole as a
    leaking integrator, but never a right-half-plane pole: the swapped card's poles (numpy.roots
    above) stay in the reduced controller, neither dropped nor called a leak."""
    poles = _swapped_poles()
    full = Controller.from_zpk([-21.28], list(poles), -4.7e5)
    red = reduce_controller(full, (0.01, 5.0))
    assert red.dropped_poles == () and red.leaks == ()
    np.testing.assert_allclose(sorted(red.reduced.poles().real), sorted(poles.real), rtol=1e-9)
