"""The tensor term's kernels (kernels/tensor_term.py), both ways of computing a level, against the
NumPy twin (kernels/numpy_reference.py), and the own kernel inside the whole objective against the
node-by-node twin and an independent autodiff library (the `autograd` package, HIPS).

The forward-only pair products (h without Q) are checked the same way, and inside the objective by
tests/test_kernels_match_reference.py (its forward-only pass). Sizes are chosen to reach every branch: levels of 1..9 nodes (whole blocks of 4 and the 1..3
left over), d = 12 (d*D = 288 columns: one whole tile of 256 and a short one), an offset Q row
(the forward-only pass reuses a block of Q rows).
"""

import autograd
import autograd.numpy as anp
import numpy as np
import pytest

from random_trees import engine_case

from rntn_engine.kernels.numpy_reference import (
    reference_backward,
    reference_forward,
    reference_tensor_input_gradient,
    reference_tensor_term,
)
from rntn_engine.kernels.tensor_term import (
    NODE_BLOCK,
    TILE,
    add_pair_layout_gradient,
    set_pair_layout_gradient,
    pair_layout,
    tensor_term_forward_blas,
    tensor_term_forward_own,
    tensor_term_forward_pairs,
    tensor_gradient_pairs,
    tensor_term_input_gradient,
)
from rntn_engine.kernels.tree_compose import symmetric_tensor_layout
from rntn_engine.model.objective import L2Strengths, TreeModelObjective
from rntn_engine.model.parameters import Gradient

TOLERANCE = {"float64": 1e-12, "float32": 2e-5}


def relative_error(a, b):
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    return float(np.max(np.abs(a - b)) / max(np.max(np.abs(a)), np.max(np.abs(b)), 1e-30))


def level_case(d, n, dtype, seed):
    rng = np.random.default_rng(seed)
    D = 2 * d
    V = rng.standard_normal((d, D, D)).astype(dtype)
    Vsym = np.zeros((D, d * D), dtype=dtype)
    symmetric_tensor_layout(Vsym, V)
    X = rng.standard_normal((n + 3, D)).astype(dtype)  # rows 2..n+1 are the level
    return V, Vsym, X


@pytest.mark.parametrize("dtype", ["float64", "float32"])
@pytest.mark.parametrize("d", [3, 12])
@pytest.mark.parametrize("n", [1, 3, 4, 5, 9])
@pytest.mark.parametrize("kernel", ["own", "blas"])
def test_level_forward_equals_twin(kernel, n, d, dtype):
    assert d * 2 * d > TILE or d == 3  # d = 12 spans more than one tile
    V, Vsym, X = level_case(d, n, dtype, seed=n + d)
    s, e, q0 = 2, 2 + n, 1
    Z = np.ones((X.shape[0], d), dtype=dtype)  # h is added to what is there
    Q = np.full((n + 2, d * 2 * d), np.nan, dtype=dtype)
    hv = np.empty(d, dtype=dtype)
    if kernel == "own":
        tensor_term_forward_own(Z, Q, X, Vsym, hv, np.empty((NODE_BLOCK, TILE), dtype=dtype), s, e, q0)
    else:
        tensor_term_forward_blas(Z, Q, X, Vsym, hv, s, e, q0)
    Q_ref, H_ref = reference_tensor_term(V.astype(np.float64), X[s:e].astype(np.float64))
    assert relative_error(Q[q0 : q0 + n], Q_ref) < TOLERANCE[dtype]
    assert relative_error(Z[s:e] - 1.0, H_ref) < TOLERANCE[dtype]
    assert np.all(Z[:s] == 1.0) and np.all(Z[e:] == 1.0)  # rows outside the level untouched
    assert np.all(np.isnan(Q[:q0])) and np.all(np.isnan(Q[q0 + n :]))


