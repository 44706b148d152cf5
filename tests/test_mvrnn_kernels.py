"""The MV-RNN kernels (kernels/compose_matrix_vector.py) equal their node-by-node NumPy twin.

Also: the loss computed with the gradient equals the forward-only loss, the result does
not depend on how a minibatch is cut into chunks (beyond rounding), and with identity
word matrices and WM = 0.5 [I I] the MV-RNN is exactly the RNN. (No per-node allocation:
tests/test_kernels_allocation_free.py runs its probe for the MV-RNN too.)
"""

import numpy as np
import pytest

from mvrnn_cases import mvrnn_case
from random_trees import engine_case

from rntn_engine.kernels.compose_matrix_vector import forward_compose_mv
from rntn_engine.kernels.numpy_reference import reference_backward_mv, reference_forward_mv
from rntn_engine.model.gradient_check import relative_error
from rntn_engine.model.objective import L2Strengths, TreeModelObjective, split_into_chunks
from rntn_engine.model.parameters import Gradient

TOLERANCE = {"float64": 1e-12, "float32": 1e-4}
NO_L2 = L2Strengths(0, 0, 0, 0, 0)


def reference(params, full, scale):
    """The NumPy twin's (P, PM, Y, loss) and gradients on the whole batch ``full``."""
    arrays = (params.L, params.LM, params.W, params.b, params.WM, params.Ws, params.bs)
    trees = (full.word, full.left, full.right, full.label, scale)
    P, PM, Y, loss = reference_forward_mv(*arrays, *trees)
    return P, PM, Y, loss, reference_backward_mv(*arrays, *trees, P, PM, Y)


@pytest.mark.parametrize("dtype", ["float64", "float32"])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_numba_mv_objective_equals_numpy_reference(dtype, seed):
    params, bank, chunks, full, _ = mvrnn_case(dtype, dim=4, seed=seed)
    objective = TreeModelObjective(params, NO_L2)
    grads = Gradient(params.shape)
    loss = objective.loss_and_gradient(params, grads, chunks)
    P, PM, Y, ref_loss, ref = reference(params, full, 1.0 / bank.n_trees)
    tol = TOLERANCE[dtype]
    assert relative_error(np.float64(loss), np.float64(ref_loss)) < tol
    assert set(ref) == set(params.names())
    for name in params.names():
        assert relative_error(grads.dense(name).astype(np.float64), ref[name].astype(np.float64)) < tol, name
    _, P_fast, Y_fast = objective.forward(params, full)
    assert relative_error(P_fast.astype(np.float64), P.astype(np.float64)) < tol
    assert relative_error(Y_fast.astype(np.float64), Y.astype(np.float64)) < tol


@pytest.mark.parametrize("dtype", ["float64", "float32"])
def test_forward_kernel_node_matrices_equal_reference(dtype):
    # the node matrices P = WM [A ; B] are not returned by the objective: check the kernel's own output
    params, _, _, full, _ = mvrnn_case(dtype, dim=4, seed=3)
    N, M, d = full.n_nodes, full.n_internal, 4
    dt = params.flat.dtype
    P, PM = np.zeros((N, d), dt), np.zeros((N, d, d), dt)
    X, Z = np.zeros((M, 2 * d), dt), np.zeros((M, d), dt)
    ABt, PMt = np.zeros((M * d, 2 * d), dt), np.zeros((M * d, d), dt)
    forward_compose_mv(P, PM, X, Z, ABt, PMt, params.L, params.LM, params.W, params.b, params.WM,
                       full.word, full.left, full.right, full.order, full.level_start)
    ref_P, ref_PM, _, _, _ = reference(params, full, 1.0)
    internal = full.left >= 0
    assert internal.any() and (~internal).any()
    assert relative_error(PM[internal].astype(np.float64), ref_PM[internal].astype(np.float64)) < TOLERANCE[dtype]
    assert np.array_equal(PM[~internal], params.LM[full.word[~internal]])  # leaves: P = LM[w], copied
    assert relative_error(P.astype(np.float64), ref_P.astype(np.float64)) < TOLERANCE[dtype]


@pytest.mark.parametrize("dtype", ["float64", "float32"])
def test_loss_with_gradient_equals_forward_only_loss_for_any_chunking(dtype):
    params, bank, _, _, _ = mvrnn_case(dtype, dim=4, seed=4)
    objective = TreeModelObjective(params, L2Strengths(1e-2, 2e-2, 3e-2, 4e-2, 5e-2))
    results = []
    for n_chunks in (1, 2, 5):
        chunks = split_into_chunks(bank, np.arange(bank.n_trees), n_chunks)
        grads = Gradient(params.shape)
        with_grad = objective.loss_and_gradient(params, grads, chunks)
        assert with_grad == pytest.approx(objective.loss(params, chunks), rel=1e-14)
        results.append((with_grad, np.concatenate([grads.dense(n).ravel() for n in grads.names()]).astype(np.float64)))
    tol = TOLERANCE[dtype]
    for loss, flat in results[1:]:  # chunking changes only the rounding of the sums
        assert loss == pytest.approx(results[0][0], rel=tol)
        assert relative_error(flat, results[0][1]) < tol


def test_identity_word_matrices_make_the_mvrnn_the_rnn():
    # With every LM[w] = I and WM = 0.5 [I I], every node matrix is I and x = [a ; b]: the RNN's equations.
    rnn, _, chunks, _, _ = engine_case("rnn", "float64", dim=4, seed=6, param_scale=2.0)
    mv, _, _, _, _ = engine_case("mvrnn", "float64", dim=4, seed=6, param_scale=2.0)
    for name in rnn.names():
        mv[name] = rnn[name]
    mv.LM[:] = np.eye(4)
    mv.WM[:] = 0.5 * np.hstack([np.eye(4), np.eye(4)])
    l2 = L2Strengths(words=1e-2, compose=2e-2, tensor=3e-2, classifier=4e-2, word_matrices=5e-2)
    rnn_grads, mv_grads = Gradient(rnn.shape), Gradient(mv.shape)
    rnn_loss = TreeModelObjective(rnn, l2).loss_and_gradient(rnn, rnn_grads, chunks)
    mv_loss = TreeModelObjective(mv, l2).loss_and_gradient(mv, mv_grads, chunks)
    # the MV-RNN's own L2 terms: LM in the word_matrices group (rows of the minibatch's words only),
    # WM in the compose group
    used = np.unique(np.concatenate([c.word[c.leaves] for c in chunks]))
    extra = 0.5 * 5e-2 * np.sum(mv.LM[used] ** 2) + 0.5 * 2e-2 * np.sum(mv.WM ** 2)
    assert mv_loss == pytest.approx(rnn_loss + extra, rel=1e-12)
    for name in rnn.names():
        assert relative_error(mv_grads.dense(name), rnn_grads.dense(name)) < 1e-12, name
