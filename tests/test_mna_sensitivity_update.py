"""Sensitivity tables by updating the nominal factorization, against the plain re-solve.

The reference throughout is the direct re-solve (``sensitivities(..., method="resolve")`` and
``transfer_functions`` outside :func:`reusing_nominal`: every changed circuit assembled and solved
afresh), itself checked against ngspice in test_mna_ngspice and against closed forms in
test_mna_core. The update path (matrix determinant lemma and Woodbury identity on the nominal
inverses) is exact algebra, so the two agree to rounding; the finite differences both feed have a
truncation error near 1e-6, so agreement to 1e-7 means "the same table".
"""

from __future__ import annotations

import pathlib

import numpy as np
import pytest

from convert.circuit import mna
from convert.circuit.card import card_quantities
from convert.circuit.mna import reusing_nominal, transfer_functions
from convert.circuit.netlist import read_netlist
from convert.circuit.sensitivity import sensitivities

HERE = pathlib.Path(__file__).parent / "netlists"
CARDS = sorted(HERE.glob("*.cir"))


def _inputs(netlist):
    if netlist.element("VSP") is not None and netlist.element("VPV") is not None:
        return ("VSP", "VPV")
    return ("VIN",)


def _evaluate(inputs):
    """The quantities ``loopshift card`` tracks (convert.circuit.card.card_quantities)."""
    return lambda nl: card_quantities(nl, inputs, "out")


@pytest.fixture
def update_counter(monkeypatch):
    """Counts how many changed circuits the update path answered (None = it declined)."""
    counts = {"updated": 0, "declined": 0}
    original = mna._perturbed

    def counted(base, netlist):
        result = original(base, netlist)
        counts["updated" if result is not None else "declined"] += 1
        return result

    monkeypatch.setattr(mna, "_perturbed", counted)
    return counts


@pytest.mark.parametrize("path", CARDS, ids=[p.name for p in CARDS])
def test_update_table_matches_the_direct_resolve(path, update_counter):
    """Every reference card (R, C, L, E, G, pots, op-amp GBW, two-input cards): the same rows, the
    same quantities, elasticities equal to 1e-7 (reference: the direct re-solve, itself checked
    against ngspice in test_mna_ngspice); and the update path really answered every changed circuit."""
    netlist = read_netlist(path.read_text(), path.name)
    evaluate = _evaluate(_inputs(netlist))
    ref = sensitivities(netlist, evaluate, method="resolve")
    assert update_counter == {"updated": 0, "declined": 0}
    fast = sensitivities(netlist, evaluate, method="update")
    assert [(r.part, r.kind, r.value) for r in fast] == [(r.part, r.kind, r.value) for r in ref]
    for a, b in zip(fast, ref):
        assert list(a.effects) == list(b.effects), a.part
        for key in b.effects:
            assert a.effects[key] == pytest.approx(b.effects[key], abs=1e-7), (a.part, key)
    assert update_counter["declined"] == 0
    assert update_counter["updated"] == 2 * len(ref)


@pytest.mark.parametrize(
    "changes",
    [
        {"R5": 1.3e3},  # a resistor, +30 %
        {"L1": 0.05},  # an inductor, halved
        {"G1": 2.5e-3},  # a transconductance
        {"E2": -0.8},  # a VCVS gain, sign flipped
        {"R5": 2e3, "L1": 0.2, "RG": 900},  # several at once (rank 5 update)
    ],
)
def test_large_changes_match_a_fresh_solve(changes, update_counter):
    """Large, several-part and sign-changing edits (not just ±0.1 %): the updated transfer function
    equals the one solved afresh to 1e-9 in every coefficient (reference: the direct solve)."""
    netlist = read_netlist((HERE / "subckt_filters.cir").read_text(), "subckt_filters.cir")
    changed = netlist.with_values(changes)
    ref = transfer_functions(changed)["VIN"].controller
    with reusing_nominal(netlist):
        transfer_functions(netlist)
        got = transfer_functions(changed)["VIN"].controller
    assert update_counter["updated"] == 1
    assert len(got.num) == len(ref.num) and len(got.den) == len(ref.den)
    scale = ref.den[0]
    np.testing.assert_allclose(
        np.asarray(got.num) / got.den[0],
        np.asarray(ref.num) / scale,
        rtol=1e-9,
        atol=1e-9 * np.max(np.abs(np.asarray(ref.num) / scale)),
    )
    np.testing.assert_allclose(np.asarray(got.den) / got.den[0], np.asarray(ref.den) / scale, rtol=1e-9, atol=1e-12)


def test_gbw_and_pot_changes_match_a_fresh_solve(update_counter):
    """A single-pole op-amp's GBW (a change in C and not in G) and a pot's wiper (two resistors at
    once) through the update path equal fresh solves (reference: the direct solve)."""
    for name, changes in (("opamp1p_lead.cir", {"X1.gbw": 35e3}), ("pot_gain.cir", {"RP1A": 45e3, "RP1B": 55e3})):
        netlist = read_netlist((HERE / name).read_text(), name)
        changed = netlist.with_values(changes)
        ref = transfer_functions(changed)["VIN"].controller
        with reusing_nominal(netlist):
            transfer_functions(netlist)
            got = transfer_functions(changed)["VIN"].controller
        np.testing.assert_allclose(np.sort_complex(got.poles()), np.sort_complex(ref.poles()), rtol=1e-9)
        assert got.gain == pytest.approx(ref.gain, rel=1e-9)
    assert update_counter == {"updated": 2, "declined": 0}


def test_a_wrong_update_is_refused_and_solved_afresh(monkeypatch, update_counter):
    """The check is live: an update whose solution is off by 1e-4 fails the comparison with the
    direct solve, the result is solved afresh and still equals the direct solve."""
    netlist = read_netlist((HERE / "two_stage_filter.cir").read_text(), "two_stage_filter.cir")
    name = netlist.parts[0].name
    changed = netlist.with_values({name: netlist.parts[0].value * 1.01})
    ref = transfer_functions(changed)["VIN"].controller
    original = mna._updated

    def skewed(*args):
        ratio, x_out = original(*args)
        return ratio, x_out * (1 + 1e-4)

    monkeypatch.setattr(mna, "_updated", skewed)
    with reusing_nominal(netlist):
        transfer_functions(netlist)
        got = transfer_functions(changed)["VIN"].controller
    assert update_counter == {"updated": 0, "declined": 1}
    np.testing.assert_array_equal(got.num, ref.num)
    np.testing.assert_array_equal(got.den, ref.den)


def test_other_circuits_inside_the_block_are_solved_afresh(update_counter):
    """A different circuit (other elements) or other inputs inside the block are not mistaken for
    a changed copy: they are solved afresh and equal the plain solve (reference: the direct solve)."""
    netlist = read_netlist((HERE / "pi_card.cir").read_text(), "pi_card.cir")
    other = read_netlist((HERE / "two_stage_filter.cir").read_text(), "two_stage_filter.cir")
    ref = transfer_functions(other)["VIN"].controller
    with reusing_nominal(netlist):
        transfer_functions(netlist)
        got = transfer_functions(other)["VIN"].controller
    assert update_counter == {"updated": 0, "declined": 1}
    np.testing.assert_array_equal(got.num, ref.num)
    np.testing.assert_array_equal(got.den, ref.den)


def test_unknown_method_is_refused():
    """A misspelt method is a programming error, reported with the choices."""
    netlist = read_netlist((HERE / "pi_card.cir").read_text())
    with pytest.raises(ValueError, match="update"):
        sensitivities(netlist, _evaluate(("VIN",)), method="fast")
