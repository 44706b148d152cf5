"""Composition up the tree for the matrix-vector recursive model (MV-RNN): forward and backward.

Legend: N nodes in the batch, M internal nodes, d vector size, D = 2d, |V| vocabulary size.
Nodes are in post-order; ``order`` lists internal nodes by height and ``level_start``
cuts it into levels (see data/batches.py). Every node carries a vector p (d,) and a
matrix P (d, d).

Forward (MV-RNN, 2012), for every node in post-order:

    leaf with word w:   p = L[w],   P = LM[w]
    internal, left child (a, A), right child (b, B):
        x = [B a ; A b]                                   (D,)  each child's vector times the other's matrix
        p = tanh(W x + bias)                              (d,)
        P = WM [A ; B] = WM[:, :d] A + WM[:, d:] B        (d, d)

A level's W x is one matrix product, (n, D) x (D, d), as in tree_compose.py. Its
WM [A ; B] is one product too, over the children's matrices stacked *transposed*:
ABt (M*d, D) holds in row m*d + j the column j of [A ; B], i.e. [A[:, j] ; B[:, j]],
so (ABt WM^T)[m*d + j, r] = P[r, j]: PMt = ABt WM^T holds P^T, node after node.

Backward, top level first, with e the error reaching p (its own classifier plus its
parent) and EP the error reaching P (from its parent only; zero at a root, whose
matrix feeds nothing):

    delta  = e * (1 - p*p)                                (d,)
    dW    += delta x^T             dbias += delta
    e_x    = W^T delta;   g = e_x[:d] reaches B a,   h = e_x[d:] reaches A b
    e_a   += B^T g                 EP_B  += g a^T
    e_b   += A^T h                 EP_A  += h b^T
    dWM   += EP [A ; B]^T          [EP_A ; EP_B] += WM^T EP
    leaf:    dL[w] += e,   dLM[w] += EP        (kernels/word_rows.py, with rows of d*d for LM)

In the same transposed layout, EPt (M*d, d) holds EP^T (row m*d + j = EP[:, j]); a
level's EPt WM is (WM^T EP)^T, one product, and dWM += EPt^T ABt is one product over
all M internal nodes of the batch, like dW += Delta^T X.

Cost per internal node: forward 2d^2 (B a, A b) + 2d^2 (W x) + 2d^3 (WM [A ; B])
multiply-adds, backward 2d^3 (WM^T EP) + 2d^3 (dWM) + O(d^2): about 12 d^3
floating-point operations per internal node per training step. Memory: each node
holds a d x d matrix (and its error in the backward pass), d^2 numbers where the
vector models hold d.
"""

from __future__ import annotations

import numpy as np

from rntn_engine.jit_setup import numeric_kernel
from rntn_engine.kernels.vector_math import tanh_bias_rows


@numeric_kernel
def forward_compose_mv(P, PM, X, Z, ABt, PMt, L, LM, W, b, WM, word, left, right, order, level_start):
    """Node vectors and node matrices of a whole batch, level by level.

    P (N, d) out: node vectors.   PM (N, d, d) out: node matrices.
    X (M, D) out: [B a ; A b] per internal node, in `order`.   Z (M, d) workspace: pre-activations, then p.
    ABt (M*d, D) out: children's matrices stacked transposed (module docstring).   PMt (M*d, d) workspace.
    L (|V|, d); LM (|V|, d, d); W (d, D); b (d,); WM (d, D); word/left/right (N,) int32;
    order (M,) int32; level_start (H+1,) int32.
    """
    N, d = P.shape
    for i in range(N):  # leaves: p = L[w], P = LM[w]
        if left[i] < 0:
            w = word[i]
            for r in range(d):
                P[i, r] = L[w, r]
                for k in range(d):
                    PM[i, r, k] = LM[w, r, k]
    for level in range(level_start.shape[0] - 1):
        a = level_start[level]
        z = level_start[level + 1]
        for m in range(a, z):
            i = order[m]
            lc = left[i]
            rc = right[i]
            for r in range(d):  # x = [B a ; A b]
                ba = 0.0
                ab = 0.0
                for k in range(d):
                    ba += PM[rc, r, k] * P[lc, k]
                    ab += PM[lc, r, k] * P[rc, k]
                X[m, r] = ba
                X[m, d + r] = ab
            for j in range(d):  # row m*d + j of ABt = [A[:, j] ; B[:, j]]
                for k in range(d):
                    ABt[m * d + j, k] = PM[lc, k, j]
                    ABt[m * d + j, d + k] = PM[rc, k, j]
        np.dot(X[a:z], W.T, Z[a:z])  # W x for the level: (n, D) x (D, d)
        np.dot(ABt[a * d : z * d], WM.T, PMt[a * d : z * d])  # P^T = [A ; B]^T WM^T: (n*d, D) x (D, d)
        tanh_bias_rows(P, Z, b, order, a, z)  # p = tanh(W x + b)
        for m in range(a, z):  # P[r, j] = PMt[m*d + j, r]
            i = order[m]
            for j in range(d):
                for r in range(d):
                    PM[i, r, j] = PMt[m * d + j, r]


