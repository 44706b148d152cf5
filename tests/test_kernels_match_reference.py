"""The numba kernels equal the plain NumPy twin (kernels/numpy_reference.py), node for node.

Also: loss computed with the gradient equals the forward-only loss, and the batch
layout (levels) is sound.
"""

import numpy as np
import pytest

from random_trees import engine_case

from rntn_engine.kernels.numpy_reference import reference_backward, reference_forward
from rntn_engine.model.objective import L2Strengths, TreeModelObjective
from rntn_engine.model.parameters import Gradient

TOLERANCE = {"float64": 1e-12, "float32": 1e-4}


def relative_error(a, b):
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    scale = max(np.max(np.abs(a)), np.max(np.abs(b)), 1e-30)
    return float(np.max(np.abs(a - b)) / scale)


@pytest.mark.parametrize("dtype", ["float64", "float32"])
@pytest.mark.parametrize("model", ["rnn", "rntn"])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_numba_objective_equals_numpy_reference(model, dtype, seed):
    params, bank, chunks, full, _ = engine_case(model, dtype, dim=4, seed=seed, param_scale=2.0)
    objective = TreeModelObjective(params, L2Strengths(0, 0, 0, 0))
    grads = Gradient(params.shape)
    loss = objective.loss_and_gradient(params, grads, chunks)

    V = params.V if model == "rntn" else None
    scale = 1.0 / bank.n_trees
    P, Y, ref_loss = reference_forward(params.L, params.W, params.b, V, params.Ws, params.bs,
                                       full.word, full.left, full.right, full.label, scale)
    ref = reference_backward(params.L, params.W, params.b, V, params.Ws, params.bs,
                             full.word, full.left, full.right, full.label, scale, P, Y)
    tol = TOLERANCE[dtype]
    assert relative_error(loss, ref_loss) < tol
    for name in params.names():
        assert relative_error(grads.dense(name), ref[name]) < tol, name
    _, P_fast, Y_fast = objective.forward(params, full)
    assert relative_error(P_fast, P) < tol
    assert relative_error(Y_fast, Y) < tol


@pytest.mark.parametrize("dtype", ["float64", "float32"])
@pytest.mark.parametrize("model", ["rnn", "rntn"])
def test_class_weighted_objective_equals_numpy_reference(model, dtype):
    params, bank, chunks, full, _ = engine_case(model, dtype, dim=4, seed=3, param_scale=2.0)
    weights = np.array([3.0, 0.25, 1.0, 2.0, 0.5])
    objective = TreeModelObjective(params, L2Strengths(0, 0, 0, 0), class_weights=weights)
    grads = Gradient(params.shape)
    loss = objective.loss_and_gradient(params, grads, chunks)
    V = params.V if model == "rntn" else None
    scale = 1.0 / bank.n_trees
    P, Y, ref_loss = reference_forward(params.L, params.W, params.b, V, params.Ws, params.bs,
                                       full.word, full.left, full.right, full.label, scale, weights)
    ref = reference_backward(params.L, params.W, params.b, V, params.Ws, params.bs,
                             full.word, full.left, full.right, full.label, scale, P, Y, weights)
    tol = TOLERANCE[dtype]
    assert relative_error(loss, ref_loss) < tol
    for name in params.names():
        assert relative_error(grads.dense(name), ref[name]) < tol, name
    # forward-only passes (prediction, dev loss) stay unweighted
    _, _, plain = reference_forward(params.L, params.W, params.b, V, params.Ws, params.bs,
                                    full.word, full.left, full.right, full.label, 1.0)
    assert relative_error(objective.forward(params, full)[0], plain) < tol


@pytest.mark.parametrize("model", ["rnn", "rntn"])
def test_loss_with_gradient_equals_forward_only_loss(model):
    params, bank, chunks, _, _ = engine_case(model, "float64", dim=4)
    objective = TreeModelObjective(params, L2Strengths(1e-2, 2e-2, 3e-2, 4e-2))
    with_grad = objective.loss_and_gradient(params, Gradient(params.shape), chunks)
    assert with_grad == pytest.approx(objective.loss(params, chunks), rel=1e-14)


def test_level_schedule_puts_children_below_parents():
    _, bank, _, full, _ = engine_case("rntn")
    level_of = np.full(full.n_nodes, 0)
    for h in range(len(full.level_start) - 1):
        level_of[full.order[full.level_start[h]:full.level_start[h + 1]]] = h + 1
    internal = full.left >= 0
    assert np.all(level_of[internal] > level_of[full.left[internal]])
    assert np.all(level_of[internal] > level_of[full.right[internal]])
    assert sorted(full.order.tolist()) == np.flatnonzero(internal).tolist()
    assert full.n_nodes == bank.n_nodes and full.root.tolist() == (bank.start[1:] - 1).tolist()


def test_unknown_words_map_to_row_zero():
    _, bank, _, _, vocabulary = engine_case("rnn")
    last = slice(int(bank.start[-2]), int(bank.start[-1]))
    leaves = bank.word[last][bank.left[last] < 0]
    assert np.all(leaves == 0) and vocabulary.words[0] == "<unknown>"


@pytest.mark.parametrize("rows", [1, 3, 1000])
def test_forward_only_in_blocks_of_rows_equals_the_reference(monkeypatch, rows):
    # forward-only passes reuse a block of `rows` rows for the tensor term, level by level
    import rntn_engine.model.rnn_model as rnn_model

    monkeypatch.setattr(rnn_model, "FORWARD_BLOCKS", ((None, rows),))
    params, bank, _, full, _ = engine_case("rntn", "float64", dim=4, seed=2, param_scale=2.0)
    P, Y, loss = reference_forward(params.L, params.W, params.b, params.V, params.Ws, params.bs,
                                   full.word, full.left, full.right, full.label, 1.0)
    fast_loss, P_fast, Y_fast = TreeModelObjective(params).forward(params, full)
    assert relative_error(P_fast, P) < 1e-12 and relative_error(Y_fast, Y) < 1e-12
    assert fast_loss == pytest.approx(loss, rel=1e-12)
