"""Structures and word formats: the arithmetic models and the quantization analysis, checked
against outside references (scipy.signal, numpy, mpmath) and hand-derived figures."""

from __future__ import annotations

import math

import numpy as np
import pytest

from convert.compare.frequency import log_grid
from convert.controller import from_expression
from convert.digital import discretize
from convert.digital.fixedpoint import realize
from convert.digital.quantized import analyze, recommend
from convert.digital.structures import STRUCTURES, build_layout
from convert.digital.wordformats import FORMATS

LEADLAG_PI = "2*(1+1/(0.5*s))*(0.2s+1)/(0.02s+1)*100/((s/30)^2+0.8*s/30+1)"


def _real(expr, fs, method="tustin"):
    return discretize(from_expression(expr), fs, method)


@pytest.mark.parametrize("structure", list(STRUCTURES))
def test_float64_models_match_scipy(structure):
    """Reference library: scipy.signal.sosfilt on the sections of the same layout (and lfilter
    on b/a for the direct forms) — the float64 model of every structure agrees to 1e-9 of the
    peak (different operation orders round differently)."""
    from tests.firmware_refs import scipy_filter

    real = _real("(0.2s+1)/(0.02s+1)*100/((s/30)^2+0.8*s/30+1)/(s/3+1)", 500)  # no integrator: no drift
    lay = build_layout(structure, real.roots, real.b, real.a)
    x = np.random.default_rng(3).normal(size=3000)
    y = realize(lay, FORMATS["float64"]).model().run(x)
    ref = scipy_filter(lay, x)
    assert np.max(np.abs(y - ref)) <= 1e-9 * np.max(np.abs(ref))


def test_sections_built_from_roots_not_polynomial():
    """The sections' poles are the directly mapped poles (e^{pT} under Tustin), not roots of the
    expanded polynomial: at fs/corner = 1e5 they agree with the bilinear map to 1e-15
    (numpy.roots of the expanded a misses them by far more)."""
    real = _real("(1+1/(10*s))*(s/0.1+1)/((s/0.2)^2+s/0.2+1)", 2e4)
    lay = build_layout("sections", real.roots)
    got = sorted((p for s in lay.sections for p in s.poles), key=lambda p: (p.real, p.imag))
    want = sorted(real.roots.poles, key=lambda p: (p.real, p.imag))
    assert np.max(np.abs(np.array(got) - np.array(want))) < 1e-15
    poly = np.roots(real.a)
    assert np.max([min(abs(poly - p)) for p in want]) > 1e-12  # why the rule matters


def test_pairing_rule_puts_integrator_last():
    """Common practice (stated rule): the poles nearest the unit circle run last."""
    real = _real(LEADLAG_PI, 1000)
    lay = build_layout("sections", real.roots)
    assert any(p == 1 for p in lay.sections[-1].poles)
    radii = [max(abs(p) for p in s.poles) for s in lay.sections]
    assert radii == sorted(radii)


def test_pole_displacement_matches_numpy_roots_of_stored_coefficients():
    """numpy.roots of the float32-stored a (an independent root finder) against the analysis:
    the largest pole radius agrees to 1e-9."""
    real = _real("(1+1/(2*s))/((s/20)^2+0.3*s/20+1)", 1000)
    x = analyze(real.roots, "direct1", "float32", log_grid(0.01, 400, 50), b=real.b, a=real.a, output_level=5)
    a32 = np.asarray(real.a, dtype=np.float32).astype(float)
    r = np.roots(a32)
    assert abs(max(abs(r)) - x.max_pole_radius) < 1e-9
    shift = max(min(abs(r - p)) for p in real.roots.poles)
    assert x.pole_shift == pytest.approx(shift, rel=1e-3, abs=1e-12)


def test_float32_direct_pid_error_against_mpmath():
    """A Tustin PID with derivative filter at fs / f_corner = 1e4 in float32 direct form: the
    tool's response error equals that of the float32-rounded b/a evaluated in 40-digit
    arithmetic (mpmath), and is the error the numpy.float32 filter shows at the worst frequency."""
    import mpmath

    fs = 1e4
    real = _real("2*(1+1/(1.0*s)+0.1*s/(0.01*s+1))", fs)  # integral corner 0.16 Hz -> ratio ~6e4
    f = log_grid(0.01, 100, 40)
    x = analyze(real.roots, "direct1", "float32", f, b=real.b, a=real.a, output_level=10)
    b32 = [mpmath.mpf(float(v)) for v in np.asarray(real.b, dtype=np.float32)]
    a32 = [mpmath.mpf(float(v)) for v in np.asarray(real.a, dtype=np.float32)]
    mpmath.mp.dps = 40
    worst = 0.0
    for fk in f:
        z1 = mpmath.exp(-2j * mpmath.pi * fk / fs)
        h = sum(c * z1**k for k, c in enumerate(b32)) / sum(c * z1**k for k, c in enumerate(a32))
        ref = complex(real.roots.frequency_response(np.array([fk]))[0])
        worst = max(worst, abs(20 * math.log10(abs(complex(h)) / abs(ref))))
    assert x.gain_error_db == pytest.approx(worst, rel=1e-3)
    assert x.gain_error_db > 0.01  # float32 direct form is visibly wrong here


