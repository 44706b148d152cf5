"""Softmax classifier at every node, with cross-entropy loss: forward and backward.

Legend: N nodes in the batch, d vector size, C classes.

Forward, for every node i with vector p_i (RNTN, 2013), and a weight w_c per class
(all 1 for the plain cross-entropy):

    s_i = Ws p_i + bs                        (C,)
    y_i = softmax(s_i)                       (C,)
    loss = scale * sum over labelled i of  w[t_i] * (-log y_i[t_i])
         = scale * sum over labelled i of  w[t_i] * (logsumexp(s_i) - s_i[t_i])

Backward, with ds_i = scale * w[t_i] * (y_i - onehot(t_i)) at labelled nodes and 0 at
unlabelled ones:

    dWs += sum_i ds_i p_i^T                  (C, d)
    dbs += sum_i ds_i                        (C,)
    e_i  = Ws^T ds_i                         (d,)  error reaching the node vector p_i

``scale`` is 1/B for a minibatch of B trees. Kernels are pure: arrays in, arrays out.
"""

from __future__ import annotations

import numpy as np

from rntn_engine.jit_setup import numeric_kernel
from rntn_engine.kernels.vector_math import exp_nonpositive


@numeric_kernel
def forward_classify(Y, S, P, Ws, bs, label, weight, scale):
    """Class probabilities of every node and the scaled, class-weighted cross-entropy loss.

    Y (N, C) out: probabilities; S (N, C) out: scores Ws p + bs.
    P (N, d) node vectors; Ws (C, d); bs (C,); label (N,) int32, -1 = unlabelled;
    weight (C,) float64 the weight of each gold class (ones: the plain cross-entropy).
    Returns loss = scale * sum over labelled nodes of -weight[label[i]] * log Y[i, label[i]].
    """
    N, C = Y.shape
    np.dot(P, Ws.T, S)  # (N, d) x (d, C) -> (N, C)
    for i in range(N):  # s += bs; Y = s - max(s), row by row
        top = -np.inf
        for c in range(C):
            S[i, c] += bs[c]
            if S[i, c] > top:
                top = S[i, c]
        for c in range(C):
            Y[i, c] = S[i, c] - top
    flat = Y.reshape(-1)
    for j in range(flat.shape[0]):  # Y = exp(s - max(s)), one flat loop (kernels/vector_math.py)
        flat[j] = exp_nonpositive(np.float64(flat[j]))
    loss = 0.0
    for i in range(N):
        total = 0.0
        for c in range(C):
            total += Y[i, c]
        for c in range(C):
            Y[i, c] /= total
        t = label[i]
        if t >= 0:
            # -log softmax(s)[t] = log(sum exp(s - top)) + top - s[t], exact even when y[t] underflows
            top = S[i, 0]
            for c in range(1, C):
                if S[i, c] > top:
                    top = S[i, c]
            loss += weight[t] * (np.log(total) + top - S[i, t])
    return loss * scale


@numeric_kernel
def backward_classify(dWs, dbs, E, dS, Y, P, Ws, label, weight, scale):
    """Gradients of the classifier and the error each node vector receives from its own classifier.

    dWs (C, d) += ; dbs (C,) += ; E (N, d) out (overwritten): Ws^T ds per node.
    dS (N, C) workspace; Y (N, C) from forward_classify; P (N, d); Ws (C, d); label (N,);
    weight (C,) float64 as in forward_classify.
    """
    N, C = Y.shape
    for i in range(N):
        t = label[i]
        if t < 0:
            for c in range(C):
                dS[i, c] = 0.0
        else:
            g = scale * weight[t]  # equals scale, bit for bit, when the weight is 1
            for c in range(C):
                dS[i, c] = g * Y[i, c]
            dS[i, t] -= g
    # dWs += dS^T P: accumulate through a small product to keep `+=` the only write to gradients
    dWs += np.dot(dS.T, P)  # (C, N) x (N, d)
    for i in range(N):
        for c in range(C):
            dbs[c] += dS[i, c]
    np.dot(dS, Ws, E)  # (N, C) x (C, d) -> (N, d)
