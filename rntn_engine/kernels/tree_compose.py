"""Composition up the tree for the recursive (RNN) and tensor (RNTN) models: forward and backward.

Legend: N nodes in the batch, M internal nodes, d vector size, D = 2d,
|V| vocabulary size. Nodes are in post-order; ``order`` lists internal nodes by
height and ``level_start`` cuts it into levels (see data/batches.py).

Forward (RNN; RNTN, 2013), for every node in post-order:

    leaf with word w:        p = L[w]
    internal, children l, r: x = [p_l ; p_r]                      (D,)
        RNN:   p = tanh(W x + b)
        RNTN:  p = tanh(W x + b + h),   h_k = x^T V[k] x,  k = 1..d

Only the symmetric part of V[k] reaches h_k, so with S[k] = V[k] + V[k]^T and
q_k = S[k] x (a D-vector per k), h_k = x . q_k / 2. A level of n nodes computes
every q at once, Q = X Vsym, where Vsym (D, d*D) holds Vsym[i, k*D + j] = S[k][i, j].
The same Q gives the tensor part of the input gradient, d h_k / d x = q_k. A level's tensor
term, forward and input gradient, is in kernels/tensor_term.py (BLAS for wide levels, a
register-blocked kernel of our own selectable for narrow ones).

Backward, in reverse (top level first), with e the error reaching p (from its own
classifier plus its parent):

    delta = e * (1 - p*p)                                          (d,)
    dW   += delta x^T        db += delta
    dV[k] += delta_k x x^T                                         (RNTN)
    e_x   = W^T delta + sum_k delta_k q_k                          (D,)
    e_l  += e_x[:d]          e_r += e_x[d:]
    leaf:   dL[w] += e       (kernels/word_rows.py: into the rows the minibatch touched)

dW and dV are accumulated once per batch, as single matrix products over all M
internal nodes: dW += Delta^T X and, in the pair layout of kernels/tensor_term.py
(pairs i <= j, u_p = x_i x_j), dT = Delta^T U, then added to dV with
dV[k, i, j] = dV[k, j, i] += dT[k, p(i,j)].

Cost per internal node: forward 2 d D + d D^2 multiply-adds, backward O(d D) for e_x
(from the kept Q) and d D(D+1)/2 for dV: about 12 d^3 floating-point operations for
the tensor terms where the unsymmetrised form needs 24 d^3.
"""

from __future__ import annotations

import numpy as np
from numba import prange

from rntn_engine.jit_setup import numeric_kernel, threaded_kernel

from rntn_engine.kernels.tensor_term import (
    NODE_BLOCK,
    TILE,
    tensor_term_forward_blas,
    tensor_term_forward_own,
    tensor_gradient_pairs,
    tensor_term_forward_pairs,
    tensor_term_input_gradient,
)
from rntn_engine.kernels.vector_math import tanh_bias_rows


@numeric_kernel
def symmetric_tensor_layout(Vsym, V):
    """Vsym (D, d*D) out: Vsym[i, k*D + j] = V[k, i, j] + V[k, j, i].   V (d, D, D)."""
    d, D, _ = V.shape
    for k in range(d):  # V[k] (D x D) stays in cache while its transpose is read
        for i in range(D):
            for j in range(D):
                Vsym[i, k * D + j] = V[k, i, j] + V[k, j, i]


@threaded_kernel
def symmetric_tensor_layout_parts(Vsym, V, cuts):
    """symmetric_tensor_layout for the k of each fixed range cuts[p]..cuts[p+1]-1, the ranges on numba's
    threads (every element is written by one range, with the same arithmetic: any thread count).
    cuts (parts + 1,) int64 ascending, from 0 to d."""
    D = V.shape[1]
    for p in prange(cuts.shape[0] - 1):
        a = cuts[p]
        z = cuts[p + 1]
        symmetric_tensor_layout(Vsym[:, a * D : z * D], V[a:z])


