"""The block linear filter (convert.digital.linearfilter.run_filter) against
scipy.signal.lfilter (reference library: the same transposed direct form II and the same zi
convention), over random stable, marginal (integrators, oscillators on |z| = 1) and lightly
damped filters, real and complex, with and without an initial state, whole and in chunks."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.signal import lfilter

from convert.digital.linearfilter import BLOCK, first_order_recursion, run_filter

# outputs within this fraction of the reference output's peak (the module doc's stated accuracy)
TOL = 1e-12
LONG_DOUBLE = np.finfo(np.longdouble).eps < 1e-18


def _close(y, ref, tol=TOL):
    scale = max(float(np.max(np.abs(ref))), 1e-300) if np.size(ref) else 1.0
    err = float(np.max(np.abs(np.asarray(y) - ref))) if np.size(ref) else 0.0
    assert err <= tol * scale, (err / scale, tol)


def _close_state(z, z_ref, b, a, x, y_ref, tol=TOL):
    """States compared on the scale of the terms they are sums of (b_j·x and a_j·y)."""
    scale = float(np.sum(np.abs(b)) * np.max(np.abs(x)) + np.sum(np.abs(a)) * np.max(np.abs(y_ref)))
    err = float(np.max(np.abs(np.asarray(z) - z_ref)))
    assert err <= tol * scale / abs(a[0]), (err / scale, tol)


def _long_double(b, a, x, zi):
    """The transposed-direct-form-II recursion in long double (64-bit mantissa), sample by sample."""
    ld = np.longdouble
    n = max(len(a), len(b)) - 1
    bb = np.zeros(n + 1, ld)
    aa = np.zeros(n + 1, ld)
    bb[: len(b)] = np.asarray(b, ld) / ld(a[0])
    aa[: len(a)] = np.asarray(a, ld) / ld(a[0])
    s = list(np.asarray(zi, ld)) + [ld(0)]
    bl, al = list(bb), list(aa)
    y = np.empty(len(x), ld)
    for k, xk in enumerate(np.asarray(x, ld)):
        yk = bl[0] * xk + s[0]
        y[k] = yk
        s = [bl[i + 1] * xk + s[i + 1] - al[i + 1] * yk for i in range(n)] + [ld(0)]
    return y, np.array(s[:n], ld)


def _as_accurate_as_scipy(b, a, x, zi, factor=10.0):
    """Our outputs' distance to the long-double recursion is at most ``factor`` times
    scipy.signal.lfilter's own (or 1e-13 of the peak, whichever is larger)."""
    y_ld, _ = _long_double(b, a, x, zi)
    peak = float(np.max(np.abs(y_ld)))
    y_ref, _ = lfilter(b, a, x, zi=zi)
    y, _ = run_filter(b, a, x, zi)
    ours = float(np.max(np.abs(y - y_ld))) / peak
    theirs = float(np.max(np.abs(y_ref - y_ld))) / peak
    assert ours <= max(factor * theirs, 1e-13), (ours, theirs)
    return ours, theirs


def _poles(rng, n, rmax, complex_ok=True):
    """n poles of a real polynomial: real ones and conjugate pairs, radii up to rmax."""
    out: list[complex] = []
    while len(out) < n:
        r = rng.uniform(0.0, rmax)
        if complex_ok and len(out) + 2 <= n and rng.random() < 0.5:
            p = r * np.exp(1j * rng.uniform(0.05, np.pi - 0.05))
            out += [p, np.conj(p)]
        else:
            out.append(r * (1 if rng.random() < 0.7 else -1))
    return out


def _random_filters(seed, count):
    rng = np.random.default_rng(seed)
    for _ in range(count):
        n = int(rng.integers(1, 9))
        a = np.real(np.poly(_poles(rng, n, 0.999)))
        b = rng.standard_normal(int(rng.integers(1, n + 3)))
        yield b, a, rng


def test_random_stable_filters_with_and_without_initial_state():
    """Random stable filters (order 1-8, poles up to |z| = 0.999, b up to two taps longer than a),
    several blocks of input: outputs within 1e-12 of the peak of scipy.signal.lfilter's, final
    states within 1e-12 of the states' peak; from rest (zi=None) the same as zi of zeros."""
    for b, a, rng in _random_filters(1, 60):
        x = rng.standard_normal(int(rng.integers(1, 5 * BLOCK)))
        zi = rng.standard_normal(max(len(a), len(b)) - 1)
        y_ref, z_ref = lfilter(b, a, x, zi=zi)
        y, z = run_filter(b, a, x, zi)
        _close(y, y_ref)
        _close_state(z, z_ref, b, a, x, y_ref)
        y0, z0 = run_filter(b, a, x)
        _close(y0, lfilter(b, a, x))
        _close_state(z0, lfilter(b, a, x, zi=np.zeros_like(zi))[1], b, a, x, y_ref)


