"""AdaGrad with L2, eps != 0, a different gradient for every element and a frozen group, against
values computed in this file with plain Python floats -- for both update paths: the fused
``AdaGrad.step_with_l2`` that training runs (kernels/adagrad_step.py ``adagrad_l2_step``) and
``AdaGrad.step`` (``adagrad_step``) given the gradient with the L2 term already added.

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
from rntn_engine.model.parameters import ModelShape, Parameters

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
    grads = params.zeros_like()
    for data, (theta, G, penalty, _) in zip(STEPS, plain_python_adagrad(frozen)):
        grads.flat[:] = data
        returned = opt.step_with_l2(params, grads, L2)
        np.testing.assert_allclose(params.flat, theta, rtol=1e-15, atol=0)
        np.testing.assert_allclose(opt.sums.flat, G, rtol=1e-15, atol=0)
        assert returned == pytest.approx(penalty, rel=1e-15)
        assert not grads.flat.any()  # the fused pass zeroes the gradient, frozen group included
    if frozen:
        assert params.L.reshape(-1).tolist() == THETA0[:2] and not opt.sums.L.any()


@pytest.mark.parametrize("frozen", [(), ("L",)], ids=["all-trained", "L-frozen"])
def test_plain_step_matches_plain_python(frozen):
    params = Parameters(SHAPE, np.array(THETA0))
    opt = AdaGrad(params, lr=LR, eps=EPS, frozen=frozen)
    grads = params.zeros_like()
    for theta, G, _, full in plain_python_adagrad(frozen):
        grads.flat[:] = full  # the gradient with the L2 term already added (as loss_and_gradient gives it)
        opt.step(params, grads)
        np.testing.assert_allclose(params.flat, theta, rtol=1e-15, atol=0)
        np.testing.assert_allclose(opt.sums.flat, G, rtol=1e-15, atol=0)
    if frozen:
        assert params.L.reshape(-1).tolist() == THETA0[:2] and not opt.sums.L.any()
