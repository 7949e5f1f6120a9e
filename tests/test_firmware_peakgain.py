"""Peak-gain bounds (‖h‖₁ of the impulse response to each section output) computed in blocks
without a per-sample loop (convert.digital.impulse), against outside references."""

from __future__ import annotations

import math

import numpy as np
import pytest

from convert.digital.impulse import Cascade


def _sosfilt_impulse(sections, length):
    """The reference: scipy.signal.sosfilt over tf2sos of each section, as the package computed
    these responses before (scipy.signal, a general-purpose reference library)."""
    from scipy.signal import sosfilt, tf2sos

    rows, out = [], []
    x = np.zeros(length)
    delay = 0  # leading zeros of a numerator: a pure delay, applied to the output
    for b, a in sections:
        n = max(len(b), len(a), 3)
        if n > 3 and b[0] == 0:  # tf2sos warns of them
            k = len(b) - len(np.trim_zeros(b, "f"))
            delay, b = delay + k, b[k:]
        bb = np.concatenate([b, np.zeros(n - len(b))])
        aa = np.concatenate([a, np.zeros(n - len(a))])
        rows.extend(tf2sos(bb, aa) if n > 3 else [np.concatenate([bb, aa])])
        x[:] = 0.0
        if delay < length:
            x[delay] = 1.0
        out.append(sosfilt(np.array(rows), x))
    return np.array(out)


def _random_cascade(rng):
    sections = []
    for _ in range(int(rng.integers(1, 4))):
        order = int(rng.integers(1, 6))
        poles = []
        while len(poles) < order:
            r = rng.uniform(0.0, 0.995)
            if order - len(poles) >= 2 and rng.random() < 0.5:
                th = rng.uniform(0.05, 3.0)
                poles += [r * np.exp(1j * th), r * np.exp(-1j * th)]
            else:
                poles.append(r if rng.random() < 0.7 else -r)
        a = np.real(np.poly(poles))
        b = rng.normal(size=int(rng.integers(1, len(a) + 2)))
        if rng.random() < 0.3:
            b = np.concatenate([[0.0], b])  # a pure delay in front
        sections.append((b, a))
    return sections


def test_impulse_responses_agree_with_scipy_sosfilt():
    """Every section output's impulse response, for 120 random stable cascades (orders 1 to 5
    per section, so the high-order split into root factors is exercised), equals
    scipy.signal.sosfilt's to 1e-11 of the response's peak."""
    rng = np.random.default_rng(2026)
    for _ in range(120):
        sections = _random_cascade(rng)
        length = int(rng.integers(2, 5000))
        got = Cascade(sections).impulse(length)
        want = _sosfilt_impulse(sections, length)
        assert got.shape == want.shape
        scale = np.max(np.abs(want), axis=1, keepdims=True)
        assert np.all(np.abs(got - want) <= 1e-11 * scale + 1e-300)


def test_first_order_closed_form():
    """b0/(1 − p·z⁻¹) has h[n] = b0·pⁿ, so ‖h‖₁ = |b0|/(1 − |p|) (the geometric series, common
    practice); the bound holds it within 1e-12 and never below it by more than rounding."""
    for p in (0.5, -0.9, 0.999, 0.99995):
        n = int(min(2e6, max(1000, math.ceil(30 / (1 - abs(p))))))
        (got,) = Cascade([(np.array([0.7]), np.array([1.0, -p]))]).l1(n)
        want = 0.7 / (1 - abs(p))
        assert got == pytest.approx(want, rel=1e-10)
        assert got >= want * (1 - 1e-12)


def test_double_pole_against_a_long_double_closed_form():
    """A double pole at z = 0.995 with a second-order numerator: h = b * (n+1)·pⁿ summed in
    long double over 2·10^6 samples (a closed form evaluated independently); the block
    computation's samples are within 1e-14 of it and its bound within 1e-10 above it."""
    p = 0.995
    b = np.array([0.3, -0.59, 0.29])
    a = np.array([1.0, -2 * p, p * p])
    n = np.arange(2_000_000, dtype=np.longdouble)
    g = (n + 1) * np.exp(n * np.log(np.longdouble(p)))
    h = np.longdouble(b[0]) * g
    h[1:] += np.longdouble(b[1]) * g[:-1]
    h[2:] += np.longdouble(b[2]) * g[:-2]
    truth = float(np.sum(np.abs(h)))
    c = Cascade([(b, a)])
    assert np.max(np.abs(c.impulse(20_000)[0] - h[:20_000].astype(float))) < 1e-14
    (got,) = c.l1(6000)
    assert truth * (1 - 1e-12) <= got <= truth * (1 + 1e-10)