@pytest.mark.parametrize("dtype", ["float64", "float32"])
@pytest.mark.parametrize("d", [3, 12])
@pytest.mark.parametrize("n", [1, 4, 9])
def test_forward_only_pair_products_equal_twin(n, d, dtype):
    V, _, X = level_case(d, n, dtype, seed=3 * n + d)
    D = 2 * d
    T = np.full((d, D * (D + 1) // 2), np.nan, dtype=dtype)
    pair_layout(T, V)
    assert not np.any(np.isnan(T))  # every pair written
    Z = np.ones((X.shape[0], d), dtype=dtype)
    work = np.full((D * (D + 1) // 2 + D + d) * n, np.nan, dtype=dtype)
    tensor_term_forward_pairs(Z, work, X, T, 2, 2 + n)
    _, H_ref = reference_tensor_term(V.astype(np.float64), X[2 : 2 + n].astype(np.float64))
    assert relative_error(Z[2 : 2 + n] - 1.0, H_ref) < TOLERANCE[dtype]
    assert np.all(Z[:2] == 1.0) and np.all(Z[2 + n :] == 1.0)


@pytest.mark.parametrize("dtype", ["float64", "float32"])
def test_tensor_gradient_in_pair_layout_equals_sum_of_outer_products(dtype):
    d, M = 4, 7
    rng = np.random.default_rng(11)
    X = rng.standard_normal((M, 2 * d)).astype(dtype)
    Delta = rng.standard_normal((M, d)).astype(dtype)
    P = 2 * d * (2 * d + 1) // 2
    dT = np.full((d, P), np.nan, dtype=dtype)
    tensor_gradient_pairs(dT, np.full((M, P), np.nan, dtype=dtype), X, Delta)
    dV = np.ones((d, 2 * d, 2 * d), dtype=dtype)  # the fold adds to what is there
    add_pair_layout_gradient(dV, dT)
    X64, Delta64 = X.astype(np.float64), Delta.astype(np.float64)
    expected = sum(np.einsum("k,i,j->kij", Delta64[m], X64[m], X64[m]) for m in range(M))  # dV[k] += delta_k x x^T
    assert relative_error(dV - 1.0, expected) < TOLERANCE[dtype]


@pytest.mark.parametrize("dtype", ["float64", "float32"])
def test_setting_dv_from_the_pair_layout_has_the_bits_of_zeroing_then_adding(dtype):
    d = 3
    P = 2 * d * (2 * d + 1) // 2
    dT = np.random.default_rng(4).standard_normal((d, P)).astype(dtype)
    dT[0, :5] = -0.0  # 0.0 + -0.0 is +0.0: a plain copy would keep the minus sign
    added = np.zeros((d, 2 * d, 2 * d), dtype=dtype)
    add_pair_layout_gradient(added, dT)
    written = np.full((d, 2 * d, 2 * d), np.nan, dtype=dtype)  # whatever was there is overwritten
    set_pair_layout_gradient(written, (dT,), 0, d)
    assert added.tobytes() == written.tobytes()
    other = np.random.default_rng(5).standard_normal((d, P)).astype(dtype)  # two chunks: added in chunk order
    add_pair_layout_gradient(added, other)
    set_pair_layout_gradient(written, (dT, other), 0, d)
    assert added.tobytes() == written.tobytes()


@pytest.mark.parametrize("dtype", ["float64", "float32"])
def test_level_input_gradient_equals_twin(dtype):
    d, n = 5, 6
    V, Vsym, X = level_case(d, n, dtype, seed=7)
    Q = np.zeros((X.shape[0], d * 2 * d), dtype=dtype)
    np.dot(X, Vsym, Q)
    Delta = np.random.default_rng(8).standard_normal((X.shape[0], d)).astype(dtype)
    EX = np.ones((X.shape[0], 2 * d), dtype=dtype)
    tensor_term_input_gradient(EX, Delta, Q, 2, 2 + n)
    ref = reference_tensor_input_gradient(V.astype(np.float64), X[2 : 2 + n].astype(np.float64),
                                          Delta[2 : 2 + n].astype(np.float64))
    assert relative_error(EX[2 : 2 + n] - 1.0, ref) < TOLERANCE[dtype]
    assert np.all(EX[:2] == 1.0) and np.all(EX[2 + n :] == 1.0)


def own_kernel_objective(params, l2=None):
    objective = TreeModelObjective(params, l2 or L2Strengths(0, 0, 0, 0))
    objective.model.own_kernel_rows = 1 << 30  # every level through the own kernel
    return objective


@pytest.mark.parametrize("dtype", ["float64", "float32"])
@pytest.mark.parametrize("seed", [0, 1])
def test_objective_with_own_kernel_equals_node_by_node_twin(dtype, seed):
    params, bank, chunks, full, _ = engine_case("rntn", dtype, dim=12, seed=seed, param_scale=0.5)
    objective = own_kernel_objective(params)
    grads = Gradient(params.shape)
    loss = objective.loss_and_gradient(params, grads, chunks)
    scale = 1.0 / bank.n_trees
    P, Y, ref_loss = reference_forward(params.L, params.W, params.b, params.V, params.Ws, params.bs,
                                       full.word, full.left, full.right, full.label, scale)
    ref = reference_backward(params.L, params.W, params.b, params.V, params.Ws, params.bs,
                             full.word, full.left, full.right, full.label, scale, P, Y)
    tol = 1e-12 if dtype == "float64" else 1e-4
    assert relative_error(loss, ref_loss) < tol
    for name in params.names():
        assert relative_error(grads.dense(name), ref[name]) < tol, name
    _, P_fast, _ = objective.forward(params, full)
    assert relative_error(P_fast, P) < tol


def test_own_kernel_gradient_matches_autograd_library():
    """autograd differentiates the RNTN written from its equations (h_k = x^T V[k] x; no code of ours)."""
    params, bank, chunks, full, _ = engine_case("rntn", "float64", dim=5, seed=4, param_scale=1.0)
    objective = own_kernel_objective(params)
    grads = Gradient(params.shape)
    loss = objective.loss_and_gradient(params, grads, chunks)
    word, left, right, label = full.word, full.left, full.right, full.label

    def J(W, b, V, Ws, bs, L):
        P = [None] * len(word)
        total = 0.0
        for i in range(len(word)):
            if left[i] < 0:
                p = L[word[i]]
            else:
                x = anp.concatenate([P[left[i]], P[right[i]]])
                p = anp.tanh(anp.dot(W, x) + b + anp.stack([anp.dot(x, anp.dot(V[k], x)) for k in range(V.shape[0])]))
            P[i] = p
            if label[i] >= 0:
                s = anp.dot(Ws, p) + bs
                total = total - (s[label[i]] - anp.log(anp.sum(anp.exp(s))))
        return total / bank.n_trees

    args = (params.W, params.b, params.V, params.Ws, params.bs, params.L)
    assert loss == pytest.approx(J(*args), rel=1e-12)
    for index, name in enumerate(["W", "b", "V", "Ws", "bs", "L"]):
        expected = autograd.grad(J, index)(*args)
        assert relative_error(grads.dense(name), expected) < 1e-9, name
