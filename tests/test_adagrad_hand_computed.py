"""AdaGrad with L2, eps != 0, a different gradient for every element and a frozen group, against
values computed in this file with plain Python floats -- for both update paths: the fused
``AdaGrad.step_with_l2`` that training runs (kernels/adagrad_step.py ``adagrad_l2_step``) and
``AdaGrad.step`` given the gradient with the L2 term already added; and for the word rows'
update (``adagrad_l2_rows_step``), which reaches only the rows a minibatch touched and may
pull them toward their starting values instead of zero.

The rule (AdaGrad, 2011, diagonal form; written out here, not imported):
    g_i    = data gradient_i + lambda_group * theta_i       (biases: lambda = 0)
    G_i   += g_i * g_i
    theta_i -= lr * g_i / (sqrt(G_i) + eps)                 (eps OUTSIDE the square root)
A frozen group keeps theta and G unchanged. eps = 0.5 is large on purpose: sqrt(G + eps) and
sqrt(G) + eps then differ in the first digit.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from rntn_engine.model.adagrad import AdaGrad
from rntn_engine.model.objective import L2Strengths
from rntn_engine.model.parameters import Gradient, ModelShape, Parameters

# rnn, |V| = 2, d = 1, C = 2: L (2, 1), W (1, 2), b (1,), Ws (2, 1), bs (2,) -- nine scalars, in this order
SHAPE = ModelShape("rnn", 2, 1, 2, "float64")
NAMES = ["L", "L", "W", "W", "b", "Ws", "Ws", "bs", "bs"]
THETA0 = [0.5, -0.3, 0.8, -0.6, 0.2, 0.4, -0.7, 0.1, -0.2]
STEPS = [  # data gradients of two steps, one value per element
    [0.7, -0.2, 0.3, 0.45, -0.5, 0.25, 0.6, -0.35, 0.15],
    [-0.1, 0.4, -0.3125, 0.2, 0.3, -0.55, 0.05, 0.25, -0.4],
]
L2 = L2Strengths(words=0.5, compose=0.25, tensor=0.0, classifier=0.125)
LAMBDA = {"L": 0.5, "W": 0.25, "b": 0.0, "Ws": 0.125, "bs": 0.0}
LR, EPS = 0.1, 0.5


def plain_python_adagrad(frozen: tuple[str, ...]):
    """Expected (theta, G, penalty) after each step -- computed with plain Python floats (not numpy)."""
    theta, G = list(THETA0), [0.0] * len(THETA0)
    after = []
    for data in STEPS:
        penalty = sum(0.5 * LAMBDA[n] * t * t for n, t in zip(NAMES, theta))  # at the parameters before the step
        full = [g + LAMBDA[n] * t for n, g, t in zip(NAMES, data, theta)]
        for i, name in enumerate(NAMES):
            if name in frozen:
                continue
            G[i] += full[i] * full[i]
            theta[i] -= LR * full[i] / (math.sqrt(G[i]) + EPS)
        after.append((list(theta), list(G), penalty, full))
    return after


def gradient_of(values) -> Gradient:
    """A Gradient holding ``values`` (one per scalar, in parameter order); both rows of L touched."""
    grads = Gradient(SHAPE)
    grads.rows["L"].reset(np.array([0, 1]))
    grads.rows["L"].values[:, 0] = values[:2]
    grads.flat[:] = values[2:]
    return grads


def test_the_plain_python_expectation_agrees_with_a_step_worked_by_hand():
    # W[0, 0] (element 2), worked by hand: theta = 0.8, data gradient 0.3, lambda 0.25
    #   step 1: g = 0.3 + 0.25 * 0.8 = 0.5;  G = 0.25;  theta = 0.8 - 0.1 * 0.5 / (0.5 + 0.5) = 0.75
    #   step 2: g = -0.3125 + 0.25 * 0.75 = -0.125;  G = 0.25 + 0.015625 = 0.265625
    #           theta = 0.75 + 0.1 * 0.125 / (sqrt(0.265625) + 0.5) = 0.75 + 0.0125 / 1.0153882... = 0.76231056...
    (theta1, G1, _, _), (theta2, G2, _, _) = plain_python_adagrad(())
    assert theta1[2] == 0.75 and G1[2] == 0.25
    assert G2[2] == 0.265625 and theta2[2] == pytest.approx(0.76231056, abs=1e-8)
    # with eps wrongly inside the root, step 1 would give 0.8 - 0.05 / sqrt(0.75) = 0.7422649...: far from 0.75


@pytest.mark.parametrize("frozen", [(), ("L",)], ids=["all-trained", "L-frozen"])
def test_fused_step_with_l2_matches_plain_python(frozen):
    params = Parameters(SHAPE, np.array(THETA0))
    opt = AdaGrad(params, lr=LR, eps=EPS, frozen=frozen)
    for data, (theta, G, penalty, _) in zip(STEPS, plain_python_adagrad(frozen)):
        grads = gradient_of(data)
        returned = opt.step_with_l2(params, grads, L2)
        np.testing.assert_allclose(params.flat, theta, rtol=1e-15, atol=0)
        np.testing.assert_allclose(opt.sums.flat, G, rtol=1e-15, atol=0)
        assert returned == pytest.approx(penalty, rel=1e-15)
        assert not grads.flat.any() and not grads.rows["L"].values.any()  # zeroed, frozen group included
    if frozen:
        assert params.L.reshape(-1).tolist() == THETA0[:2] and not opt.sums.L.any()


@pytest.mark.parametrize("frozen", [(), ("L",)], ids=["all-trained", "L-frozen"])
def test_plain_step_matches_plain_python(frozen):
    params = Parameters(SHAPE, np.array(THETA0))
    opt = AdaGrad(params, lr=LR, eps=EPS, frozen=frozen)
    for theta, G, _, full in plain_python_adagrad(frozen):
        opt.step(params, gradient_of(full))  # the gradient with the L2 term already added, as loss_and_gradient
        # gives it
        np.testing.assert_allclose(params.flat, theta, rtol=1e-15, atol=0)
        np.testing.assert_allclose(opt.sums.flat, G, rtol=1e-15, atol=0)
    if frozen:
        assert params.L.reshape(-1).tolist() == THETA0[:2] and not opt.sums.L.any()


# Word rows: |V| = 4 words of d = 2; a minibatch touched rows 1 and 3 only; L2 pulls toward the anchor.
WORD_THETA0 = [[0.5, -0.25], [0.75, 0.125], [-0.5, 0.375], [0.25, -0.625]]
WORD_ANCHOR = [[0.0, 0.0], [0.5, 0.25], [0.0, 0.0], [0.5, -0.5]]
WORD_STEPS = [  # (touched rows, data gradient of those rows)
    ([1, 3], [[0.3, -0.4], [-0.2, 0.6]]),
    ([3], [[0.1, -0.15]]),
]
WORD_LAMBDA = 0.5


def plain_python_word_rows(anchored: bool):
    """Expected (theta, G, penalty) after each step for the word rows -- plain Python floats."""
    theta = [list(r) for r in WORD_THETA0]
    G = [[0.0, 0.0] for _ in theta]
    after = []
    for rows, data in WORD_STEPS:
        penalty = 0.0
        for r, row_grad in zip(rows, data):
            for c in range(2):
                diff = theta[r][c] - (WORD_ANCHOR[r][c] if anchored else 0.0)
                penalty += 0.5 * WORD_LAMBDA * diff * diff
                g = row_grad[c] + WORD_LAMBDA * diff
                G[r][c] += g * g
                theta[r][c] -= LR * g / (math.sqrt(G[r][c]) + EPS)
        after.append(([list(r) for r in theta], [list(r) for r in G], penalty))
    return after


def test_the_word_row_expectation_agrees_with_a_step_worked_by_hand():
    # row 1, column 0, anchored: theta 0.75, anchor 0.5, data gradient 0.3, lambda 0.5
    #   g = 0.3 + 0.5 * (0.75 - 0.5) = 0.425;  G = 0.180625;  theta = 0.75 - 0.1 * 0.425 / (0.425 + 0.5)
    #     = 0.75 - 0.0459459459... = 0.7040540540...
    (theta1, G1, _), _ = plain_python_word_rows(anchored=True)
    assert G1[1][0] == pytest.approx(0.180625, rel=1e-15)
    assert theta1[1][0] == pytest.approx(0.75 - 0.0425 / 0.925, rel=1e-15)
    assert theta1[0] == WORD_THETA0[0] and theta1[2] == WORD_THETA0[2]  # rows no minibatch touched


@pytest.mark.parametrize("anchored", [False, True], ids=["toward-zero", "toward-start"])
def test_word_rows_step_matches_plain_python(anchored):
    shape = ModelShape("rnn", 4, 2, 2, "float64")
    params = Parameters(shape)
    params.L[:] = WORD_THETA0
    opt = AdaGrad(params, lr=LR, eps=EPS)
    anchors = {"L": np.array(WORD_ANCHOR)} if anchored else {}
    grads = Gradient(shape)
    for (rows, data), (theta, G, penalty) in zip(WORD_STEPS, plain_python_word_rows(anchored)):
        grads.rows["L"].reset(np.array(rows))
        grads.rows["L"].values[:] = data
        returned = opt.step_with_l2(params, grads, L2Strengths(words=WORD_LAMBDA, compose=0.0, tensor=0.0,
                                                               classifier=0.0), anchors)
        np.testing.assert_allclose(params.L, theta, rtol=1e-15, atol=0)
        np.testing.assert_allclose(opt.sums.L, G, rtol=1e-15, atol=0)
        assert returned == pytest.approx(penalty, rel=1e-15)
        assert not grads.rows["L"].values.any()
    assert params.L[0].tolist() == WORD_THETA0[0] and params.L[2].tolist() == WORD_THETA0[2]  # bit for bit