def _mp_gain_error_db(x, real, f):
    """Largest |gain error| (dB) of the stored sections of an analysis, evaluated in 40-digit
    arithmetic (mpmath) against the directly mapped roots."""
    import mpmath

    mpmath.mp.dps = 40
    rl = x.realized
    t = rl.layout.sample_period_s
    d = mpmath.mpf(float(np.float32(rl.layout.delta_step))) if rl.layout.delta_step else None
    worst = 0.0
    for fk in f:
        z = mpmath.exp(2j * mpmath.pi * mpmath.mpf(fk) * t)
        h = mpmath.mpf(1)
        for sec in rl.sections:
            if rl.form == "delta":
                dd = (z - 1) / d
                num = sum(mpmath.mpf(c) * dd ** (len(sec.b) - 1 - k) for k, c in enumerate(sec.b))
                den = sum(mpmath.mpf(c) * dd ** (len(sec.a) - 1 - k) for k, c in enumerate(sec.a))
            else:
                num = sum(mpmath.mpf(c) * z**-k for k, c in enumerate(sec.b))
                den = sum(mpmath.mpf(c) * z**-k for k, c in enumerate(sec.a))
            h *= num / den
        ref = complex(real.roots.frequency_response(np.array([fk]))[0])
        worst = max(worst, abs(20 * math.log10(abs(complex(h)) / abs(ref))))
    return worst


def test_sections_and_delta_smaller_error_than_direct_float32():
    """The claim the recommendation rests on, at fs / integral corner = 6e4 (Tustin PID,
    float32): the response error the tool reports for each structure equals the error of its
    stored coefficients evaluated in 40-digit arithmetic (mpmath), and sections beat the direct
    form by 10x, the delta form beats sections by 100x."""
    real = _real("2*(1+1/(1.0*s)+0.1*s/(0.01*s+1))", 1e4)
    f = log_grid(0.01, 100, 30)
    res = {
        s: analyze(real.roots, s, "float32", f, b=real.b, a=real.a, output_level=10, input_resolution=0.01)
        for s in STRUCTURES
    }
    for s in ("sections", "delta"):
        assert res[s].gain_error_db == pytest.approx(_mp_gain_error_db(res[s], real, f), rel=1e-3, abs=1e-9)
    assert res["sections"].gain_error_db < res["direct1"].gain_error_db / 5
    assert res["delta"].gain_error_db < res["sections"].gain_error_db / 100
    best, why = recommend(list(res.values()))
    assert best == "delta" and "dB" in why


def test_integrator_stall_float32_hand_derived():
    """Hand derivation: a pure integrator y[n] = y[n-1] + b0 e[n] in float32 held at U = 10
    moves only when b0·e exceeds half an ulp of 10 (2^-21 / 2 ... ulp(10) = 2^-20): the smallest
    moving error is ulp(10)/2/b0 (IEEE 754 round to nearest; common practice)."""
    fs = 1000.0
    real = _real("0.5/s", fs, "backward-euler")
    b0 = real.b[0]
    x = analyze(
        real.roots,
        "direct1",
        "float32",
        log_grid(0.01, 100, 20),
        b=real.b,
        a=real.a,
        output_level=10.0,
        input_range=1.0,
    )
    want = np.spacing(np.float32(9.99)) / 2 / np.float32(b0)
    assert x.stall_error == pytest.approx(float(want), rel=0.08)


def test_limit_cycle_within_deadband_bound():
    """From memory (the effective-value model of rounding limit cycles in a second-order
    section, Jackson): with zero input the output is left within 0.5 / (1 − a2) LSB (oscillating
    cycles), 0.5 / |1 + a1 + a2| (constant) or 0.5 / |1 − a1 + a2| (alternating), and a rounding
    section with poles close to the circle does sustain a nonzero cycle."""
    real = _real("1/((s/50)^2+0.05*s/50+1)", 2000)
    x = analyze(real.roots, "sections", "q15", log_grid(0.1, 500, 20), input_range=1.0)
    a = x.realized.sections[0].a
    bound = max(0.5 / (1 - a[2]), 0.5 / abs(1 + a[1] + a[2]), 0.5 / abs(1 - a[1] + a[2]))
    assert 0 < x.limit_cycle_lsb <= math.ceil(bound)


def test_fixed_step_and_run_are_the_same_arithmetic():
    """Self-consistency of the two code paths of the fixed-point model (the C test checks the
    model itself against compiled code)."""
    real = _real(LEADLAG_PI, 1000)
    lay = build_layout("sections", real.roots)
    for fmt in ("q15", "q31"):
        r = realize(lay, FORMATS[fmt], input_range=1.0, output_level=50.0)
        words = np.random.default_rng(5).integers(-30000, 30000, size=2000)
        m = r.model()
        a = m.run_int(words)
        m.reset()
        b = [m.step_int(int(v)) for v in words]
        assert list(a) == b


