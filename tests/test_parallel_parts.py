"""Serial per-step work cut into fixed parts on the worker threads stays bitwise the same.

AdaGrad of a large dense group (model/adagrad.py: PARALLEL_MIN, DENSE_PARTS) and the RNTN's layout
work (model/rntn_model.py: the tensor layout, and the fold of the chunks' layout gradients into
dV, in TENSOR_PARTS ranges of k) only take the parts above a size; these tests use sizes above it,
so the parts really run on 2 threads, and compare with 1 thread and with no parts at all.
"""

import numpy as np

from random_trees import engine_case

import rntn_engine.model.rntn_model as rntn_model
from rntn_engine.kernels.adagrad_step import adagrad_l2_step
from rntn_engine.model.adagrad import PARALLEL_MIN, AdaGrad
from rntn_engine.model.objective import TreeModelObjective
from rntn_engine.model.parameters import Gradient, ModelShape, init_parameters


def test_dense_adagrad_in_parts_equals_one_pass():
    n = PARALLEL_MIN + 12345  # large enough to be cut into parts
    rng = np.random.default_rng(0)
    theta0, g0 = rng.standard_normal(n), rng.standard_normal(n)
    G0 = rng.random(n)
    results = []
    for threads in (1, 2):
        optimiser = AdaGrad(init_parameters(ModelShape("rnn", 3, 2, 2, "float64"), rng), 0.05, threads=threads)
        theta, G, g = theta0.copy(), G0.copy(), g0.copy()
        squares = optimiser._dense_step(theta, G, g, np.float64(1e-3), 0.05, 1e-6, True, 0.0)
        optimiser.close()
        results.append((theta, G, g, squares))
    theta, G, g = theta0.copy(), G0.copy(), g0.copy()
    whole = adagrad_l2_step(theta, G, g, np.float64(1e-3), 0.05, 1e-6, True, 0.0)  # one pass, no parts
    for theta_p, G_p, g_p, squares_p in results:
        assert np.array_equal(theta_p, theta) and np.array_equal(G_p, G) and not np.any(g_p)
        assert squares_p == results[0][3]  # the parts' sums in part order: the same for any thread count
        assert abs(squares_p - whole) <= 1e-12 * whole


def tensor_gradient(threads, dim):
    params, _, chunks, full, _ = engine_case("rntn", "float64", dim=dim, grad_chunks=3)
    objective = TreeModelObjective(params, threads=threads)
    grads = Gradient(params.shape)
    loss = objective.loss_and_gradient(params, grads, chunks)
    _, P, _ = objective.forward(params, full)
    objective.close()
    return loss, grads.flat.copy(), P


def test_layout_work_in_parts_is_bitwise_the_same(monkeypatch):
    dim = 41  # 41 * 82 * 82 numbers in V: above PARALLEL_LAYOUT
    assert dim * (2 * dim) ** 2 >= rntn_model.PARALLEL_LAYOUT
    one, two = tensor_gradient(1, dim), tensor_gradient(2, dim)
    monkeypatch.setattr(rntn_model, "PARALLEL_LAYOUT", 1 << 62)  # no parts at all
    whole = tensor_gradient(2, dim)
    for other in (two, whole):
        assert one[0] == other[0]
        assert np.array_equal(one[1], other[1])
        assert np.array_equal(one[2], other[2])
