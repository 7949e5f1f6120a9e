"""Regression tests for wrong numbers found in the correctness review (one test per bug)."""

from __future__ import annotations

import numpy as np
import pytest

from convert.compare.loop import loop_margins
from convert.controller import from_expression


def test_gain_margin_of_conditionally_stable_loop_is_the_upward_margin():
    """Bug: with two phase crossings the most negative gain margin was reported (-31.3 dB), so a
    stable, conditionally stable loop looked unstable. Reference: python-control
    ``stability_margins`` reports the crossing nearest 0 dB (+6.58 dB here) and the closed loop's
    poles (python-control ``feedback``) are all in the left half-plane."""
    import control

    c = from_expression("5*(s + 0.5)^2*(s + 1)/s^3")
    p = from_expression("1/((0.05*s + 1)^2*(0.2*s + 1))")
    loop = c.to_control() * p.to_control()
    assert np.all(control.feedback(loop).poles().real < 0)
    gm, pm, _, wpc, wgc, _ = control.stability_margins(loop)
    m = loop_margins(c, p, 0.0)
    assert m.gain_margin_db == pytest.approx(20 * np.log10(gm), abs=0.01)
    assert m.gain_margin_db > 0
    assert m.phase_crossover_hz == pytest.approx(wpc / (2 * np.pi), rel=1e-3)
    assert m.phase_margin_deg == pytest.approx(pm, abs=0.05)


def test_gain_margin_of_unstable_conditionally_stable_loop_matches_python_control():
    """Same rule on an unstable loop with two phase crossings: python-control
    ``stability_margins`` gives -10.41 dB (the crossing nearest 0 dB), not the -33.7 dB one."""
    import control

    c = from_expression("40*(s + 1)^2/s^3")
    p = from_expression("1/(0.1*s + 1)^2")
    gm, *_ = control.stability_margins(c.to_control() * p.to_control())
    m = loop_margins(c, p, 0.0)
    assert m.gain_margin_db == pytest.approx(20 * np.log10(gm), abs=0.01)


@pytest.mark.parametrize("controller, plant", [
    ("30 + 15/s", "50/(2*s + 1)"),          # crossover 1500x above the plant's corner
    ("1e6", "1/s"),                          # no corner at all, crossover at 159 kHz
    ("1e-6/s", "1/(s + 1)"),                 # crossover far below every corner
])
def test_margin_grid_reaches_a_crossover_far_from_the_corners(controller, plant):
    """Bug: the margin grid spanned 1000x around the corners only, so a high-gain loop (a plant
    gain in engineering units times kp) had "no crossover", no phase margin and a sensitivity
    peak below 0 dB (impossible for a strictly proper loop). Reference: python-control
    ``stability_margins`` (phase margin and crossover frequency)."""
    import control

    c, p = from_expression(controller), from_expression(plant)
    _, pm, _, _, wgc, _ = control.stability_margins(c.to_control() * p.to_control())
    m = loop_margins(c, p, 0.0)
    assert m.crossover_hz == pytest.approx(wgc / (2 * np.pi), rel=1e-3)
    assert m.phase_margin_deg == pytest.approx(pm, abs=0.05)
    assert m.sensitivity_peak_db > -0.01