def test_fixed_model_tracks_float64_within_lsb_bound():
    """Q31 sections against scipy.signal.sosfilt (float64) for a stable controller: the
    difference stays within a few output LSB times the noise gain (rounding noise only)."""
    from scipy.signal import lfilter

    real = _real("(0.2s+1)/(0.02s+1)/((s/30)^2+0.8*s/30+1)", 1000)
    lay = build_layout("sections", real.roots)
    r = realize(lay, FORMATS["q31"], input_range=1.0)
    x = 0.5 * np.sin(np.arange(3000) * 0.01)
    y = r.model().run(x)
    ref = lfilter(real.b, real.a, x)
    lsb = r.node_scales[-1] / 2**31
    assert np.max(np.abs(y - ref)) < 1000 * lsb


def test_unstable_float32_direct_form_is_a_failure():
    """Our own fifth-order card controller at 5 Hz (the issue's symptom): float32 direct form
    puts a pole outside the unit circle; the analysis fails it and recommends a stable structure."""
    real = _real("3*(1+1/(20*s))*(1+s/0.5)/(1+s/5)/((s/0.8)^2+s/0.8/0.7+1)/(1+s/0.3)", 5)
    f = log_grid(0.001, 2, 40)
    d = analyze(real.roots, "direct1", "float32", f, b=real.b, a=real.a, output_level=10.0)
    assert not d.ok and d.max_pole_radius > 1 and "unstable" in d.failures[0]
    a32 = np.asarray(real.a, dtype=np.float32).astype(float)
    assert max(abs(np.roots(a32))) > 1  # numpy agrees: the stored polynomial is unstable
    best, _ = recommend(
        [analyze(real.roots, s, "float32", f, b=real.b, a=real.a, output_level=10.0) for s in STRUCTURES]
    )
    assert best in ("sections", "delta")


def test_fixed_point_needs_input_range():
    from convert.errors import InputError

    real = _real("(0.2s+1)/(0.02s+1)", 1000)
    with pytest.raises(InputError, match="input range"):
        realize(build_layout("sections", real.roots), FORMATS["q15"])


def test_integrator_drift_from_rounding_is_a_failure():
    """From memory (the effective-value argument): a fixed-point section holding an integrator and a
    pole p near 1, with rounding, keeps its output moving with zero input at up to 0.5 / (1 − p)
    LSB per sample — a ramp to the limit. The direct form of a PI with a derivative filter in Q15
    shows it and fails; the sections structure runs the integrator alone and does not."""
    real = _real("0.8*(1 + 1/(2.5*s))*(1/(0.05*s+1))", 1000)
    f = log_grid(0.01, 100, 20)
    d = analyze(real.roots, "direct1", "q31", f, b=real.b, a=real.a, input_range=50, output_level=60)
    p = min(abs(q) for q in real.roots.poles)
    drift = [x for x in d.failures if "drift" in x]
    assert drift and f"by {math.floor(0.5 / (1 - p))} LSB" in drift[0]
    s = analyze(real.roots, "sections", "q31", f, input_range=50, output_level=60)
    assert s.ok, s.failures


def test_stall_figure_does_not_depend_on_the_window(monkeypatch):
    """The stall figure is a property of the arithmetic, not of the test window: a window four
    times longer gives the same smallest moving error (within 10 %: the bisection stops at 5 %)
    for a float32 PID in every structure."""
    import convert.digital.quantized as q

    real = _real("2*(1+1/(1.0*s)+0.1*s/(0.01*s+1))", 2000)
    f = log_grid(0.01, 100, 20)
    runs = {s: analyze(real.roots, s, "float32", f, b=real.b, a=real.a, output_level=10) for s in STRUCTURES}
    # a stored realization that is unstable (here the direct forms: float32 puts the integrator at
    # |z| = 1 + 1.2e-6, numpy.roots of the stored a agrees) has no stall figure: it fails on its poles
    first = {s: x.stall_error for s, x in runs.items() if not x.unstable_poles}
    for s, x in runs.items():
        if x.unstable_poles:
            assert x.stall_error is None and any(m.startswith("unstable") for m in x.failures), s
    assert set(first) >= {"sections", "delta"}
    monkeypatch.setattr(q, "STALL_TO", 256)
    for s, v in first.items():
        again = analyze(real.roots, s, "float32", f, b=real.b, a=real.a, output_level=10).stall_error
        assert again == pytest.approx(v, rel=0.1), s


def test_pid_stall_in_sections_hand_derived():
    """Hand derivation: in the sections structure the integrator runs alone, so at U = 10 its
    float32 state moves only when the increment R·e (R = kp·T/Ti = 2·1e-4, the output's rise
    per sample per unit error) exceeds half an ulp of 10 (just below 10: 2^-20): e = ulp/2/R
    (IEEE 754 round to nearest; common practice)."""
    real = _real("2*(1+1/(1.0*s)+0.1*s/(0.01*s+1))", 1e4)
    x = analyze(real.roots, "sections", "float32", log_grid(0.01, 100, 20), output_level=10)
    want = float(np.spacing(np.float32(9.99))) / 2 / 2e-4
    assert x.stall_error == pytest.approx(want, rel=0.08)