@numeric_kernel
def backward_compose_mv(dW, db, dWM, E, EM, Delta, EX, EPt, EABt, P, PM, X, ABt, W, WM, left, right, order,
                        level_start):
    """Gradients of W, b, WM, and errors down to the leaves' vectors and matrices.

    dW (d, D) += ; db (d,) += ; dWM (d, D) += .
    E (N, d) in/out: error reaching each node vector; on entry from the node's own classifier,
    on exit also from its parent (leaves' rows are then final).
    EM (N, d, d) out: error reaching each node matrix, from its parent (zero at roots).
    Delta (M, d), EX (M, D), EABt (M*d, D) workspaces; EPt (M*d, d) out: EP^T per internal node.
    P, PM, X, ABt from forward_compose_mv; W (d, D); WM (d, D).
    """
    N, d = P.shape
    M = order.shape[0]
    EM[:] = 0.0  # a node matrix is reached only through its parent: nothing before the top level
    for level in range(level_start.shape[0] - 2, -1, -1):  # top level first
        a = level_start[level]
        z = level_start[level + 1]
        for m in range(a, z):  # delta = e * (1 - p*p);  row m*d + j of EPt = EP[:, j]
            i = order[m]
            for r in range(d):
                Delta[m, r] = E[i, r] * (1.0 - P[i, r] * P[i, r])
            for j in range(d):
                for r in range(d):
                    EPt[m * d + j, r] = EM[i, r, j]
        np.dot(Delta[a:z], W, EX[a:z])  # e_x = W^T delta for the level: (n, d) x (d, D)
        np.dot(EPt[a * d : z * d], WM, EABt[a * d : z * d])  # (WM^T EP)^T for the level: (n*d, d) x (d, D)
        for m in range(a, z):
            i = order[m]
            lc = left[i]
            rc = right[i]
            for k in range(d):  # e_a += B^T g,  e_b += A^T h
                ea = 0.0
                eb = 0.0
                for r in range(d):
                    ea += PM[rc, r, k] * EX[m, r]
                    eb += PM[lc, r, k] * EX[m, d + r]
                E[lc, k] += ea
                E[rc, k] += eb
            for r in range(d):  # EP_B += g a^T,  EP_A += h b^T
                g = EX[m, r]
                h = EX[m, d + r]
                for k in range(d):
                    EM[rc, r, k] += g * P[lc, k]
                    EM[lc, r, k] += h * P[rc, k]
            for j in range(d):  # [EP_A ; EP_B] += WM^T EP:  EP_A[k, j] += EABt[m*d + j, k], EP_B from d + k
                for k in range(d):
                    EM[lc, k, j] += EABt[m * d + j, k]
                    EM[rc, k, j] += EABt[m * d + j, d + k]
    if M == 0:
        return
    dW += np.dot(Delta.T, X)  # sum_m delta_m x_m^T: (d, M) x (M, D)
    for m in range(M):
        for r in range(d):
            db[r] += Delta[m, r]
    dWM += np.dot(EPt.T, ABt)  # sum_m EP_m [A_m ; B_m]^T: (d, M*d) x (M*d, D)