def test_chunks_continue_where_the_last_one_stopped():
    """A long input cut in chunks of random lengths (0, 1, around the block length, several
    blocks), the state carried: the joined outputs equal scipy.signal.lfilter over the whole
    input within 1e-12 of the peak, and the final state equals its final state."""
    for b, a, rng in _random_filters(2, 25):
        x = rng.standard_normal(4000)
        zi = rng.standard_normal(max(len(a), len(b)) - 1)
        y_ref, z_ref = lfilter(b, a, x, zi=zi)
        cuts = np.sort(rng.choice([0, 1, BLOCK - 1, BLOCK, BLOCK + 1, 3 * BLOCK + 7, 1000], size=6))
        cuts = np.unique(np.r_[cuts, rng.integers(0, x.size, 4)])
        parts, state = [], zi
        for lo, hi in zip(np.r_[0, cuts], np.r_[cuts, x.size]):
            y, state = run_filter(b, a, x[lo:hi], state)
            parts.append(y)
        _close(np.concatenate(parts), y_ref)
        _close_state(state, z_ref, b, a, x, y_ref)


@pytest.mark.parametrize(
    "p",
    [
        0.0,
        1e-200,
        1e-70,
        6.7e-6,
        0.3,
        -0.5,
        0.98,
        0.999999,
        1.0,
        -1.0,
        1.0001,
        1.01,
        0.9 * np.exp(1j),
        0.99999 * np.exp(0.3j),
        np.exp(0.1j),
        2e-80j,
    ],
)
def test_first_order_sections(p):
    """First-order filters (b0 + b1·z⁻¹)/(1 − p·z⁻¹) from p = 0 through a tiny pole, decaying,
    alternating, marginal (p = ±1) and slowly growing ones to complex poles up to |p| = 1, over
    60,000 samples in one call and in chunks, with an initial state: outputs and final state
    within 1e-13 of scipy.signal.lfilter's peak (and within 1e-12 for |p| > 1, where the output
    grows a thousandfold); the blocks of the running sum never overflow for inputs of 1e150."""
    rng = np.random.default_rng(11)
    x = rng.standard_normal(60_000)
    b = [0.7, -0.2]
    a = [1.0, -p]
    zi = [0.3 + (0.1j if np.iscomplexobj(p) else 0)]
    tol = 1e-12 if abs(p) > 1 else 1e-13
    y_ref, z_ref = lfilter(b, a, x, zi=zi)
    y, z = run_filter(b, a, x, zi)
    _close(y, y_ref, tol)
    _close_state(z, z_ref, b, a, x, y_ref, tol)
    parts, state = [], zi
    for lo, hi in ((0, 1), (1, 777), (777, 30_001), (30_001, 60_000)):
        yy, state = run_filter(b, a, x[lo:hi], state)
        parts.append(yy)
    _close(np.concatenate(parts), y_ref, tol)
    if abs(p) < 1:
        big = first_order_recursion(p, 1e150 * x[:5000])
        ref = lfilter([1.0], [1.0, -p], 1e150 * x[:5000])
        assert np.all(np.isfinite(big))
        _close(big, ref, 1e-13)


@pytest.mark.parametrize(
    "a",
    [
        [1.0, -1.0],  # integrator
        [1.0, -2.0, 1.0],  # double integrator (a ramp's growth)
        [1.0, -1.5346938776, 0.5346938776],  # integrator and a real pole (a Tustin PI with filter)
        [1.0, -2 * np.cos(0.3), 1.0],  # undamped oscillator on |z| = 1
        np.real(np.poly([1.0, 0.9999 * np.exp(0.02j), 0.9999 * np.exp(-0.02j)])),  # integrator, light pair
    ],
)
def test_marginal_filters(a):
    """Poles on the unit circle (integrators, an undamped oscillator), 40 blocks of input, with an
    initial state: against a long-double recursion (np.longdouble) our outputs are within 10×
    scipy.signal.lfilter's own error (these recursions lose digits to the poles' crowding: scipy's
    error reaches 1e-11 of the peak), and within 1e-9 of scipy's outputs and final state."""
    if not LONG_DOUBLE:
        pytest.skip("np.longdouble is double precision on this platform")
    rng = np.random.default_rng(3)
    b = rng.standard_normal(len(a))
    x = rng.standard_normal(40 * BLOCK + 17)
    zi = rng.standard_normal(len(a) - 1)
    _as_accurate_as_scipy(b, a, x, zi)
    y_ref, z_ref = lfilter(b, a, x, zi=zi)
    y, z = run_filter(b, a, x, zi)
    _close(y, y_ref, 1e-9)
    _close_state(z, z_ref, b, a, x, y_ref, 1e-9)


