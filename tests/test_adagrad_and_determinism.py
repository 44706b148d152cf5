"""AdaGrad against a hand-computed example, and bitwise determinism of the objective."""

import numpy as np
import pytest

from random_trees import engine_case

from rntn_engine.model.model_registry import MODELS
from rntn_engine.model.adagrad import AdaGrad
from rntn_engine.model.objective import TreeModelObjective
from rntn_engine.model.parameters import Gradient, ModelShape, Parameters


def filled_gradient(shape, value):
    """A gradient holding ``value`` everywhere: every dense element and every word row."""
    grads = Gradient(shape)
    grads.flat[:] = value
    for rows in grads.rows.values():
        rows.reset(np.arange(shape.vocab_size))
        rows.values[:] = value
    return grads


def gradient_bits(grads):
    """Every number a gradient holds, and the word rows it covers, as one comparable tuple."""
    return (grads.flat.tobytes(),) + tuple((r.rows.tobytes(), r.values.tobytes()) for r in grads.rows.values())


def test_adagrad_matches_hand_computed_steps():
    # Published rule (AdaGrad, 2011, diagonal form): G += g^2; theta -= lr g / (sqrt(G) + eps).
    # Expected values computed here by hand, lr = 0.1, eps = 0 (no source beyond the rule itself):
    #   theta0 = 1.0, gradients 2, then 1, then -2
    #   step 1: G = 4,  theta = 1 - 0.1 * 2 / 2           = 0.9
    #   step 2: G = 5,  theta = 0.9 - 0.1 * 1 / sqrt(5)    = 0.855278640450004
    #   step 3: G = 9,  theta = 0.8552786... + 0.1 * 2 / 3 = 0.921945307116671
    shape = ModelShape("rnn", 1, 1, 2, "float64")  # 1 + 2 + 1 + 2 + 2 = 8 scalars
    params = Parameters(shape, np.ones(shape.count()))
    opt = AdaGrad(params, lr=0.1, eps=0.0)
    for g, expected in [(2.0, 0.9), (1.0, 0.855278640450004), (-2.0, 0.921945307116671)]:
        opt.step(params, filled_gradient(shape, g))
        np.testing.assert_allclose(params.flat, expected, rtol=1e-14)
    np.testing.assert_allclose(opt.sums.flat, 9.0)
    opt.reset()
    assert not opt.sums.flat.any()


def test_adagrad_frozen_group_is_not_updated():
    shape = ModelShape("rnn", 3, 2, 2, "float64")
    params = Parameters(shape, np.ones(shape.count()))
    AdaGrad(params, lr=0.1, frozen=("L",)).step(params, filled_gradient(shape, 1.0))
    assert np.all(params.L == 1.0) and np.all(params.W < 1.0)


@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("dtype", ["float32", "float64"])
def test_gradient_bits_do_not_depend_on_thread_count(model, dtype):
    results = []
    for threads in (1, 2):
        params, _, chunks, _, _ = engine_case(model, dtype, dim=5, grad_chunks=3)
        objective = TreeModelObjective(params, threads=threads)
        grads = Gradient(params.shape)
        loss = objective.loss_and_gradient(params, grads, chunks)
        objective.close()
        results.append((loss, gradient_bits(grads)))
    assert results[0][0] == results[1][0]
    assert results[0][1] == results[1][1]


def test_repeated_evaluation_is_bitwise_identical():
    params, _, chunks, _, _ = engine_case("rntn", "float32", dim=5)
    objective = TreeModelObjective(params)
    first, second = Gradient(params.shape), Gradient(params.shape)
    a = objective.loss_and_gradient(params, first, chunks)
    b = objective.loss_and_gradient(params, second, chunks)
    assert a == b and gradient_bits(first) == gradient_bits(second)


@pytest.mark.parametrize("dtype", ["float32", "float64"])
def test_fused_l2_step_equals_gradient_with_l2_then_step(dtype):
    from rntn_engine.model.objective import L2Strengths

    l2 = L2Strengths(1e-3, 2e-3, 3e-3, 4e-3)
    params, _, chunks, _, _ = engine_case("rntn", dtype, dim=4)
    twin = params.copy()
    a, b = AdaGrad(params, 0.05), AdaGrad(twin, 0.05)
    grads, grads_twin = Gradient(params.shape), Gradient(twin.shape)
    for _ in range(3):
        full = TreeModelObjective(params, l2).loss_and_gradient(params, grads, chunks)
        a.step(params, grads)
        data = TreeModelObjective(twin, l2).loss_and_gradient(twin, grads_twin, chunks, include_l2=False)
        penalty = b.step_with_l2(twin, grads_twin, l2)
        assert np.array_equal(params.flat, twin.flat) and np.array_equal(a.sums.flat, b.sums.flat)
        assert data + penalty == pytest.approx(full, rel=1e-12)
        assert not grads_twin.flat.any() and not grads_twin.rows["L"].values.any()  # the fused pass zeroes it


def test_fused_step_flushes_subnormal_parameters_to_zero():
    from rntn_engine.model.objective import L2Strengths

    shape = ModelShape("rnn", 2, 2, 2, "float32")
    params = Parameters(shape, np.full(shape.count(), 1e-39, dtype=np.float32))  # subnormal in float32
    params.W[0, 0] = 0.5
    opt = AdaGrad(params, lr=1e-45)  # a step far too small to move anything
    opt.step_with_l2(params, filled_gradient(shape, 0.0), L2Strengths(0, 0, 0, 0))  # every row touched
    assert params.W[0, 0] == np.float32(0.5) and np.count_nonzero(params.flat) == 1


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_sum_of_squares_against_an_exactly_rounded_sum(dtype):
    # reference: Python's math.fsum (exactly rounded sum of the float64 squares); lengths around the
    # kernel's 16 running sums and a V of d = 25
    import math

    from rntn_engine.kernels.adagrad_step import sum_of_squares

    rng = np.random.default_rng(8)
    for n in [0, 1, 5, 15, 16, 17, 33, 62_500]:
        x = rng.standard_normal(n).astype(dtype)
        exact = math.fsum(float(v) * float(v) for v in x.astype(np.float64))
        assert sum_of_squares(x) == pytest.approx(exact, rel=1e-13, abs=0.0)


@pytest.mark.parametrize("dtype", ["float32", "float64"])
def test_adagrad_step_sums_the_squares_as_sum_of_squares_does(dtype):
    # the update takes the penalty's sum of squares in its own pass over theta, with sum_of_squares's
    # lanes and order: the same bits, whatever the length (lanes only, a tail, fewer than 16)
    from rntn_engine.kernels.adagrad_step import adagrad_l2_step, sum_of_squares

    rng = np.random.default_rng(9)
    real = np.dtype(dtype).type
    for n in (1, 5, 16, 17, 40, 1000, 1023):
        theta = (rng.standard_normal(n) * 10.0 ** rng.uniform(-3, 3, n)).astype(dtype)
        expected = sum_of_squares(theta)
        G, g = rng.random(n).astype(dtype), rng.standard_normal(n).astype(dtype)
        got = adagrad_l2_step(theta, G, g, real(1e-3), real(0.05), real(1e-6), True, real(0.0))
        assert got == expected
        assert not np.any(g)
