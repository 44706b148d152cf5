"""The vectorisable exp and tanh (kernels/vector_math.py) against an arbitrary-precision reference.

Reference: mpmath (independent arbitrary-precision library), evaluated at 50 significant digits and
rounded to float64; the kernels' NumPy twins are np.tanh and np.exp. Errors are counted in units in
the last place (ulp) of the true value.
"""

from __future__ import annotations

import mpmath
import numpy as np
import pytest

from rntn_engine.kernels.vector_math import EXP_FLOOR, exp_nonpositive, tanh_bias_rows, tanh_value

mpmath.mp.dps = 50


def ulps(got: float, true: mpmath.mpf, dtype=np.float64) -> float:
    """|got - true| in units in the last place of the true value rounded to ``dtype``."""
    rounded = dtype(float(true))
    spacing = float(np.spacing(np.abs(rounded))) if rounded != 0 else float(np.finfo(dtype).smallest_subnormal)
    return float(abs(mpmath.mpf(float(got)) - true) / spacing)


def sample_points(rng, n: int, low: float, high: float) -> np.ndarray:
    """Magnitudes spread evenly in log scale over [10^low, 10^high], both signs."""
    return rng.choice([-1.0, 1.0], n) * 10.0 ** rng.uniform(low, high, n)


def test_tanh_within_three_ulps_of_mpmath():
    # measured: at most 2.54 ulp over 20,000 such points (the C library's own tanh: 1.34)
    rng = np.random.default_rng(11)
    points = np.concatenate([sample_points(rng, 1500, -12, 1.4), np.linspace(-0.35, 0.35, 71),
                             [0.34657359027997264, 0.5493061443340549, 19.9, 20.0, 20.5]])  # ln(2)/2, atanh(1/2)
    worst = max(ulps(tanh_value(x), mpmath.tanh(mpmath.mpf(float(x)))) for x in points)
    assert worst <= 3.0, worst


def test_exp_within_two_ulps_of_mpmath_and_flushed_below_the_smallest_normal():
    rng = np.random.default_rng(12)
    points = np.concatenate([-(10.0 ** rng.uniform(-12, np.log10(708.3), 1500)), [-0.0, -708.3, -0.34657359027997264]])
    worst = max(ulps(exp_nonpositive(y), mpmath.exp(mpmath.mpf(float(y)))) for y in points)
    assert worst <= 2.0, worst
    assert exp_nonpositive(EXP_FLOOR - 1e-9) == 0.0 and exp_nonpositive(-745.0) == 0.0
    assert exp_nonpositive(-np.inf) == 0.0
    assert np.exp(EXP_FLOOR) >= np.finfo(np.float64).tiny  # the floor keeps every result normal


def test_special_values():
    assert np.isnan(tanh_value(np.nan)) and np.isnan(exp_nonpositive(np.nan))
    assert tanh_value(np.inf) == 1.0 and tanh_value(-np.inf) == -1.0
    assert tanh_value(1e300) == 1.0 and tanh_value(-1e300) == -1.0
    assert np.signbit(tanh_value(-0.0)) and not np.signbit(tanh_value(0.0))  # the sign of zero, as np.tanh
    assert tanh_value(5e-324) == 5e-324  # tanh(x) = x for tiny x, subnormals included
    assert exp_nonpositive(0.0) == 1.0 and exp_nonpositive(-0.0) == 1.0


@pytest.mark.parametrize("dtype,max_ulps", [(np.float32, 1.0), (np.float64, 3.0)])
def test_tanh_bias_rows_against_its_numpy_twin(dtype, max_ulps):
    rng = np.random.default_rng(13)
    M, d, N = 9, 7, 20
    Z = (rng.standard_normal((M, d)) * 3).astype(dtype)
    b = rng.standard_normal(d).astype(dtype)
    order = rng.permutation(N)[:M].astype(np.int32)
    pre = Z + b  # the pre-activations, rounded to the dtype as the kernel rounds them
    expected = np.tanh(pre)  # the NumPy twin
    P = np.full((N, d), 7.0, dtype=dtype)
    a, z = 2, 8
    tanh_bias_rows(P, Z, b, order, a, z)
    for m in range(a, z):
        assert np.array_equal(P[order[m]], Z[m])  # Z's rows hold the level's p afterwards
        for k in range(d):
            assert ulps(P[order[m], k], mpmath.tanh(mpmath.mpf(float(pre[m, k]))), dtype) <= max_ulps
    np.testing.assert_allclose(P[order[a:z]], expected[a:z], rtol=2 * np.finfo(dtype).eps, atol=0)
    untouched = np.setdiff1d(np.arange(N), order[a:z])
    assert np.all(P[untouched] == 7.0)