@pytest.mark.parametrize("r", [0.999, 0.9999, 0.99999])
def test_lightly_damped_pairs(r):
    """A pole pair at radius r (damping down to 1e-5 per sample) and a second pair at 0.9r: the
    impulse response rings for thousands of samples; over 12,000 samples our outputs are within
    10× scipy.signal.lfilter's own error against a long-double recursion, and within 1e-9 of
    scipy's outputs and final state."""
    if not LONG_DOUBLE:
        pytest.skip("np.longdouble is double precision on this platform")
    rng = np.random.default_rng(4)
    a = np.real(np.poly([r * np.exp(0.05j), r * np.exp(-0.05j), 0.9 * r * np.exp(0.7j), 0.9 * r * np.exp(-0.7j)]))
    b = rng.standard_normal(3)
    x = rng.standard_normal(12_000)
    zi = rng.standard_normal(4)
    _as_accurate_as_scipy(b, a, x, zi)
    y_ref, z_ref = lfilter(b, a, x, zi=zi)
    y, z = run_filter(b, a, x, zi)
    _close(y, y_ref, 1e-9)
    _close_state(z, z_ref, b, a, x, y_ref, 1e-9)


def test_complex_coefficients_input_and_state():
    """Complex first- and second-order filters (as a modal replay runs them) on complex and on
    real input: within 1e-12 of scipy.signal.lfilter's peak; the result is complex."""
    rng = np.random.default_rng(5)
    for _ in range(20):
        n = int(rng.integers(1, 4))
        p = 0.999 * rng.uniform(0, 1, n) * np.exp(1j * rng.uniform(-np.pi, np.pi, n))
        a = np.poly(p)
        b = rng.standard_normal(n + 1) + 1j * rng.standard_normal(n + 1)
        zi = rng.standard_normal(n) + 1j * rng.standard_normal(n)
        for x in (rng.standard_normal(3 * BLOCK + 5), rng.standard_normal(700) + 1j * rng.standard_normal(700)):
            y_ref, z_ref = lfilter(b, a, x, zi=zi)
            y, z = run_filter(b, a, x, zi)
            assert np.iscomplexobj(y) and np.iscomplexobj(z)
            _close(y, y_ref)
            _close_state(z, z_ref, b, a, x, y_ref)


def test_shapes_scaling_and_short_forms():
    """a[0] ≠ 1 (both divided by it), b longer than a (an FIR tail), a pure gain (no state), an
    empty input (the state passes through), integer coefficients: as scipy.signal.lfilter."""
    rng = np.random.default_rng(6)
    x = rng.standard_normal(600)
    cases = [
        ([2.0, -1.0, 0.5], [4.0, -2.0, 0.8]),
        ([0.5, 0.25, 0.125, 0.0625, 1.0], [1.0, -0.5]),
        ([3.0], [2.0]),
        ([1, 2, 1], [1, 0]),
        ([0.0, 0.0, 1.0], [1.0]),
    ]
    for b, a in cases:
        n = max(len(a), len(b)) - 1
        zi = rng.standard_normal(n)
        y_ref, z_ref = lfilter(b, a, x, zi=zi)
        y, z = run_filter(b, a, x, zi)
        _close(y, y_ref)
        assert z.shape == z_ref.shape
        if n:
            _close_state(z, z_ref, b, a, x, y_ref)
        y_e, z_e = run_filter(b, a, x[:0], zi)
        assert y_e.size == 0 and np.array_equal(z_e, zi)


@pytest.mark.parametrize(
    "b, a, x, zi, words",
    [
        ([1.0], [0.0, 1.0], np.ones(3), None, "a[0]"),
        ([1.0, 2.0], [1.0, 0.5], np.ones(3), np.zeros(2), "zi must have shape (1,)"),
        ([1.0], [1.0, 0.5], np.ones((2, 3)), None, "one-dimensional"),
        ([], [1.0], np.ones(3), None, "non-empty"),
    ],
)
def test_bad_arguments_are_named(b, a, x, zi, words):
    """A zero a[0], a state of the wrong length, a 2-D input or no coefficients: a ValueError
    that names the argument (common practice)."""
    with pytest.raises(ValueError, match=None) as info:
        run_filter(b, a, x, zi)
    assert words in str(info.value)


def test_log_replay_loads_no_scipy_signal():
    """The plant-log replay (analog modes and a digital form) runs without importing
    scipy.signal (its import costs a third of a second of a report); checked in a fresh
    interpreter (common practice)."""
    import subprocess
    import sys
    import textwrap

    code = textwrap.dedent(
        """
        import sys
        import numpy as np
        from convert.controller import from_expression
        from convert.evidence.log import AnalogReplay, DigitalReplay
        t = np.arange(0, 20, 0.1)
        u = np.sin(t)
        AnalogReplay(from_expression("2*(s+0.5)/(s*(0.05s+1))")).run(t, u)
        DigitalReplay([0.6, 0.0002, -0.61], [1.0, -1.53, 0.53], 20.0, 0.05).run(t, u)
        print("scipy.signal" in sys.modules)
        """
    )
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip() == "False"
