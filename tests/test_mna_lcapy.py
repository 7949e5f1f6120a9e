"""Nodal analysis against lcapy's symbolic circuit analysis (reference library: lcapy + sympy).

Two circuits, kept small so the symbolic solve stays fast: a passive R-L-C ladder (exact
coefficients), and a single-op-amp PID stage where lcapy's op-amp gain is taken to infinity.
"""

from __future__ import annotations

import numpy as np
import pytest

from convert.circuit.mna import transfer_function
from convert.circuit.netlist import read_netlist

lcapy = pytest.importorskip("lcapy", reason="lcapy is not installed (optional test dependency)")


def _lcapy_coefficients(netlist: str, out_node: str, gain_symbols=()):
    import sympy

    cct = lcapy.Circuit(netlist)
    expr = cct.transfer(1, 0, out_node, 0).sympy
    for name in gain_symbols:
        sym = next(x for x in expr.free_symbols if x.name == name)
        expr = sympy.limit(expr, sym, sympy.oo)
    s = next(x for x in expr.free_symbols if x.name == "s")
    num, den = sympy.fraction(sympy.together(sympy.simplify(expr)))
    n = [float(c) for c in sympy.Poly(num, s).all_coeffs()]
    d = [float(c) for c in sympy.Poly(den, s).all_coeffs()]
    return np.array(n) / d[0], np.array(d) / d[0]


def test_passive_rlc_ladder():
    """Reference: lcapy symbolic transfer function of the same ladder (node 1 driven, node 4 out)."""
    body = "R1 1 2 1000\nL1 2 3 0.1\nC1 3 0 1e-6\nR2 3 4 2200\nC2 4 0 4.7e-7\n"
    n_ref, d_ref = _lcapy_coefficients(body, 4)
    ours = transfer_function(read_netlist("ladder\nVIN 1 0\n" + body, "ladder.cir"), "VIN", "4")
    np.testing.assert_allclose(ours.num, n_ref, rtol=1e-9)
    np.testing.assert_allclose(ours.den, d_ref, rtol=1e-9)


def test_opamp_pid_stage():
    """Reference: lcapy with its op-amp element (gain Ad -> infinity); an interacting PID stage with
    a derivative-limiting resistor, as in tests/netlists/two_stage_filter.cir."""
    lc = "R1 1 2 100000\nC2 1 5 1e-6\nRD 5 2 10000\nR2 2 6 220000\nC1 6 3 4.7e-6\nE1 3 0 opamp 0 2 Ad\n"
    n_ref, d_ref = _lcapy_coefficients(lc, 3, gain_symbols=("Ad",))
    ours_text = "pid\nVIN 1 0\nR1 1 2 100k\nC2 1 5 1u\nRD 5 2 10k\nR2 2 6 220k\nC1 6 3 4.7u\nX1 0 2 3 OPAMP\n"
    ours = transfer_function(read_netlist(ours_text, "pid.cir"), "VIN", "3")
    np.testing.assert_allclose(ours.num, n_ref, rtol=1e-9)
    np.testing.assert_allclose(ours.den, d_ref, rtol=1e-9, atol=1e-12)
