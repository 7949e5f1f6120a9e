"""Tolerance analysis: the vectorized Monte Carlo against python-control evaluated one draw at a
time, the percentile shortcut against numpy.percentile, worst case against every corner."""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from convert.circuit.tolerance import draw_parts, monte_carlo, parse_tolerances, percentiles, worst_case
from convert.circuit.topologies import get_topology
from convert.errors import InputError

PID = {"R1": 47e3, "C1": 2.2e-6, "R3": 4.7e3, "R2": 100e3, "C2": 4.7e-6}
TOL = {"R": 0.01, "C": 0.05}


def test_percentiles_match_numpy():
    """Source: numpy.percentile (method 'linear') on the same data."""
    rng = np.random.default_rng(2)
    for n in (1, 2, 7, 1000, 20001):
        x = rng.standard_normal((5, n))
        q = [0, 0.5, 13, 50, 99.5, 100]
        assert np.allclose(percentiles(x.copy(), q), np.percentile(x, q, axis=1), rtol=0, atol=1e-15)


def test_monte_carlo_matches_python_control_per_draw():
    """Source: python-control TransferFunction frequency response, one draw at a time (300
    draws), percentiles by numpy; ours must agree within 0.01 dB and 0.01 deg."""
    control = pytest.importorskip("control")
    topo = get_topology("pid-single-amp")
    f = np.logspace(-2, 3, 60)
    r = monte_carlo(topo, PID, TOL, f, draws=300, seed=11)
    drawn = draw_parts(topo, PID, TOL, 300, 11)
    gains, phases = [], []
    for i in range(300):
        c = topo.controller_from_parts({k: float(v[i]) for k, v in drawn.items()})
        resp = control.tf(list(c.num), list(c.den)).frequency_response(2 * np.pi * f)
        gains.append(20 * np.log10(np.squeeze(resp.magnitude)))
        phases.append(np.degrees(np.unwrap(np.squeeze(resp.phase))))
    g = np.percentile(np.array(gains), [0.5, 50, 99.5], axis=0)
    p = np.percentile(np.array(phases), [0.5, 50, 99.5], axis=0)
    p += 360 * np.round((r.phase_deg - p) / 360)  # same branch of the phase
    assert np.max(np.abs(g - r.gain_db)) < 0.01
    assert np.max(np.abs(p - r.phase_deg)) < 0.01
    assert r.spread()["gain_db"] > 0.1  # tolerances must show


def test_worst_case_brackets_every_corner():
    """Reference: all 2^5 tolerance corners evaluated exactly; the worst-case band from the
    sensitivities is made of corners, so it lies inside their envelope, and it reaches the envelope
    within 1e-3 dB (where a sensitivity changes sign inside the tolerance the sign-chosen corner
    can miss the extreme vertex by a little)."""
    topo = get_topology("pid-single-amp")
    f = np.logspace(-2, 3, 50)
    wc = worst_case(topo, PID, TOL, f)
    names = list(PID)
    env = []
    for signs in itertools.product((-1, 1), repeat=len(names)):
        parts = {n: np.array([PID[n] * (1 + s * TOL[n[0]])]) for n, s in zip(names, signs)}
        env.append(20 * np.log10(np.abs(topo.response(parts, f)[0])))
    env = np.array(env)
    assert np.all(wc.gain_db_high <= env.max(axis=0) + 1e-9)
    assert np.all(wc.gain_db_low >= env.min(axis=0) - 1e-9)
    assert np.allclose(wc.gain_db_high, env.max(axis=0), atol=1e-3)
    assert np.allclose(wc.gain_db_low, env.min(axis=0), atol=1e-3)


def test_seed_reproducible():
    topo = get_topology("pi-rc-feedback")
    f = np.logspace(-1, 2, 20)
    a = monte_carlo(topo, {"R1": 1e4, "R2": 2e4, "C1": 1e-6}, TOL, f, draws=500, seed=4)
    b = monte_carlo(topo, {"R1": 1e4, "R2": 2e4, "C1": 1e-6}, TOL, f, draws=500, seed=4)
    assert np.array_equal(a.gain_db, b.gain_db)


@pytest.mark.parametrize("words, match", [(["R"], "KIND=PERCENT"), (["R=150%"], "below 100"), (["X9=1%"], "unknown part"),
                                          (["R=abc"], "R")])
def test_bad_tolerances(words, match):
    with pytest.raises(InputError, match=match):
        parse_tolerances(words, part_names=["R1", "C1"])


def test_tolerance_words():
    assert parse_tolerances(["R=0.1%", "C=10%", "R1=2%"], part_names=["R1"]) == {"R": 0.001, "C": 0.1, "R1": 0.02}
