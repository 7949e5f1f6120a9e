"""numpy-only small-matrix linear algebra against scipy.linalg (the reference library the report
no longer imports) and a 50-digit mpmath reference: the matrix exponential
(``scipy.linalg.expm``, ``mpmath.expm``), diagonal balancing (``scipy.linalg.matrix_balance``
with ``permute=False``, LAPACK xGEBAL job 'S') and the transmission zeros of a SISO system (the
generalized eigenvalues of its system pencil, ``scipy.linalg.eig``, the method used before)."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg as sla

from convert.digital import smallmatrix
from convert.digital import statespace as ss


def _random_matrices(seed: int = 20261202):
    """(kind, A, κ) with κ the condition number of the similarity that built A (1 if none):
    random with norms 1e-6..1e2, ill-scaled (D⁻¹AD, D spanning 1e-4..1e4), stiff and stable
    (eigenvalues −1e-3..−1e6), triangular, nilpotent (norms up to 1e6), defective (Jordan
    blocks), and the block matrix a zero-order hold exponentiates."""
    rng = np.random.default_rng(seed)
    out = []
    for trial in range(600):
        n = int(rng.integers(2, 9))
        kind = trial % 7
        a = rng.standard_normal((n, n))
        kappa = 1.0
        if kind == 0:
            a *= 10 ** rng.uniform(-6, 2)
        elif kind == 1:
            d = 10 ** rng.uniform(-4, 4, n)
            a = (a * d[None, :]) / d[:, None] * 10 ** rng.uniform(-2, 1)
        elif kind == 2:
            q, _ = np.linalg.qr(rng.standard_normal((n, n)))
            p = q @ (np.eye(n) + np.triu(rng.standard_normal((n, n)), 1) * 0.3)
            a = p @ np.diag(-(10 ** rng.uniform(-3, 6, n))) @ np.linalg.inv(p)
            kappa = np.linalg.cond(p)
        elif kind == 3:
            a = np.triu(a) if trial % 2 else np.tril(a)
            a = a * 10 ** rng.uniform(-3, 2)
            np.fill_diagonal(a, -np.abs(np.diag(a)) * 10 ** rng.uniform(0, 3))
        elif kind == 4:
            a = np.triu(a, 1) * 10 ** rng.uniform(-3, 6 / n)
        elif kind == 5:
            j = np.diag(np.full(n, -rng.uniform(0.1, 50))) + np.diag(np.ones(n - 1), 1)
            p = rng.standard_normal((n, n))
            a = p @ j @ np.linalg.inv(p)
            kappa = np.linalg.cond(p)
        else:
            poles = -(10 ** rng.uniform(-1, 4, n))
            ac, bc, _, _ = ss.realize([1.0], np.poly(poles))
            t = 10 ** rng.uniform(-4, -1)
            a = np.zeros((n + 1, n + 1))
            a[:n, :n] = ac * t
            a[:n, n:] = bc * t
        out.append((kind, a, kappa))
    return out


_MATRICES = _random_matrices()


def test_expm_matches_scipy_on_random_illscaled_stiff_defective_nilpotent():
    """scipy.linalg.expm (Al-Mohy & Higham 2009) is the reference: the difference is within the
    conditioning of e^A (about ‖A‖·u, times the condition of the similarity that built A)."""
    worst = 0.0
    for kind, a, kappa in _MATRICES:
        ref = sla.expm(a)
        ours = smallmatrix.expm(a)
        diff = np.linalg.norm(ours - ref, 1)
        allowed = 1e-13 * max(1.0, np.linalg.norm(a, 1)) * kappa * np.linalg.norm(ref, 1)
        assert diff <= allowed, (kind, a.shape, diff, allowed)
        worst = max(worst, diff / allowed if allowed else 0.0)
    assert worst > 0.0  # the two are different codes, not the same call


def test_expm_against_50_digit_reference():
    """mpmath.expm at 50 digits: the numpy expm is as accurate as scipy's, or within 1e-14
    relative where both are at rounding level."""
    mpmath = pytest.importorskip("mpmath")
    mpmath.mp.dps = 50
    for kind, a, _kappa in _MATRICES[::29]:
        exact = np.array(mpmath.expm(mpmath.matrix(a.tolist())).tolist(), dtype=float)
        scale = np.linalg.norm(exact, 1)
        ours = np.linalg.norm(smallmatrix.expm(a) - exact, 1) / scale
        theirs = np.linalg.norm(sla.expm(a) - exact, 1) / scale
        assert ours <= max(3 * theirs, 1e-14 * max(1.0, np.linalg.norm(a, 1))), (kind, ours, theirs)


def test_expm_closed_forms():
    """Closed forms (common practice): e^0 = I, e^{diag} = diag(e^d), a 2×2 Jordan block
    e^{[[λ,1],[0,λ]]} = e^λ [[1,1],[0,1]], a rotation generator gives cos/sin, a nilpotent
    shift gives the truncated series, and 1×1 / 0×0 shapes."""
    assert np.array_equal(smallmatrix.expm(np.zeros((3, 3))), np.eye(3))
    d = np.array([-3.0, 0.5, 2.0])
    assert np.allclose(smallmatrix.expm(np.diag(d)), np.diag(np.exp(d)), rtol=1e-15, atol=0)
    lam = -7.25
    jb = smallmatrix.expm(np.array([[lam, 1.0], [0.0, lam]]))
    assert np.allclose(jb, np.exp(lam) * np.array([[1.0, 1.0], [0.0, 1.0]]), rtol=1e-14, atol=0)
    th = 2.3
    rot = smallmatrix.expm(np.array([[0.0, -th], [th, 0.0]]))
    assert np.allclose(rot, [[np.cos(th), -np.sin(th)], [np.sin(th), np.cos(th)]], rtol=0, atol=1e-15)
    shift = np.diag(np.full(3, 1e3), 1)
    assert np.allclose(
        smallmatrix.expm(shift), np.eye(4) + shift + shift @ shift / 2 + shift @ shift @ shift / 6, rtol=1e-15
    )
    assert smallmatrix.expm(np.array([[2.0]]))[0, 0] == np.exp(2.0)
    assert smallmatrix.expm(np.zeros((0, 0))).shape == (0, 0)
    with pytest.raises(ValueError, match="square"):
        smallmatrix.expm(np.zeros((2, 3)))


def test_balance_is_lapack_gebal_scaling():
    """scipy.linalg.matrix_balance(permute=False) (LAPACK xGEBAL, job 'S') is the reference: the
    same powers of 2 and the same balanced matrix, on random, ill-scaled and sparse matrices
    (rows or columns that are zero off the diagonal are left alone)."""
    rng = np.random.default_rng(7)
    cases = [a for _, a, _ in _MATRICES]
    for _ in range(200):
        n = int(rng.integers(2, 9))
        a = rng.standard_normal((n, n)) * (rng.random((n, n)) < 0.5)
        d = 10 ** rng.uniform(-8, 8, n)
        cases.append((a * d[None, :]) / d[:, None])
    for a in cases:
        ref_b, ref_t = sla.matrix_balance(a, permute=False)
        b, t = smallmatrix.balance(a)
        assert np.array_equal(t, ref_t)
        assert np.array_equal(b, ref_b)
        scale = np.diag(t)
        assert np.array_equal(np.log2(scale), np.round(np.log2(scale)))  # powers of 2: exact
        assert np.array_equal(b, (a * scale[None, :]) / scale[:, None])


def _pencil_zeros(a, b, c, d, count):
    """The former method: the ``count`` most finite generalized eigenvalues of the system pencil
    [[A, B], [C, D]] − x·[[I, 0], [0, 0]] (scipy.linalg.eig)."""
    n = a.shape[0]
    m = np.block([[a, b], [c, np.array([[d]])]])
    nmat = np.zeros((n + 1, n + 1))
    nmat[:n, :n] = np.eye(n)
    alpha, beta = sla.eig(m, nmat, right=False, homogeneous_eigvals=True)
    score = np.abs(beta) / np.maximum(np.abs(alpha), 1e-300)
    order = np.argsort(-score)[:count]
    return alpha[order] / beta[order]


def _matched(ours, ref, rtol):
    ours, ref = list(np.sort_complex(ours)), list(ref)
    assert len(ours) == len(ref)
    for z in ours:
        k = int(np.argmin([abs(z - r) for r in ref]))
        assert abs(z - ref[k]) <= rtol * max(1.0, abs(ref[k])), (z, ref[k], ours, ref)
        ref.pop(k)


def _numerator_roots_50_digits(a, b, c, d, count):
    """The zeros as roots of N(x) = det([[xI − A, B], [−C, D]]) = det(xI − A)·G(x), a polynomial
    of degree ``count``: N sampled at count + 1 points, interpolated and solved by mpmath at 50
    digits (mpmath.det, mpmath.lu_solve, mpmath.polyroots: an independent reference)."""
    import mpmath

    mpmath.mp.dps = 50
    n = a.shape[0]
    m0 = np.block([[-a, b], [-c, np.array([[d]])]])
    xs = [mpmath.mpf(3) * mpmath.expj(2 * mpmath.pi * (k + 0.5) / (count + 1)) for k in range(count + 1)]
    vals = []
    for x in xs:
        m = mpmath.matrix(m0.tolist())
        for i in range(n):
            m[i, i] += x
        vals.append(mpmath.det(m))
    vander = mpmath.matrix([[x**j for j in range(count, -1, -1)] for x in xs])
    coeffs = mpmath.lu_solve(vander, mpmath.matrix(vals))
    roots = mpmath.polyroots([coeffs[j] for j in range(count + 1)], maxsteps=200, extraprec=200)
    return np.array([complex(r) for r in roots])


def test_transmission_zeros_on_sampled_systems():
    """Zero-order-hold and first-order-hold samplings of random analog controllers (distinct,
    separated roots; relative degree 0 and 1): the zeros agree with a 50-digit reference (roots
    of the interpolated numerator, mpmath) to 1e-12 relative, and with the pencil's generalized
    eigenvalues (scipy.linalg.eig, the former method) within 1e-12 plus the pencil's own error
    (the QZ zeros far outside the unit circle are off by up to 1e-7 in this set; ours are not)."""
    pytest.importorskip("mpmath")
    rng = np.random.default_rng(11)
    checked = 0
    for trial in range(120):
        n = int(rng.integers(1, 6))
        nz = int(rng.integers(0, n + 1))
        poles = -(10 ** rng.uniform(-1, 2, n)).astype(complex)
        zeros = -(10 ** rng.uniform(-1, 2, nz)) * rng.choice([-1, 1], nz)
        if n >= 2 and trial % 3 == 0:  # a lightly damped pair
            wn, zeta = 10 ** rng.uniform(0, 2), rng.uniform(0.05, 0.7)
            poles[:2] = [
                complex(-zeta * wn, wn * np.sqrt(1 - zeta**2)),
                complex(-zeta * wn, -wn * np.sqrt(1 - zeta**2)),
            ]
        gaps = np.abs(np.subtract.outer(np.r_[poles, zeros], np.r_[poles, zeros]))
        if np.min(gaps + np.eye(gaps.shape[0]) * 1e9) < 0.005 * max(1.0, np.abs(np.r_[poles, zeros]).max()):
            continue
        num = np.atleast_1d(np.real(np.poly(zeros))) * rng.uniform(0.5, 5)
        a, b, c, d = ss.realize(num, np.real(np.poly(poles)))
        t = 10 ** rng.uniform(-3, -1)
        if trial % 2:
            ad, bd = ss.zoh_matrices(a, b, t)
            dd = d
        else:
            ad, g1, g2 = ss.foh_matrices(a, b, t)
            bd = g1 - g2 + ad @ g2
            dd = float(d + (c @ g2)[0, 0])
        count = n if dd != 0.0 else n - 1
        ours = ss.transmission_zeros(ad, bd, c, dd, count)
        if count == 0:
            assert ours.size == 0
            continue
        exact = _numerator_roots_50_digits(ad, bd, c, dd, count)
        _matched(ours, exact, 1e-12)
        pencil = _pencil_zeros(ad, bd, c, dd, count)
        pencil_error = max(float(np.min(np.abs(pencil - z))) / max(1.0, abs(z)) for z in exact)
        _matched(ours, pencil, 1e-12 + 2 * pencil_error)
        checked += 1
    assert checked > 70


def test_transmission_zeros_closed_forms():
    """Independent closed forms (common practice): a companion realization of
    (z − 0.5)(z + 2)/z² (all poles at 0: a nilpotent A) has its zeros at 0.5 and −2; of
    2(z − 0.3)(z² + 0.2z + 0.5)/((z − 0.9)(z − 0.1)(z + 0.4)) (direct term 2) at 0.3 and
    −0.1 ± j·0.7; of (z + 1)/((z − 0.5)(z − 0.2)) (relative degree 1) at −1; a system whose
    only zero lies where the first pivot point would be still gives it."""

    def companion(num, den):
        den = np.asarray(den, float)
        num = np.concatenate([np.zeros(len(den) - len(num)), np.asarray(num, float)])
        return ss._section(num / den[0], den / den[0])

    a, b, c, d = companion(np.poly([0.5, -2.0]), [1.0, 0.0, 0.0])
    _matched(ss.transmission_zeros(a, b, c, d, 2), [0.5, -2.0], 1e-13)
    num = 2 * np.real(np.poly([0.3, complex(-0.1, 0.7), complex(-0.1, -0.7)]))
    a, b, c, d = companion(num, np.poly([0.9, 0.1, -0.4]))
    z = ss.transmission_zeros(a, b, c, d, 3)
    _matched(z, [0.3, complex(-0.1, 0.7), complex(-0.1, -0.7)], 1e-13)
    assert np.sum(z.imag == 0) == 1 and np.conj(z[z.imag > 0][0]) in z  # exact conjugate pair
    a, b, c, d = companion([1.0, 1.0], np.poly([0.5, 0.2]))
    _matched(ss.transmission_zeros(a, b, c, d, 1), [-1.0], 1e-13)
    for zero in np.linspace(-1.0, 1.0, 9):  # zeros on the pivot candidates' grid
        a, b, c, d = companion([1.0, -zero], np.poly([0.5, -0.5]))
        _matched(ss.transmission_zeros(a, b, c, d, 1), [zero], 1e-12)


def test_foh_zeros_beside_an_integrator_and_a_slow_double_pole():
    """Regression (found trying the change by hand): the first-order-hold form of
    (s + 1000)/(s (s + 0.01)²) came out with numerator coefficients 9 % (200 Hz) to 13 % (2 kHz)
    away from scipy.signal.cont2discrete(method='foh'), because the pencil's generalized
    eigenvalues placed its zeros badly beside the poles clustered at z ≈ 1. Reference:
    scipy.signal.cont2discrete; the remaining difference (1e-10 at 200 Hz, 2e-8 at 2 kHz) is the
    conditioning of that pole cluster, the same as for the zero-order hold, which never changed."""
    from scipy.signal import cont2discrete

    from convert.controller import from_expression
    from convert.digital import discretize

    controller = from_expression("(s + 1000)/(s*(s + 0.01)^2)")
    for fs, tol in ((200.0, 1e-9), (2000.0, 1e-7)):
        for method in ("foh", "zoh"):
            ours = discretize(controller, fs, method).controller
            bz, az, _ = cont2discrete(([1.0, 1000.0], [1.0, 0.02, 1e-4, 0.0]), 1 / fs, method=method)
            ref = np.ravel(bz) / az[0]
            got = np.asarray(ours.num) / ours.den[0]
            got = np.concatenate([np.zeros(ref.size - got.size), got])
            assert np.max(np.abs(got - ref)) <= tol * np.max(np.abs(ref)), (fs, method, got, ref)
            assert np.allclose(np.asarray(ours.den) / ours.den[0], az / az[0], rtol=0, atol=1e-12)


def test_sampling_blocks_keep_their_held_rows_exact():
    """The block exp([[A t, B t], [0, 0]]) has the rows [0, I] exactly (the held input does not
    change); computed as I + 2 (V − U)⁻¹ U the Padé step keeps them, so many squarings (t up to
    1e10 × the time constants) cannot drift them, and Γ = −A⁻¹(I − e^{At})B stays right:
    against scipy.linalg.expm and the closed form Γ → −A⁻¹B of a stable A (common practice)."""
    a, b, _, _ = ss.realize([1.0, 3.0], np.polymul([1.0, 1.0], [1.0, 2.0, 100.0]))
    for t in (1e-3, 1.0, 1e5, 1e10):
        phi, gam = ss.zoh_matrices(a, b, t)
        m = np.zeros((4, 4))
        m[:3, :3] = a * t
        m[:3, 3:] = b * t
        e = smallmatrix.expm(m)
        assert np.array_equal(e[3], [0.0, 0.0, 0.0, 1.0])
        ref = sla.expm(m)
        assert np.allclose(e, ref, rtol=1e-12, atol=1e-12 * np.abs(ref).max())
        steady = -np.linalg.solve(a, b)
        if t >= 1e5:
            assert np.allclose(gam, steady, rtol=1e-12, atol=1e-15)
            assert np.all(np.abs(phi) < 1e-300)
