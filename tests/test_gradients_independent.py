"""Proofs of the hand-written gradients, per parameter group, for the RNN and the RNTN.

1. Central finite differences of our own objective, float64: relative error < 1e-6.
2. An independent autodiff library -- the `autograd` package (HIPS) --
   differentiates an objective written here from the equations alone (no code of
   ours but the tree arrays): loss equal to 1e-12 relative, every gradient to 1e-9.

Both also with class weights in the cross-entropy (run/class_weights.py), weights far from 1
and different per class, so that a weight applied to the wrong node or left out of one
direction shows.
"""

import autograd
import autograd.numpy as anp
import numpy as np
import pytest

from random_trees import engine_case

from rntn_engine.model.gradient_check import finite_difference_errors
from rntn_engine.model.objective import L2Strengths, TreeModelObjective
from rntn_engine.model.parameters import Gradient

L2 = L2Strengths(words=1e-3, compose=2e-3, tensor=3e-3, classifier=4e-3)
CLASS_WEIGHTS = np.array([3.0, 0.25, 1.0, 2.0, 0.5])  # engine_case trees have 5 classes


def group_relative_error(a, b):
    scale = max(np.max(np.abs(a)), np.max(np.abs(b)), 1e-30)
    return float(np.max(np.abs(a - b)) / scale)


@pytest.mark.parametrize("model", ["rnn", "rntn"])
@pytest.mark.parametrize("seed", [0, 3])
def test_gradient_matches_central_finite_differences(model, seed):
    params, _, chunks, _, _ = engine_case(model, "float64", dim=3, seed=seed, param_scale=2.0)
    errors = finite_difference_errors(TreeModelObjective(params, L2), params, chunks)
    assert set(errors) == set(params.names())
    for name, err in errors.items():
        assert err < 1e-6, f"{model} {name}: relative error {err:.2e}"


@pytest.mark.parametrize("model", ["rnn", "rntn", "mvrnn"])
def test_class_weighted_gradient_matches_central_finite_differences(model):
    params, _, chunks, _, _ = engine_case(model, "float64", dim=3, seed=2, param_scale=2.0)
    objective = TreeModelObjective(params, L2, class_weights=CLASS_WEIGHTS)
    errors = finite_difference_errors(objective, params, chunks)
    assert set(errors) == set(params.names())
    for name, err in errors.items():
        assert err < 1e-6, f"{model} {name}: relative error {err:.2e}"
    # the weights change the objective (so the check above is not the unweighted one again)
    plain = TreeModelObjective(params, L2).loss(params, chunks)
    assert abs(objective.loss(params, chunks) - plain) > 1e-3 * abs(plain)


def test_finite_differences_catch_a_wrong_gradient():
    params, _, chunks, _, _ = engine_case("rntn", "float64", dim=3, param_scale=2.0)
    objective = TreeModelObjective(params, L2)
    wrong = Gradient(params.shape)
    objective.loss_and_gradient(params, wrong, chunks)
    wrong.V[0, 1, 2] *= 1.01  # one element off by 1%
    errors = finite_difference_errors(objective, params, chunks, analytic=wrong)
    assert errors["V"] > 1e-4 and errors["W"] < 1e-6


def word_row_l2(L, anchor, used, lam):
    """lambda/2 sum over the minibatch's distinct words w of ||L[w] - anchor[w]||^2 (our objective's word term)."""
    return 0.5 * lam * anp.sum((L[used] - anchor[used]) ** 2)


def autograd_objective(theta, tree_arrays, tree_ids, l2, with_tensor, anchor, class_weights=None):
    """J written from the equations with autograd.numpy: per node, no in-place writes.

    The minibatch is the trees ``tree_ids``; the word-vector L2 term covers the distinct words
    of their leaves, pulled toward ``anchor`` (zeros: toward zero). A node of gold class t adds
    class_weights[t] * (-log y[t]) (all weights 1 when None).
    """
    L, W, b, V, Ws, bs = theta
    word, left, right, label, start = tree_arrays
    d = L.shape[1]
    total = 0.0
    used = set()
    for t in tree_ids:
        nodes = []
        for i in range(int(start[t]), int(start[t + 1])):
            local = i - int(start[t])
            if left[i] < 0:
                p = L[word[i]]
                used.add(int(word[i]))
            else:
                x = anp.concatenate([nodes[left[i]], nodes[right[i]]])
                z = anp.dot(W, x) + b
                if with_tensor:
                    z = z + anp.array([anp.dot(x, anp.dot(V[k], x)) for k in range(d)])
                p = anp.tanh(z)
            nodes.append(p)
            assert len(nodes) == local + 1
            if label[i] >= 0:
                s = anp.dot(Ws, p) + bs
                w = 1.0 if class_weights is None else class_weights[label[i]]
                total = total - w * (s[label[i]] - anp.log(anp.sum(anp.exp(s - anp.max(s)))) - anp.max(s))
    reg = word_row_l2(L, anchor, np.array(sorted(used)), l2.words)
    reg = reg + 0.5 * (l2.compose * anp.sum(W ** 2) + l2.classifier * anp.sum(Ws ** 2))
    if with_tensor:
        reg = reg + 0.5 * l2.tensor * anp.sum(V ** 2)
    return total / len(tree_ids) + reg


