"""The canonical controller (convert.controller) against python-control and scipy."""

from __future__ import annotations

import os

import numpy as np
import pytest
from hypothesis import assume, given, settings
from hypothesis import strategies as st

from convert.controller import Controller, from_expression
from convert.errors import InputError

EXAMPLES = int(os.environ.get("LOOPSHIFT_FUZZ_EXAMPLES", "50"))


# Stable, distinct real roots spread over a few decades keep the root finding well conditioned
# (a repeated root moves by about eps^(1/multiplicity) under rounding, in any library).
def _separated(values):
    values = sorted(values)
    return all(b / a < 0.95 for a, b in zip(values, values[1:]))


roots = st.lists(st.floats(min_value=-100.0, max_value=-0.01), min_size=0, max_size=3).filter(_separated)


def _sorted(values):
    values = np.asarray(values, dtype=complex)
    return values[np.lexsort((values.imag, values.real))]


@given(roots, roots, st.floats(min_value=0.1, max_value=100.0), st.sampled_from([None, 0.01]))
@settings(max_examples=EXAMPLES, deadline=None)
def test_round_trip_through_python_control(zeros, poles, k, dt):
    """to_control() then from_control() gives the same controller; poles, zeros and DC gain
    agree with python-control's poles(), zeros() and dcgain() (reference library)."""
    import control

    if dt:
        zeros = [np.exp(z * dt) for z in zeros]
        poles = [np.exp(p * dt) for p in poles]
    c = Controller.from_zpk(zeros, poles, k, "digital" if dt else "analog", dt)
    sys = c.to_control()
    assert sys.dt == (dt or 0)
    back = Controller.from_control(sys)
    np.testing.assert_allclose(back.num, c.num, rtol=1e-12)
    np.testing.assert_allclose(back.den, c.den, rtol=1e-12)
    assert back.domain == c.domain and back.sample_period_s == c.sample_period_s
    np.testing.assert_allclose(_sorted(c.poles()), _sorted(control.poles(sys)), rtol=1e-6, atol=1e-9)
    np.testing.assert_allclose(_sorted(c.zeros()), _sorted(control.zeros(sys)), rtol=1e-6, atol=1e-9)
    np.testing.assert_allclose(c.dc_gain(), float(np.real(control.dcgain(sys))), rtol=1e-9)


@given(
    st.lists(
        st.one_of(st.just(0.0), st.floats(min_value=1e-3, max_value=10), st.floats(min_value=-10, max_value=-1e-3)),
        min_size=1,
        max_size=4,
    ),
    st.lists(st.floats(min_value=0.1, max_value=10), min_size=1, max_size=4),
)
@settings(max_examples=EXAMPLES, deadline=None)
def test_frequency_response_matches_python_control(num, den):
    """C(j·2πf) equals python-control's evaluation of the same TransferFunction at s = j·2πf,
    and via="zpk" agrees with via="poly" (reference library)."""
    assume(any(abs(x) > 1e-3 for x in num))
    c = Controller.analog(num, den)
    sys = c.to_control()
    f = np.logspace(-2, 2, 15)
    expected = np.array([complex(sys(1j * 2 * np.pi * fi)) for fi in f])
    np.testing.assert_allclose(c.frequency_response(f), expected, rtol=1e-9, atol=1e-12)


def test_digital_response_matches_scipy_freqz():
    """A digital controller's response equals scipy.signal.freqz(b, a, fs) (reference library)."""
    from scipy.signal import freqz

    b, a, fs = [0.5, -0.45], [1.0, -1.0], 1000.0
    c = Controller.from_b_a(b, a, 1 / fs)
    f = np.logspace(-1, np.log10(499), 25)
    _, h = freqz(b, a, worN=f, fs=fs)
    np.testing.assert_allclose(c.frequency_response(f), h, rtol=1e-12)
    np.testing.assert_allclose(c.frequency_response(f, via="zpk"), h, rtol=1e-9)
    assert c.integrator_count() == 1 and c.dc_gain() is None


def test_integrating_controller_has_no_dc_gain():
    """A PI has one integrator and infinite DC gain; python-control agrees (dcgain is inf)."""
    c = from_expression("2*(1 + 1/(30*s))")
    assert c.integrator_count() == 1
    assert c.dc_gain() is None
    assert np.isinf(np.abs(c.to_control().dcgain()))


def test_corner_frequencies_in_hz():
    """(s + 2π)/(s + 20π) has its zero at 1 Hz and its pole at 10 Hz (corner = |root|/2π,
    common practice)."""
    c = from_expression("(s + 2*3.141592653589793)/(s + 20*3.141592653589793)")
    corners = c.corner_frequencies_hz()
    assert corners["zeros"] == pytest.approx([1.0], rel=1e-12)
    assert corners["poles"] == pytest.approx([10.0], rel=1e-12)


def test_properness():
    """A PID without a filter is improper by one; with a filter it is biproper (common practice)."""
    assert from_expression("2 + 1/s + 3s").relative_degree == -1
    assert not from_expression("2 + 1/s + 3s").is_proper
    filtered = from_expression("2 + 1/s + 3s/(0.1s+1)")
    assert filtered.is_proper and not filtered.is_strictly_proper


def test_b_a_padding_convention():
    """b/a are ascending powers of z^-1 with a[0] = 1 (the firmware convention, as in
    scipy.signal.lfilter); a strictly proper z-expression gets a leading zero in b."""
    c = from_expression("0.5/(z - 0.5)", fs_hz=10.0)
    assert c.b == (0.0, 0.5)
    assert c.a == (1.0, -0.5)


@pytest.mark.parametrize(
    "build, fragment",
    [
        (lambda: Controller.analog([1.0], [0.0]), "identically zero"),
        (lambda: Controller.analog([float("nan")], [1.0]), "finite"),
        (lambda: Controller.digital([1.0], [1.0], 0.0), "positive sample period"),
        (lambda: Controller(tuple([1.0]), tuple([1.0]), "analog", 0.1), "no sample period"),
        (lambda: Controller.from_b_a([1.0], [0.0, 1.0], 0.1), "a[0]"),
    ],
)
def test_bad_construction_is_an_input_error(build, fragment):
    """Malformed coefficients or periods are refused with one line (common practice)."""
    with pytest.raises(InputError) as info:
        build()
    assert fragment in str(info.value)


def test_unspecified_sample_period_refused():
    """python-control's dt=True (unspecified period) is refused: the period matters."""
    import control

    with pytest.raises(InputError, match="unspecified sample period"):
        Controller.from_control(control.tf([1], [1, -0.5], True))


def test_expression_text_reads_back():
    """Controller.expression() is text the grammar reads back to the same coefficients."""
    c = Controller.analog([0.5, 3.0, 1.0], [1.0, 0.25, 0.0])
    back = from_expression(c.expression(digits=17))
    np.testing.assert_allclose(back.num, c.num, rtol=1e-15)
    np.testing.assert_allclose(back.den, c.den, rtol=1e-15)
