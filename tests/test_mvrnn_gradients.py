"""Proofs of the MV-RNN's hand-written gradients, per parameter group (L, W, b, LM, WM, Ws, bs).

1. Central finite differences of our own objective, float64: relative error < 1e-6.
2. An independent autodiff library -- the `autograd` package (HIPS) --
   differentiates an MV-RNN objective written here from the MV-RNN's equations
   (2012) alone (no code of ours but the tree arrays): loss equal to 1e-12
   relative, every gradient to 1e-9; our float32 kernels against it to 1e-4.
The word matrices are redrawn far from the identity (tests/mvrnn_cases.py), so that a
transposed or swapped child matrix cannot pass.
"""

import autograd
import autograd.numpy as anp
import numpy as np
import pytest

from mvrnn_cases import mvrnn_case

from rntn_engine.model.gradient_check import finite_difference_errors, relative_error
from rntn_engine.model.objective import L2Strengths, TreeModelObjective
from rntn_engine.model.parameters import Gradient

L2 = L2Strengths(words=1e-3, compose=2e-3, tensor=3e-3, classifier=4e-3, word_matrices=5e-3)
NAMES = ["L", "LM", "W", "b", "WM", "Ws", "bs"]


@pytest.mark.parametrize("seed", [0, 3])
def test_mv_gradient_matches_central_finite_differences(seed):
    params, _, chunks, _, _ = mvrnn_case("float64", dim=3, seed=seed)
    errors = finite_difference_errors(TreeModelObjective(params, L2), params, chunks)
    assert set(errors) == set(NAMES)
    for name, err in errors.items():
        assert err < 1e-6, f"mvrnn {name}: relative error {err:.2e}"


def test_finite_differences_catch_a_wrong_word_matrix_gradient():
    params, bank, chunks, _, _ = mvrnn_case("float64", dim=3)
    objective = TreeModelObjective(params, L2)
    wrong = Gradient(params.shape)
    objective.loss_and_gradient(params, wrong, chunks)
    wrong.rows["LM"].values[0] *= 1.01  # one used word's matrix gradient off by 1%
    errors = finite_difference_errors(objective, params, chunks, analytic=wrong)
    assert errors["LM"] > 1e-4 and errors["WM"] < 1e-6


def autograd_mv_objective(theta, tree_arrays, tree_ids, l2, anchor):
    """J of the MV-RNN written from the equations with autograd.numpy: per node, no in-place writes.

    leaf: (p, P) = (L[w], LM[w]); internal, left (a, A), right (b, B):
    p = tanh(W [B a ; A b] + bias), P = WM [A ; B]; softmax cross-entropy at labelled nodes.
    The minibatch is the trees ``tree_ids``; the L2 terms of L (toward ``anchor``) and LM (toward
    zero) cover the distinct words of their leaves.
    """
    L, LM, W, bias, WM, Ws, bs = theta
    word, left, right, label, start = tree_arrays
    total = 0.0
    used = set()
    for t in tree_ids:
        vectors, matrices = [], []  # per node of tree t, indexed locally like left/right
        for i in range(int(start[t]), int(start[t + 1])):
            if left[i] < 0:
                p, P = L[word[i]], LM[word[i]]
                used.add(int(word[i]))
            else:
                a, A = vectors[left[i]], matrices[left[i]]
                b, B = vectors[right[i]], matrices[right[i]]
                p = anp.tanh(anp.dot(W, anp.concatenate([anp.dot(B, a), anp.dot(A, b)])) + bias)
                P = anp.dot(WM, anp.concatenate([A, B], axis=0))
            vectors.append(p)
            matrices.append(P)
            if label[i] >= 0:
                s = anp.dot(Ws, p) + bs
                total = total - (s[label[i]] - anp.log(anp.sum(anp.exp(s - anp.max(s)))) - anp.max(s))
    used = np.array(sorted(used))
    reg = 0.5 * (l2.words * anp.sum((L[used] - anchor[used]) ** 2) + l2.word_matrices * anp.sum(LM[used] ** 2)
                 + l2.compose * (anp.sum(W ** 2) + anp.sum(WM ** 2)) + l2.classifier * anp.sum(Ws ** 2))
    return total / len(tree_ids) + reg


def autograd_mv_reference(params, bank, tree_ids=None, anchor=None):
    """(loss, {name: gradient}) from autograd (HIPS), in float64, on copies of our parameters."""
    theta = tuple(np.array(params[name], dtype=np.float64) for name in NAMES)
    tree_arrays = (bank.word, bank.left, bank.right, bank.label, bank.start)
    tree_ids = list(range(bank.n_trees)) if tree_ids is None else list(tree_ids)
    anchor = np.zeros_like(theta[0]) if anchor is None else np.array(anchor, dtype=np.float64)
    loss = autograd_mv_objective(theta, tree_arrays, tree_ids, L2, anchor)
    grads = autograd.grad(autograd_mv_objective)(theta, tree_arrays, tree_ids, L2, anchor)
    return loss, dict(zip(NAMES, grads))


@pytest.mark.parametrize("seed", [0, 5])
def test_mv_gradient_matches_autograd_library(seed):
    params, bank, chunks, _, _ = mvrnn_case("float64", dim=3, seed=seed)
    grads = Gradient(params.shape)
    loss = TreeModelObjective(params, L2).loss_and_gradient(params, grads, chunks)
    # Independent reference: autograd (HIPS) differentiates the MV-RNN equations written above.
    ref_loss, ref_grads = autograd_mv_reference(params, bank)
    assert abs(loss - ref_loss) / abs(ref_loss) < 1e-12
    assert set(ref_grads) == set(params.names())
    for name, ref in ref_grads.items():
        err = relative_error(grads.dense(name), ref)
        assert err < 1e-9, f"mvrnn {name}: relative error {err:.2e}"


def test_mv_float32_gradient_matches_autograd_in_float64():
    # float32 kernels against the same independent autograd (HIPS) objective evaluated in float64
    # on the same (float32-representable) parameters: agreement to float32 precision.
    params, bank, chunks, _, _ = mvrnn_case("float32", dim=3, seed=1)
    grads = Gradient(params.shape)
    loss = TreeModelObjective(params, L2).loss_and_gradient(params, grads, chunks)
    ref_loss, ref_grads = autograd_mv_reference(params, bank)
    assert abs(loss - ref_loss) / abs(ref_loss) < 1e-5
    for name, ref in ref_grads.items():
        assert relative_error(grads.dense(name).astype(np.float64), ref) < 1e-4, name
