"""The tolerance engine's phase unwrapping (issue 14, benchmark item): draws whose phase error passes
±135° are unwrapped along frequency in the engine's own diamond-angle units, from the angles the
chunk already holds, instead of re-evaluating those draws in float64. Checked against numpy's
unwrap of float64 angles (an independent implementation of the same rule) and, end to end, against
numpy's percentile of the same draws evaluated one by one in float64. Targets are our own."""

from __future__ import annotations

import numpy as np
import pytest

from convert.circuit.tolerance import FLOAT32_BOUND, _diamond, unwrapped_peak
from convert.compare.frequency import unwrapped_phase_error_deg


def _reference_peak(ratio: np.ndarray):
    """Per column: max |np.unwrap(angle)| in degrees and where (numpy's rule, float64)."""
    err = np.nan_to_num(np.abs(unwrapped_phase_error_deg(ratio.T)), nan=180.0)
    return err.max(axis=1), err.argmax(axis=1)


@pytest.mark.parametrize("dtype", [np.float64, np.float32])
def test_unwrapped_peak_against_numpy_unwrap(dtype):
    """Source: numpy.unwrap on float64 angles. Random phase walks (steps up to ±170°, so many turns,
    both directions) and columns with non-finite points: the same peak to 1e-4° (float32 diamond
    angles) or 1e-9° (float64) and the same row."""
    rng = np.random.default_rng(14)
    walk = np.cumsum(rng.uniform(-170, 170, size=(300, 64)), axis=0)
    ratio = rng.uniform(0.1, 10, size=walk.shape) * np.exp(1j * np.radians(walk))
    ratio[50:53, 3] = np.nan  # a gap: unwrapped across the finite points
    ratio[120, 7] = np.inf
    d = _diamond(ratio.real.astype(dtype), ratio.imag.astype(dtype))
    peak, at = unwrapped_peak(d)
    ref_peak, ref_at = _reference_peak(ratio)
    assert np.max(np.abs(peak - ref_peak)) < (1e-4 if dtype == np.float32 else 1e-9)
    assert np.array_equal(at, ref_at)
    assert np.max(ref_peak) > 720  # the walks do turn several times


def test_steps_of_exactly_half_a_turn_follow_numpy():
    """numpy.unwrap keeps a step of exactly ±180° as it is; so does the diamond count (±2 units)."""
    angles = np.array([[0.0, 180.0, 0.0, -180.0, 0.0, 90.0, -90.0, 180.0]]).T
    ratio = np.exp(1j * np.radians(angles))
    ratio = np.round(ratio.real) + 1j * np.round(ratio.imag)  # exact axis points
    peak, at = unwrapped_peak(_diamond(ratio.real, ratio.imag))
    ref_peak, ref_at = _reference_peak(ratio)
    assert np.allclose(peak, ref_peak) and np.array_equal(at, ref_at)


def test_engine_phase_figure_for_wrapping_draws():
    """A notch with its zeros on the axis (our own target): most draws' phase error passes ±135°.
    The engine's 99th-percentile phase figure (float32 path) equals numpy's percentile of each draw's
    largest |unwrapped phase error| (np.unwrap of float64 responses of the same draws) within
    FLOAT32_BOUND, and so does the gain figure."""
    from convert.circuit.design import DesignOptions, design_circuit
    from convert.circuit.tolerance import Comparison, draw_parts, run_tolerances
    from convert.controller import from_expression

    d = design_circuit(from_expression("(s^2 + 400)/(s^2 + 8*s + 400)"), DesignOptions())
    f = d.f_grid(100)
    tol = {"R": 0.01, "C": 0.05}
    ref = d.topology.response({k: np.asarray([v]) for k, v in d.rounded.items()}, f)[0]
    fig = run_tolerances(
        d.topology, d.rounded, tol, band_f_hz=f, comparisons=[Comparison("t", ref)], draws=3000, seed=9
    ).figures["t"]
    drawn = draw_parts(d.topology, d.rounded, tol, 3000, 9)
    ratio = d.topology.response(drawn, f) / ref[None, :]
    wrapped = np.abs(np.angle(ratio, deg=True)).max(axis=1)
    assert np.mean(wrapped > 135) > 0.3  # the unwrap path carries the figure
    per_draw, _ = _reference_peak(ratio.T)
    assert abs(fig.max_phase_error_deg - np.percentile(per_draw, 99)) < FLOAT32_BOUND
    gain = np.abs(20 * np.log10(np.abs(ratio))).max(axis=1)
    assert abs(fig.max_gain_error_db - np.percentile(gain, 99)) < FLOAT32_BOUND
