"""Loop margins against python-control's own margin tests (``control/tests/margin_test.py`` in
the python-control repository), ported case by case with the expected values and tolerances
written there; the SISO cases only (the MIMO and disk-margin tests have no counterpart here).

python-control's figures map to ours as: gm = 10^(gain_margin_db/20), pm = phase_margin_deg,
sm = 1/ms (the smallest |1 + L|), wg = 2π·phase_crossover_hz, wp = 2π·crossover_hz,
ws = 2π·sensitivity_peak_hz (rad/s there, Hz here). ``inf`` margins there (no crossing) are
``None`` figures here; sm = inf there (|1 + L| has no interior minimum) is a
``sensitivity_peak_note`` here. Our figures are refined by a scalar search, so the
tolerances below are python-control's own, unchanged.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from convert.compare.loop import loop_margins
from convert.controller import Controller

UNIT = Controller.analog([1.0], [1.0])


def _tf(sys):
    return Controller.from_control(sys)


def _ours(loop: Controller):
    m = loop_margins(loop, UNIT, 0.0, hold="none")
    gm = math.inf if m.gain_margin_db is None else 10 ** (m.gain_margin_db / 20)
    pm = math.inf if m.phase_margin_deg is None else m.phase_margin_deg
    wg = math.nan if m.phase_crossover_hz is None else 2 * math.pi * m.phase_crossover_hz
    wp = math.nan if m.crossover_hz is None else 2 * math.pi * m.crossover_hz
    if m.sensitivity_peak_note:
        sm, ws = math.inf, math.nan
    else:
        sm, ws = 1 / m.ms, 2 * math.pi * m.sensitivity_peak_hz
    return gm, pm, sm, wg, wp, ws


def _systems():
    import control

    s = control.TransferFunction.s
    return {
        # the `tsys` fixture: (system, stability_margins(sys)) = (gm, pm, sm, wg, wp, ws)
        "tsys-1": (control.tf([1, 2], [1, 2, 3]), (math.inf, math.inf, math.inf, math.nan, math.nan, math.nan)),
        "tsys-2": (control.tf([1], [1, 2, 3, 4]), (2.0, math.inf, 0.4170, 1.7321, math.nan, 1.6620)),
        "tsys-3-statespace": (
            control.ss2tf(control.ss([[1.0, 4.0], [3.0, 2.0]], [[1.0], [-4.0]], [[1.0, 0.0]], [[0.0]])),
            (math.inf, 147.0743, math.inf, math.nan, 2.5483, math.nan),
        ),
        "tsys-4": (
            (8.75 * (4 * s**2 + 0.4 * s + 1))
            / ((100 * s + 1) * (s**2 + 0.22 * s + 1))
            / (s**2 / 10.0**2 + 2 * 0.04 * s / 10.0 + 1),
            (2.2716, 97.5941, 0.5591, 10.0053, 0.0850, 9.9918),
        ),
        "tsys-5-no-crossings": (1 / (1 + s), (math.inf, math.inf, math.inf, math.nan, math.nan, math.nan)),
        "tsys-6-no-crossings": (3 * (10 + s) / (2 + s), (math.inf, math.inf, math.inf, math.nan, math.nan, math.nan)),
        "tsys-7-no-phase-crossing": (
            0.01 * (10 - s) / (2 + s) / (1 + s),
            (300.0, math.inf, 0.9917, 5.6569, math.nan, 2.3171),
        ),
    }


TSYS = [
    "tsys-1",
    "tsys-2",
    "tsys-3-statespace",
    "tsys-4",
    "tsys-5-no-crossings",
    "tsys-6-no-crossings",
    "tsys-7-no-phase-crossing",
]


@pytest.mark.parametrize("name", TSYS)
def test_margin_sys(name):
    """python-control ``test_margin_sys``: margin(sys) = (gm, pm, wg, wp) within atol 1.5e-3."""
    sys, ref = _systems()[name]
    out = _ours(_tf(sys))
    np.testing.assert_allclose(np.array(out)[[0, 1, 3, 4]], np.array(ref)[[0, 1, 3, 4]], atol=1.5e-3)


@pytest.mark.parametrize("name", TSYS)
def test_stability_margins(name):
    """python-control ``test_stability_margins``: all six figures within atol 1.5e-2 (sm = inf
    where |1 + L| has no interior minimum)."""
    sys, ref = _systems()[name]
    np.testing.assert_allclose(_ours(_tf(sys)), ref, atol=1.5e-2)


def _zmore():
    import control

    s = control.TransferFunction.s
    ex21 = (
        0.002
        * (s + 0.02)
        * (s + 0.05)
        * (s + 5)
        * (s + 10)
        / ((s - 0.0005) * (s + 0.0001) * (s + 0.01) * (s + 0.2) * (s + 1) * (s + 100) ** 2)
    )
    return {
        "typem1": s / (s + 1),
        "type0": 1 / (s + 1) ** 3,
        "type1": (s + 0.1) / s / (s + 1),
        "type2": (s + 0.1) / s**2 / (s + 1),
        "type3": (s + 0.1) * (s + 0.1) / s**3 / (s + 1),
        "example21": ex21,
    }


INF, NAN = math.inf, math.nan


@pytest.mark.parametrize(
    "sysname,k,atol,result",
    [
        ("typem1", 2.0, 1.5e-3, (INF, -120.0007, NAN, 0.5774)),
        ("type0", 0.8, 1.5e-3, (10.0014, INF, 1.7322, NAN)),
        ("type0", 2.0, 1e-2, (4.000, 67.6058, 1.7322, 0.7663)),
        ("type1", 1.0, 1e-4, (INF, 144.9032, NAN, 0.3162)),
        ("type2", 1.0, 1e-4, (INF, 44.4594, NAN, 0.7907)),
        ("type3", 1.0, 1.5e-3, (0.0626, 37.1748, 0.1119, 0.7951)),
        ("example21", 1.0, 1e-2, (0.0100, -14.5640, 0, 0.0022)),  # L(0) = -100: gain margin 0.01 at zero frequency
        ("example21", 1000.0, 1e-2, (0.1793, 22.5215, 0.0243, 0.0630)),
        ("example21", 5000.0, 1.5e-3, (4.5596, 21.2101, 0.4385, 0.1868)),
    ],
)
def test_zmore_margin(sysname, k, atol, result):
    """python-control ``test_zmore_margin`` (systems from its ``tsys_zmoresystems`` fixture, which
    credits Bavafi-Toosi, "A note on the gain and phase margin concepts", J. Control Syst. Eng.,
    2015): margin(sys·K) = (gm, pm, wg, wp) within the atol given per case."""
    loop = _tf(_zmore()[sysname] * k)
    np.testing.assert_allclose(np.array(_ours(loop))[[0, 1, 3, 4]], result, atol=atol)


@pytest.mark.parametrize(
    "cnum,cden,dt,ref,rtol",
    [
        ([2], [1, 3, 2, 0], 1e-2, [2.955761, 32.398492, 0.429535, 1.403725, 0.749367, 0.923898], 1e-5),  # gh-465
        ([2], [1, 3, 3, 1], 0.1, [3.4927, 65.4212, 0.5763, 1.6283, 0.76625, 1.2019], 1e-4),
        (
            [1.1 * 4 * np.pi**2],
            [1, 2 * 0.2 * 2 * np.pi, 4 * np.pi**2],
            0.05,
            [2.3842, 18.161, 0.26953, 11.712, 8.7478, 9.1504],
            1e-4,
        ),  # gh-523 a
        (
            [5e4],
            [1.0, 101.0, 10101.0, 10100.0, 10000.0],
            1e-3,
            [18.8766, 26.3564, 0.406841, 9.76358, 2.32933, 2.55986],
            1e-5,
        ),  # gh-523 b
    ],
)
def test_stability_margins_discrete(cnum, cden, dt, ref, rtol):
    """python-control ``test_stability_margins_discrete``: L(z) = TransferFunction(num, den)
    sampled with zoh at dt (python-control's ``sample``), all six figures within rtol; ours reads
    the loop as a digital controller with no hold added (hold="none")."""
    import control

    loop = _tf(control.TransferFunction(cnum, cden).sample(dt))
    np.testing.assert_allclose(_ours(loop), ref, rtol=rtol)


def test_zero_frequency_crossing_is_counted():
    """The issue's example (python-control's example21): L(0) = −100, so the gain margin is
    0.01 (−40 dB) at zero frequency, not the +45 dB of the next crossing."""
    m = loop_margins(_tf(_zmore()["example21"]), UNIT, 0.0, hold="none")
    assert m.phase_crossover_hz == 0.0
    assert m.gain_margin_db == pytest.approx(-40.0, abs=1e-9)


def test_crossings_refined_to_1e6_relative():
    """Closed forms: L = 2/(s+1)^3 has its phase crossover at ω = √3 (gain margin 4 = 12.04 dB)
    and its gain crossover where (ω² + 1)^3 = 4, ω = √(4^{1/3} − 1); a coarse grid of 20 points
    per decade still gives them to 1e-6 relative after the scalar search."""
    from convert.controller import from_expression

    loop = from_expression("2/(s+1)^3")
    f = np.logspace(-3, 2, 101)
    m = loop_margins(loop, UNIT, 0.0, f_hz=f)
    assert 2 * math.pi * m.phase_crossover_hz == pytest.approx(math.sqrt(3), rel=1e-6)
    assert m.gain_margin_db == pytest.approx(20 * math.log10(4), rel=1e-6)
    assert 2 * math.pi * m.crossover_hz == pytest.approx(math.sqrt(4 ** (1 / 3) - 1), rel=1e-6)


def test_sensitivity_peak_refined_to_1e6_relative():
    """Reference: the minimum of |1 + L(jω)| for L = 2/(s+1)^3 found by scipy's bounded Brent
    search on a dense bracket (an independent evaluation of L); ours starts from a coarse grid."""
    from scipy.optimize import minimize_scalar

    from convert.controller import from_expression

    m = loop_margins(from_expression("2/(s+1)^3"), UNIT, 0.0, f_hz=np.logspace(-3, 2, 101))
    res = minimize_scalar(
        lambda w: abs(1 + 2 / (1j * w + 1) ** 3), bounds=(0.5, 3.0), method="bounded", options={"xatol": 1e-12}
    )
    assert 2 * math.pi * m.sensitivity_peak_hz == pytest.approx(res.x, rel=1e-6)
    assert m.ms == pytest.approx(1 / res.fun, rel=1e-9)


def test_no_interior_sensitivity_peak_is_said():
    """1/(1+s) (python-control: sm = inf): |1 + L| falls from 2 toward 1, so |S| rises toward
    high frequency with no interior peak; the figure is its limit 1 (0 dB), said in words."""
    m = loop_margins(_tf(_systems()["tsys-5-no-crossings"][0]), UNIT, 0.0, hold="none")
    assert m.sensitivity_peak_hz is None and "no interior peak" in m.sensitivity_peak_note
    assert m.ms == pytest.approx(1.0)


@pytest.mark.parametrize(
    "ctrl, plant, fs, dead, delay_samples",
    [
        ("1.5*(1 + 1/(0.2s))", "10/(0.5s+1)", 50.0, 0.0, 1),  # the fourth reviewer's loop
        ("2*(1 + 1/(3s))", "1/((5s+1)*(s+1))", 5.0, 0.4, 1),  # dead time of two samples
        ("0.8*(0.3s+1)/(0.03s+1)", "20/(s*(0.1s+1))", 100.0, 0.0, 0),
    ],
)
def test_digital_loop_margins_are_the_sampled_loops(ctrl, plant, fs, dead, delay_samples):
    """A digital controller's margins are those of the sampled loop as it runs: python-control's
    ``stability_margins`` of C(z)·P_zoh(z)·z^-d (plant sampled with zoh by ``sample_system``, the
    dead time and computation delay as whole samples). Before, a continuous approximation (the
    hold's sinc and half-period delay) gave 4.90 dB where the sampled loop has 4.13 dB."""
    import control

    from convert.controller import from_expression
    from convert.digital import discretize
    from convert.compare.loop import loop_margins

    t = 1 / fs
    c = discretize(from_expression(ctrl), fs, "tustin")
    c = getattr(c, "controller", c)
    m = loop_margins(c, from_expression(plant), dead, delay_s=delay_samples * t)
    cz = control.tf(list(c.num), list(c.den), t)
    pz = control.sample_system(_tf_of(from_expression(plant)), t, method="zoh")
    d = int(round((dead + delay_samples * t) / t))
    loop = cz * pz * control.tf([1], [1] + [0] * d, t) if d else cz * pz
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)  # python-control may note it checks the poly method on a grid
        gm, pm, sm, _, wgc, _ = control.stability_margins(loop)
    if math.isfinite(gm):
        assert m.gain_margin_db == pytest.approx(20 * math.log10(gm), rel=1e-6)
    assert m.phase_margin_deg == pytest.approx(pm, rel=1e-6)
    assert 2 * math.pi * m.crossover_hz == pytest.approx(wgc, rel=1e-6)
    assert m.sensitivity_peak_db == pytest.approx(-20 * math.log10(sm), rel=1e-5)


def _tf_of(c):
    import control

    return control.tf(list(c.num), list(c.den))
