"""Partial fractions over distinct poles (convert.polyroots.partial_fractions) against
scipy.signal.residue (reference library), and the expansion summed back against the rational
function itself; the plant-log replay's rule for repeated poles (scipy.signal.residue's default
grouping distance, kept)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.signal import residue

from convert.controller import from_expression
from convert.errors import UnrealizableError
from convert.evidence.log import REPEATED_POLE_S, AnalogReplay
from convert.polyroots import closest_roots, partial_fractions


def _random_case(rng):
    """A real denominator with distinct poles (real ones and pairs, spread over 1e-2..1e3 rad/s,
    an integrator sometimes) and a numerator of lower, equal or higher degree."""
    n = int(rng.integers(1, 7))
    poles: list[complex] = []
    while len(poles) < n:
        mag = 10 ** rng.uniform(-2, 3)
        if len(poles) + 2 <= n and rng.random() < 0.4:
            p = mag * np.exp(1j * rng.uniform(np.pi / 2 + 0.05, np.pi - 0.05))
            poles += [p, np.conj(p)]
        else:
            poles.append(0.0 if rng.random() < 0.15 and 0.0 not in poles else -mag)
    den = np.real(np.poly(poles)) * rng.uniform(0.5, 3.0)
    m = int(rng.integers(0, n + 2))
    num = rng.standard_normal(m + 1)
    return num, den


def _match(p_ref, p):
    """Index into p of the pole nearest each reference pole."""
    return [int(np.argmin(np.abs(p - q))) for q in p_ref]


def test_against_scipy_residue():
    """200 random real rational functions with distinct poles: the same poles (within 1e-12 of
    their size, sorted by magnitude), residues within 1e-9 of the largest residue and the same
    direct polynomial k as scipy.signal.residue (whose residues, from an expanded polynomial,
    carry its own rounding)."""
    rng = np.random.default_rng(7)
    checked = 0
    for _ in range(200):
        num, den = _random_case(rng)
        p_ref = np.roots(den)
        if closest_roots(p_ref) <= 1e-3 * max(1.0, float(np.max(np.abs(p_ref)))):
            continue  # scipy groups these as one repeated pole
        r_ref, p_ref, k_ref = residue(num, den)
        r, p, k = partial_fractions(num, den)
        assert np.all(np.diff(np.abs(p)) >= 0)
        idx = _match(p_ref, p)
        assert sorted(idx) == list(range(p.size))
        assert np.allclose(p[idx], p_ref, rtol=1e-12, atol=1e-12)
        scale = float(np.max(np.abs(r_ref)))
        assert np.max(np.abs(r[idx] - r_ref)) <= 1e-9 * scale
        assert len(k) == len(k_ref) and np.allclose(
            k, k_ref, rtol=1e-12, atol=1e-12 * max(1.0, float(np.max(np.abs(k_ref))) if len(k_ref) else 1.0)
        )
        checked += 1
    assert checked >= 150


def test_expansion_sums_back_to_the_function():
    """Σ r_i/(s − p_i) + k(s) equals num(s)/den(s) at points on the imaginary axis away from the
    poles, within 1e-9 of |num/den| + Σ|r_i/(s − p_i)| (the sum's own rounding) — common practice,
    independent of scipy."""
    rng = np.random.default_rng(8)
    for _ in range(100):
        num, den = _random_case(rng)
        r, p, k = partial_fractions(num, den)
        s = 1j * np.geomspace(1e-3, 1e4, 50)
        terms = r[None, :] / (s[:, None] - p[None, :])
        direct = np.polyval(k, s) if len(k) else 0.0
        total = terms.sum(axis=1) + direct
        f = np.polyval(num, s) / np.polyval(den, s)
        bound = 1e-9 * (np.abs(f) + np.abs(terms).sum(axis=1) + np.abs(direct))
        assert np.all(np.abs(total - f) <= bound)


def test_edge_forms():
    """A zero numerator, a constant denominator, leading zeros, a complex pair: as
    scipy.signal.residue gives them; a zero denominator is refused."""
    r, p, k = partial_fractions([0.0], [1.0, 3.0, 2.0])
    assert np.all(r == 0) and np.allclose(sorted(p.real), [-2, -1]) and k.size == 0
    r, p, k = partial_fractions([2.0, 1.0], [4.0])
    assert r.size == 0 and p.size == 0 and np.allclose(k, [0.5, 0.25])
    r, p, k = partial_fractions([0.0, 0.0, 1.0, 1.0], [0.0, 1.0, 0.0, 4.0])
    r_ref, p_ref, _ = residue([1.0, 1.0], [1.0, 0.0, 4.0])
    idx = _match(p_ref, p)
    assert np.allclose(r[idx], r_ref) and k.size == 0
    with pytest.raises(ValueError, match="denominator"):
        partial_fractions([1.0], [0.0, 0.0])


@pytest.mark.parametrize(
    "expr, refused",
    [
        ("1/((s+1)*(s+1.0005))", True),  # 5e-4 rad/s apart: one repeated pole, as scipy groups them
        ("1/((s+1)*(s+1.01))", False),
        ("(s+2)/(s*(s+0.0002))", True),
        ("(s+2)/(s*(s+0.5))", False),
    ],
)
def test_replay_refuses_poles_scipy_counted_as_repeated(expr, refused):
    """The analog replay refuses a controller whose poles are within REPEATED_POLE_S (1e-3 rad/s,
    scipy.signal.residue's default grouping distance) as a repeated pole, as it did when it called
    scipy; poles further apart replay."""
    assert REPEATED_POLE_S == 1e-3
    ctrl = from_expression(expr)
    if refused:
        with pytest.raises(UnrealizableError, match="repeated pole"):
            AnalogReplay(ctrl)
    else:
        AnalogReplay(ctrl)