def autograd_reference(params, bank, with_tensor, tree_ids=None, anchor=None, class_weights=None):
    """(loss, {name: gradient}) from autograd (HIPS), in float64, on copies of our parameters."""
    as64 = lambda a: np.array(a, dtype=np.float64)
    V = as64(params.V) if with_tensor else np.zeros((1, 1, 1))
    theta = (as64(params.L), as64(params.W), as64(params.b), V, as64(params.Ws), as64(params.bs))
    tree_arrays = (bank.word, bank.left, bank.right, bank.label, bank.start)
    tree_ids = list(range(bank.n_trees)) if tree_ids is None else list(tree_ids)
    anchor = np.zeros_like(theta[0]) if anchor is None else as64(anchor)
    loss = autograd_objective(theta, tree_arrays, tree_ids, L2, with_tensor, anchor, class_weights)
    grads = autograd.grad(autograd_objective)(theta, tree_arrays, tree_ids, L2, with_tensor, anchor, class_weights)
    named = dict(zip(["L", "W", "b", "V", "Ws", "bs"], grads))
    if not with_tensor:
        del named["V"]
    return loss, named


@pytest.mark.parametrize("model", ["rnn", "rntn"])
@pytest.mark.parametrize("seed", [0, 5])
def test_gradient_matches_autograd_library(model, seed):
    params, bank, chunks, _, _ = engine_case(model, "float64", dim=3, seed=seed, param_scale=2.0)
    grads = Gradient(params.shape)
    loss = TreeModelObjective(params, L2).loss_and_gradient(params, grads, chunks)
    # Independent reference: autograd (HIPS) differentiates the equations written above.
    ref_loss, ref_grads = autograd_reference(params, bank, model == "rntn")
    assert abs(loss - ref_loss) / abs(ref_loss) < 1e-12
    assert set(ref_grads) == set(params.names())
    for name, ref in ref_grads.items():
        err = group_relative_error(grads.dense(name), ref)
        assert err < 1e-9, f"{model} {name}: relative error {err:.2e}"


@pytest.mark.parametrize("model", ["rnn", "rntn"])
def test_class_weighted_gradient_matches_autograd_library(model):
    params, bank, chunks, _, _ = engine_case(model, "float64", dim=3, seed=4, param_scale=2.0)
    grads = Gradient(params.shape)
    loss = TreeModelObjective(params, L2, class_weights=CLASS_WEIGHTS).loss_and_gradient(params, grads, chunks)
    # Independent reference: autograd (HIPS) differentiates the weighted equations written above.
    ref_loss, ref_grads = autograd_reference(params, bank, model == "rntn", class_weights=CLASS_WEIGHTS)
    assert abs(loss - ref_loss) / abs(ref_loss) < 1e-12
    for name, ref in ref_grads.items():
        err = group_relative_error(grads.dense(name), ref)
        assert err < 1e-9, f"{model} {name}: relative error {err:.2e}"


@pytest.mark.parametrize("model", ["rnn", "rntn"])
def test_float32_gradient_matches_autograd_in_float64(model):
    # float32 kernels against the same independent autograd (HIPS) objective evaluated in float64
    # on the same (float32-representable) parameters: agreement to float32 precision.
    params, bank, chunks, _, _ = engine_case(model, "float32", dim=3, seed=1, param_scale=2.0)
    grads = Gradient(params.shape)
    loss = TreeModelObjective(params, L2).loss_and_gradient(params, grads, chunks)
    ref_loss, ref_grads = autograd_reference(params, bank, model == "rntn")
    assert abs(loss - ref_loss) / abs(ref_loss) < 1e-5
    for name, ref in ref_grads.items():
        assert group_relative_error(grads.dense(name).astype(np.float64), ref) < 1e-4, name
