"""Word arrays (L, LM) at vocabulary scale: a minibatch's gradient, L2 term and update reach only its rows.

The objective (model/objective.py): a minibatch's L2 term on word vectors is
lambda/2 sum over its distinct words w of ||L[w] - A[w]||^2, with A = 0 or the starting
vectors (``anchors``); likewise for the MV-RNN's word matrices (toward 0). Proven here
against central finite differences and the independent autodiff library `autograd`
(HIPS), on minibatches that leave some vocabulary rows untouched, for all three models.
"""

import numpy as np
import pytest

from mvrnn_cases import mvrnn_case
from random_trees import engine_case
from test_gradients_independent import autograd_reference, group_relative_error
from test_mvrnn_gradients import autograd_mv_reference

from rntn_engine.model.model_registry import MODELS
from rntn_engine.model.adagrad import AdaGrad
from rntn_engine.model.gradient_check import finite_difference_errors
from rntn_engine.model.objective import L2Strengths, TreeModelObjective, split_into_chunks
from rntn_engine.model.parameters import Gradient

L2 = L2Strengths(words=1e-3, compose=2e-3, tensor=3e-3, classifier=4e-3, word_matrices=5e-3)
SUBSET = [0, 2, 5, 7]  # trees of the corner-case treebank: a minibatch that misses some vocabulary rows


def case(model, dtype="float64", seed=0):
    if model == "mvrnn":
        return mvrnn_case(dtype, dim=3, seed=seed)
    return engine_case(model, dtype, dim=3, seed=seed, param_scale=2.0)


def subset_chunks(bank):
    return split_into_chunks(bank, np.array(SUBSET), 2)


def used_rows(bank, tree_ids):
    words = [bank.word[bank.start[t]:bank.start[t + 1]] for t in tree_ids]
    return np.unique(np.concatenate(words)[np.concatenate(words) >= 0])


def random_anchor(params, seed=9):
    return {"L": np.random.default_rng(seed).uniform(-0.3, 0.3, params.L.shape).astype(params.flat.dtype)}


@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("toward", ["zero", "start"])
def test_word_row_gradient_matches_central_finite_differences(model, toward):
    params, bank, _, _, _ = case(model)
    chunks = subset_chunks(bank)
    assert len(used_rows(bank, SUBSET)) < params.L.shape[0]  # some rows are not in the minibatch
    anchors = random_anchor(params) if toward == "start" else {}
    errors = finite_difference_errors(TreeModelObjective(params, L2, anchors=anchors), params, chunks)
    for name, err in errors.items():
        assert err < 1e-6, f"{model} {name}: relative error {err:.2e}"


@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("toward", ["zero", "start"])
def test_word_row_gradient_matches_autograd_library(model, toward):
    params, bank, _, _, _ = case(model, seed=3)
    chunks = subset_chunks(bank)
    anchors = random_anchor(params) if toward == "start" else {}
    grads = Gradient(params.shape)
    loss = TreeModelObjective(params, L2, anchors=anchors).loss_and_gradient(params, grads, chunks)
    # Independent reference: autograd (HIPS) differentiates the objective written from the equations
    # in test_gradients_independent.py / test_mvrnn_gradients.py, with the word terms over used rows.
    if model == "mvrnn":
        ref_loss, ref = autograd_mv_reference(params, bank, SUBSET, anchors.get("L"))
    else:
        ref_loss, ref = autograd_reference(params, bank, model == "rntn", SUBSET, anchors.get("L"))
    assert abs(loss - ref_loss) / abs(ref_loss) < 1e-12
    for name, expected in ref.items():
        err = group_relative_error(grads.dense(name), expected)
        assert err < 1e-9, f"{model} {name}: relative error {err:.2e}"
    # the gradient holds exactly the minibatch's distinct words, ascending
    assert grads.rows["L"].rows.tolist() == used_rows(bank, SUBSET).tolist()


def test_the_word_term_counts_each_word_once_and_skips_absent_words():
    # J(with word L2) - J(without) = lambda/2 * sum over distinct used words of ||L[w]||^2, computed here
    params, bank, _, _, _ = case("rnn")
    chunks = subset_chunks(bank)
    lam = 0.25
    with_words = TreeModelObjective(params, L2Strengths(lam, 0, 0, 0)).loss(params, chunks)
    without = TreeModelObjective(params, L2Strengths(0, 0, 0, 0)).loss(params, chunks)
    used = used_rows(bank, SUBSET)
    expected = 0.5 * lam * sum(float(np.dot(params.L[w], params.L[w])) for w in used)
    assert with_words - without == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("dtype", ["float32", "float64"])
