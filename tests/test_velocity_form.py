"""The velocity (incremental) form of a digital controller: unclamped, the running sum of its
increments is the positional law (reference: scipy.signal.lfilter of b/a); clamped, nothing
winds up (common practice: the output leaves its limit as soon as the increments turn)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.signal import lfilter

from convert.controller import Controller
from convert.digital.velocity import VelocityForm, increment_filter


@pytest.mark.parametrize(
    "b, a",
    [
        ([2.05, -1.95], [1.0, -1.0]),  # PI
        ([3.0, -5.2, 2.25], [1.0, -1.6, 0.6]),  # PID with a filtered derivative: (1 - z^-1)(1 - 0.6 z^-1)
        ([0.4, 0.1], [1.0, -0.7]),  # a lag, no integrator
        ([1.2], [1.0]),  # a gain
    ],
)
def test_sum_of_increments_is_the_positional_law(b, a):
    e = np.random.default_rng(3).normal(size=400)
    db, da = increment_filter(b, a)
    assert np.max(np.abs(np.cumsum(lfilter(db, da, e)) - lfilter(b, a, e))) < 1e-9
    model = VelocityForm(Controller.digital(b, a, 10.0), None).model()
    out = np.array([model.step(x) for x in e])
    assert np.max(np.abs(out - lfilter(b, a, e))) < 1e-9


def test_clamped_velocity_pi_does_not_wind_up():
    """A PI held at its upper limit by a long positive error leaves it on the first sample the
    error turns negative (hand: u = 10 + b0·e + b1·e_old < 10), where the positional law would
    have to unwind its integral first."""
    b, a = [2.05, -1.95], [1.0, -1.0]
    model = VelocityForm(Controller.digital(b, a, 10.0), (-10.0, 10.0)).model()
    for _ in range(200):
        assert model.step(1.0) <= 10.0
    assert model.u == 10.0
    u = model.step(-1.0)
    assert u == pytest.approx(10.0 + 2.05 * -1.0 - 1.95 * 1.0)
