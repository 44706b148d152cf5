"""The prefetch hint (kernels/cache_hints.py) changes no value: the word rows' AdaGrad step, which issues
it ROWS_AHEAD rows ahead, equals a plain NumPy twin of the step over many scattered rows, and the hint
alone leaves every array as it was, at the first and the last row of arrays of several dtypes."""

from __future__ import annotations

import numpy as np
import pytest
from numba import njit

from rntn_engine.kernels.adagrad_step import adagrad_l2_rows_step
from rntn_engine.kernels.cache_hints import ROWS_AHEAD, prefetch_row


@njit
def hint_rows(array, rows):
    for r in rows:
        prefetch_row(array, r)


@pytest.mark.parametrize("dtype", [np.float32, np.float64, np.int32, np.int8])
@pytest.mark.parametrize("width", [1, 7, 25, 100])
def test_the_hint_alone_changes_nothing(dtype, width):
    array = (np.arange(13 * width) % 101).astype(dtype).reshape(13, width)
    before = array.copy()
    hint_rows(array, np.array([0, 12, 5, 12, 0], dtype=np.int64))
    assert np.array_equal(array, before)


def test_word_rows_step_with_hints_equals_a_numpy_twin():
    rng = np.random.default_rng(5)
    V, w = 3000, 25
    rows = np.unique(rng.integers(0, V, 8 * ROWS_AHEAD)).astype(np.int64)
    theta = rng.standard_normal((V, w))
    G = rng.random((V, w))
    values = rng.standard_normal((rows.size, w))
    lam, lr, eps = 1e-3, 0.05, 1e-6
    # the twin: the step's equations (kernels/adagrad_step.py) with NumPy, row by row
    theta_twin, G_twin = theta.copy(), G.copy()
    before = theta[rows].copy()
    gi = values + lam * theta_twin[rows]
    G_twin[rows] += gi * gi
    theta_twin[rows] -= lr * gi / (np.sqrt(G_twin[rows]) + eps)
    squares = adagrad_l2_rows_step(theta, G, rows, values.copy(), theta[:0], lam, lr, eps, True, 0.0)
    assert np.array_equal(G, G_twin) and np.array_equal(theta, theta_twin)
    assert squares == pytest.approx(float(np.sum(before**2)), rel=1e-12)  # the penalty's sum, before the update