@pytest.mark.parametrize("toward", ["zero", "start"])
def test_sparse_step_touches_only_minibatch_rows_and_equals_the_unfused_path(model, dtype, toward):
    params, bank, _, _, _ = case(model, dtype)
    chunks = subset_chunks(bank)
    anchors = random_anchor(params) if toward == "start" else {}
    twin = params.copy()
    start = params.copy()
    fused, unfused = AdaGrad(params, 0.05, eps=1e-3), AdaGrad(twin, 0.05, eps=1e-3)
    objective = TreeModelObjective(params, L2, anchors=anchors)
    twin_objective = TreeModelObjective(twin, L2, anchors=anchors)
    grads, twin_grads = Gradient(params.shape), Gradient(twin.shape)
    for _ in range(3):
        data = objective.loss_and_gradient(params, grads, chunks, include_l2=False)
        penalty = fused.step_with_l2(params, grads, L2, anchors)
        full = twin_objective.loss_and_gradient(twin, twin_grads, chunks)
        unfused.step(twin, twin_grads)
        assert data + penalty == pytest.approx(full, rel=1e-12)
        assert np.array_equal(params.flat, twin.flat) and np.array_equal(fused.sums.flat, unfused.sums.flat)
        assert not grads.flat.any() and not grads.rows["L"].values.any()  # the fused pass zeroes the gradient
    used = used_rows(bank, SUBSET)
    untouched = np.setdiff1d(np.arange(params.L.shape[0]), used)
    assert untouched.size
    for name in ("L", "LM") if model == "mvrnn" else ("L",):
        assert np.array_equal(params[name][untouched], start[name][untouched]), name  # bit for bit
        assert not fused.sums[name][untouched].any(), name
        assert not np.array_equal(params[name][used], start[name][used]), name


def test_anchored_l2_pulls_toward_the_start_not_toward_zero():
    # with no data term (nothing labelled), L2 alone moves a used row toward its anchor: toward zero it shrinks,
    # toward the start it stays where it began
    params, bank, _, _, _ = case("rnn")
    chunks = subset_chunks(bank)
    for c in chunks:
        c.label[:] = -1
    row = int(used_rows(bank, SUBSET)[1])
    results = {}
    for toward in ("zero", "start"):
        p = params.copy()
        anchors = {"L": p.L.copy()} if toward == "start" else {}
        opt = AdaGrad(p, 0.05)
        objective = TreeModelObjective(p, L2Strengths(0.5, 0, 0, 0), anchors=anchors)
        grads = Gradient(p.shape)
        for _ in range(5):
            objective.loss_and_gradient(p, grads, chunks, include_l2=False)
            opt.step_with_l2(p, grads, L2Strengths(0.5, 0, 0, 0), anchors)
        results[toward] = p.L[row].copy()
    assert np.linalg.norm(results["zero"]) < 0.9 * np.linalg.norm(params.L[row])
    assert np.array_equal(results["start"], params.L[row])  # gradient lambda * (L - L0) = 0 at the start


def test_frozen_word_vectors_stay_and_their_gradient_rows_are_zeroed():
    params, bank, _, _, _ = case("rntn")
    chunks = subset_chunks(bank)
    start = params.copy()
    opt = AdaGrad(params, 0.05, frozen=("L",))
    grads = Gradient(params.shape)
    TreeModelObjective(params, L2).loss_and_gradient(params, grads, chunks, include_l2=False)
    opt.step_with_l2(params, grads, L2)
    assert np.array_equal(params.L, start.L) and not opt.sums.L.any()
    assert not grads.rows["L"].values.any()
    assert not np.array_equal(params.W, start.W)


def test_chunk_word_rows_and_the_merged_add_against_numpy():
    # twin: np.unique with return_inverse (NumPy), and np.add.at at np.searchsorted positions
    from rntn_engine.kernels.word_rows import add_word_rows, chunk_word_rows

    rng = np.random.default_rng(21)
    word = rng.integers(0, 40, 300).astype(np.int32)
    leaves = np.sort(rng.choice(300, 120, replace=False)).astype(np.int32)
    rows, slot = chunk_word_rows(word, leaves)
    expected_rows, inverse = np.unique(word[leaves], return_inverse=True)
    assert rows.dtype == np.int64 and np.array_equal(rows, expected_rows) and np.array_equal(slot, inverse)
    empty_rows, empty_slot = chunk_word_rows(word, leaves[:0])
    assert empty_rows.size == 0 and empty_slot.size == 0

    all_rows = np.union1d(rows, [3, 41, 77]).astype(np.int64)
    values = rng.standard_normal((all_rows.size, 5))
    part = rng.standard_normal((rows.size, 5))
    expected = values.copy()
    np.add.at(expected, np.searchsorted(all_rows, rows), part)
    add_word_rows(values, all_rows, rows, part)
    assert np.array_equal(values, expected)


def test_merged_rows_is_the_sorted_union():
    from rntn_engine.kernels.word_rows import merged_rows

    rng = np.random.default_rng(5)
    for n, m in [(0, 0), (0, 4), (5, 0), (30, 40), (200, 7)]:
        a = np.unique(rng.integers(0, 60, size=n)).astype(np.int64)
        b = np.unique(rng.integers(0, 60, size=m)).astype(np.int64)
        assert np.array_equal(merged_rows(a, b), np.union1d(a, b))  # NumPy's set union as the reference
