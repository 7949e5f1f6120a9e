"""BLAS threads around small dense linear algebra: one thread inside the scope, the previous
limits back outside it (threadpoolctl's own report of the loaded BLAS libraries is the reference)."""

from __future__ import annotations

import numpy as np
import pytest

threadpoolctl = pytest.importorskip("threadpoolctl")

from convert.digital import statespace as ss  # noqa: E402


def _blas_threads() -> list[int]:
    import scipy.linalg  # noqa: F401  (the BLAS scipy uses is loaded)

    return [i["num_threads"] for i in threadpoolctl.threadpool_info() if i["user_api"] == "blas"]


def test_scope_limits_and_restores():
    before = _blas_threads()
    assert before, "no BLAS library found by threadpoolctl"
    with ss.small_dense:
        assert set(_blas_threads()) == {1}
        with ss.small_dense:  # nested: still one thread, and the outer scope keeps it
            assert set(_blas_threads()) == {1}
        assert set(_blas_threads()) == {1}
    assert _blas_threads() == before


def test_scope_restores_after_an_error():
    before = _blas_threads()
    with pytest.raises(ZeroDivisionError):
        with ss.small_dense:
            1 / 0  # noqa: B018
    assert _blas_threads() == before


def test_discretize_runs_limited_and_leaves_the_rest_alone(monkeypatch):
    """A ZOH discretization (a 3x3 matrix exponential, seen running with one BLAS thread) against
    scipy.signal.cont2discrete, while the limits outside the call stay what they were (large
    nodal solves keep every core)."""
    from scipy.signal import cont2discrete

    from convert.controller import from_expression
    from convert.digital import discretize, smallmatrix

    before = _blas_threads()
    seen = []
    real = smallmatrix.expm

    def spy(m):
        seen.append(_blas_threads())
        return real(m)

    monkeypatch.setattr(smallmatrix, "expm", spy)
    d = discretize(from_expression("(s + 2)/((s + 20)*(s + 5))"), 100.0, "zoh")
    assert seen and all(set(x) == {1} for x in seen)
    assert _blas_threads() == before
    bz, az, _ = cont2discrete(([1, 2], [1, 25, 100]), 0.01, method="zoh")
    w = np.exp(1j * np.linspace(0.01, 3, 30))
    ref = np.polyval(np.ravel(bz), w) / np.polyval(az, w)
    ours = d.controller.frequency_response(np.linspace(0.01, 3, 30) * 100 / (2 * np.pi))
    assert np.allclose(ours, ref, rtol=1e-9, atol=1e-12)


def test_scope_sees_scipy_loaded_after_first_use():
    """The limiter finds the BLAS libraries once, and again when scipy's own BLAS was loaded
    after that, so both are limited (threadpoolctl's report is the reference). Run in a fresh
    process so that scipy is not loaded before the first scope."""
    import subprocess
    import sys

    code = (
        "import sys, threadpoolctl\n"
        "from convert.digital import statespace as ss\n"
        "with ss.small_dense: pass\n"
        "assert 'scipy.linalg' not in sys.modules\n"
        "import scipy.linalg\n"
        "with ss.small_dense:\n"
        "    libs = [i for i in threadpoolctl.threadpool_info() if i['user_api'] == 'blas']\n"
        "    print(len(libs), sorted({i['num_threads'] for i in libs}))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    count, threads = out.stdout.split(" ", 1)
    assert int(count) >= 2 and threads.strip() == "[1]", out.stdout