def test_bound_does_not_depend_on_the_summed_length():
    """The figure is a property of the filter, not of how many samples were summed: a short
    sum's tail bound is larger but still a bound, and sums past the decay agree to 1e-9."""
    rng = np.random.default_rng(7)
    for _ in range(20):
        sections = _random_cascade(rng)
        c = Cascade(sections)
        long = c.l1(200_000)
        ref = np.sum(np.abs(_sosfilt_impulse(sections, 200_000)), axis=1)
        assert np.all(np.array(long) >= ref * (1 - 1e-11))
        for short in (c.l1(3000), c.l1(50_000)):
            assert np.all(np.array(short) >= ref * (1 - 1e-11))
        assert np.allclose(c.l1(100_000), long, rtol=1e-9)


def test_peak_gains_of_a_layout_with_an_integrator():
    """peak_gains is infinite from the section holding a pole at z = 1 onwards and finite
    before it, matching scipy.signal.sosfilt's sum (reference library) to 1e-9."""
    from convert.digital.fixedpoint import peak_gains
    from convert.digital.roots import RootForm
    from convert.digital.structures import build_layout

    roots = RootForm((0.9, -0.5 + 0.2j, -0.5 - 0.2j), (0.95, 0.6 + 0.3j, 0.6 - 0.3j, 1.0), 0.4, 1e-3)
    lay = build_layout("sections", roots)
    gains = peak_gains(lay)
    assert len(gains) == len(lay.sections) and math.isinf(gains[-1])
    from convert.digital.fixedpoint import z_equivalent

    finite = [z_equivalent(lay, s) for s in lay.sections[:-1]]
    ref = np.sum(np.abs(_sosfilt_impulse(finite, 100_000)), axis=1)
    assert np.allclose(gains[:-1], ref, rtol=1e-9)


def test_stored_words_bound_covers_their_own_impulse_response():
    """Fixed-point scaling must hold the words as stored, not only the design: quantizing a
    resonant Q15 section moves its poles, and a pole moved towards the unit circle raises ‖h‖₁
    (by up to 20 % here), so a node scaled from the design's bound could overflow while the
    analysis reported headroom. For 200 seeded resonant sections the stored words' own ‖h‖₁,
    summed from ``scipy.signal.lfilter``'s impulse response of the stored b/a (a general-purpose
    reference library) until the slowest stored pole decayed by e^-40, times S_1/S_0, never
    exceeds the section's full scale S_1, the reported bound is not below it, and the reported
    headroom is not negative. Some of the 200 need a full scale above the design rule's (the
    check is exercised: before the fix 4 of them overflowed silently)."""
    from scipy.signal import lfilter

    from convert.digital.fixedpoint import peak_gains
    from convert.digital.quantized import analyze
    from convert.digital.roots import RootForm

    rng = np.random.default_rng(7)
    raised = checked = 0
    for _ in range(200):
        radius = 1 - 10 ** rng.uniform(-3.5, -2)
        p = radius * np.exp(1j * rng.uniform(0.002, 0.05))
        fa = analyze(
            RootForm((), (p, p.conjugate()), 1.0, 1e-3),
            "sections",
            "q15",
            np.array([0.1, 1.0]),
            input_range=1.0,
            output_level=1.0,
        )
        real = fa.realized
        s = real.sections[0]
        stored_radius = float(np.max(np.abs(np.roots(s.a))))
        if stored_radius >= 1 - 1e-9:  # quantized onto the unit circle: a failure of its own
            assert fa.failures
            continue
        x = np.zeros(int(40 / (1 - stored_radius)))
        x[0] = 1.0
        own = float(np.abs(lfilter(s.b, s.a, x)).sum()) * real.node_scales[1] / real.node_scales[0]
        assert own <= real.node_scales[1]
        assert fa.node_bounds[0] >= own * (1 - 1e-9)
        assert fa.headroom_db >= 0
        checked += 1
        design_scale = 2.0 ** math.ceil(math.log2(1.01 * peak_gains(real.layout)[0]))
        raised += real.node_scales[1] > design_scale
    assert checked > 150 and raised >= 1