@numeric_kernel
def forward_compose(P, X, Z, Q, L, W, b, Vsym, word, left, right, order, level_start, with_tensor,
                    own_rows, T):
    """Node vectors of a whole batch, level by level.

    P (N, d) out: node vectors.   X (M, D) out: children [p_l ; p_r] per internal node, in `order`.
    Z (M, d) workspace: pre-activations, then the level's p (kernels/vector_math.py).
    Q (M, d*D) out: X Vsym (used only when with_tensor), kept
    for the backward pass. Forward only, T (d, D(D+1)/2) is the tensor's pair layout and Q a
    workspace of (R, d*D + 4d): each level is done in blocks of R rows through the pair
    products (tensor_term.py), so memory does not grow with the batch; otherwise T is (0, 0).
    L (|V|, d); W (d, D); b (d,); Vsym (D, d*D); word/left/right (N,) int32;
    order (M,) int32; level_start (H+1,) int32; with_tensor: add the tensor term (True for the RNTN,
    False for the RNN: the model specification decides, model/rnn_model.py).
    own_rows: levels of at most this many nodes take the tensor term's own kernel, wider ones
    BLAS (kernels/tensor_term.py); 0: BLAS for every level.
    """
    N, d = P.shape
    hv = np.empty(d, dtype=P.dtype)  # workspaces of the tensor term
    acc = np.empty((NODE_BLOCK, TILE), dtype=P.dtype)
    for i in range(N):  # leaves: p = L[w]
        if left[i] < 0:
            w = word[i]
            for k in range(d):
                P[i, k] = L[w, k]
    for level in range(level_start.shape[0] - 1):
        a = level_start[level]
        z = level_start[level + 1]
        for m in range(a, z):  # x = [p_l ; p_r]
            i = order[m]
            for k in range(d):
                X[m, k] = P[left[i], k]
                X[m, d + k] = P[right[i], k]
        np.dot(X[a:z], W.T, Z[a:z])  # W x for the level: (n, D) x (D, d)
        if with_tensor and T.shape[0] > 0:  # forward only: h from the pair products, in blocks of R rows
            work = Q.reshape(-1)
            for s in range(a, z, Q.shape[0]):
                tensor_term_forward_pairs(Z, work, X, T, s, min(z, s + Q.shape[0]))
        elif with_tensor:  # q_k = S[k] x into Q (kept for backward), then h_k = x . q_k / 2 into Z
            if z - a <= own_rows:
                tensor_term_forward_own(Z, Q, X, Vsym, hv, acc, a, z, a)
            else:
                tensor_term_forward_blas(Z, Q, X, Vsym, hv, a, z, a)
        tanh_bias_rows(P, Z, b, order, a, z)  # p = tanh(W x + b + h)


@numeric_kernel
def backward_compose(dW, db, dT, E, Delta, EX, P, X, Q, U, W, left, right, order, level_start, with_tensor):
    """Gradients of W, b (and the pair-layout tensor gradient), and errors down to the leaves.

    dW (d, D) += ; db (d,) += ; dT (d, D(D+1)/2) out: Delta^T U (RNTN; kernels/tensor_term.py) -- a
    per-chunk workspace, overwritten; dV is then set from the chunks' sums (set_pair_layout_gradient).
    E (N, d) in/out: error reaching each node vector; on entry from the node's own
    classifier, on exit also from its parent (leaves' rows are then final).
    Delta (M, d), EX (M, D) workspaces.  P, X, Q from forward_compose; W (d, D).
    U (M, D(D+1)/2) workspace of the pair products, which may share Q's memory (Q is read first).
    """
    N, d = P.shape
    M = order.shape[0]
    for level in range(level_start.shape[0] - 2, -1, -1):  # top level first
        a = level_start[level]
        z = level_start[level + 1]
        for m in range(a, z):  # delta = e * (1 - p*p)
            i = order[m]
            for k in range(d):
                Delta[m, k] = E[i, k] * (1.0 - P[i, k] * P[i, k])
        np.dot(Delta[a:z], W, EX[a:z])  # W^T delta for the level: (n, d) x (d, D)
        if with_tensor:  # + sum_k delta_k q_k
            tensor_term_input_gradient(EX, Delta, Q, a, z)
        for m in range(a, z):  # e_l += e_x[:d], e_r += e_x[d:]
            i = order[m]
            l = left[i]
            r = right[i]
            for k in range(d):
                E[l, k] += EX[m, k]
                E[r, k] += EX[m, d + k]
    if M == 0:
        if with_tensor:
            dT[:, :] = 0.0
        return
    dW += np.dot(Delta.T, X)  # sum_m delta_m x_m^T: (d, M) x (M, D)
    for m in range(M):
        for k in range(d):
            db[k] += Delta[m, k]
    if with_tensor:  # dT = Delta^T U, straight into the chunk's workspace (U may overwrite Q: done with it)
        tensor_gradient_pairs(dT, U, X, Delta)
