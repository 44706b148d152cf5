"""The tensor term of the RNTN (2013): a level's forward, the input-gradient part of backward,
the forward-only pair products, and the tensor's gradient in the pair layout.

Legend: n nodes in a level (rows s..e-1 of the batch's level order), M internal nodes of a
chunk, d vector size, D = 2d, P = D(D+1)/2 pairs i <= j. Vsym (D, d*D) is the symmetric
layout of the tensor (tree_compose.py): Vsym[i, k*D + j] = S[k][i, j], S[k] = V[k] + V[k]^T.

Training forward, per node m of the level with children x = X[m] (D,):

    q_k  = S[k] x                 Q[m, k*D + j] = sum_i x_i Vsym[i, k*D + j]      (kept for backward)
    h_k  = x^T V[k] x = x . q_k / 2                                               Z[m, k] += h_k

Q is computed one of two ways, chosen by the level's width (tree_compose.forward_compose takes
the own kernel for levels of at most ``own_rows`` nodes; the vector models pass OWN_KERNEL_ROWS):

- BLAS (``tensor_term_forward_blas``): Q = X Vsym, one matrix product for the level.
- own (``tensor_term_forward_own``): register-blocked over nodes. Nodes go in blocks of
  NODE_BLOCK and the columns of Q in tiles of TILE; for each row i of Vsym the tile's
  TILE numbers are loaded once and added, times x_i of each node of the block (held in
  registers), into the block's NODE_BLOCK x TILE sums, which stay in L1 (``acc``). Q[m, c]
  is summed over i = 0..D-1 in that order. No packing of the tensor, no call per level.

Either way h is then taken for all k at once as one matrix-vector product per node (Q[m]
seen as a (d, D) matrix times x), instead of d dot products summed one term after another
(whose chain of dependent additions cost 0.4-2.6 us per node against 0.2-1.5 with the
product, measured).

Backward (input gradient), with delta = Delta[m] (d,) the error at the pre-activation:

    d h_k / d x = q_k,  so  e_x += sum_k delta_k q_k       EX[m, j] += sum_k Delta[m, k] Q[m, k*D + j]

Pair layout. With u_p = x_i x_j for the pairs p = p(i, j), i <= j, row by row over the upper
triangle, and T[k, p(i,j)] = V[k,i,j] + V[k,j,i] (i < j), V[k,i,i] (i = j) (``pair_layout``):

    h_k = sum_p T[k, p] u_p                     forward only (evaluation, prediction: no Q to
                                                keep): H^T = T U^T per block, (d, P) x (P, n),
                                                half the multiply-adds of X Vsym
                                                (``tensor_term_forward_pairs``)
    dT[k, p] = sum_m Delta[m, k] u_p(m)         the tensor's gradient, one batch-wide product
                                                dT = Delta^T U, (d, M) x (M, P), half the
                                                multiply-adds of the symmetric layout's X^T G
                                                (``tensor_gradient_pairs``)
    dV[k, i, j] = dV[k, j, i] += dT[k, p(i,j)]  (``add_pair_layout_gradient``; ``set_pair_layout_gradient``
                                                writes 0 + the chunks' sum instead, for a dV not
                                                yet zeroed)

Everything here is deterministic and independent of the number of threads (every product runs
single-threaded inside one chunk). The NumPy twins are ``reference_tensor_term`` and
``reference_tensor_input_gradient`` (kernels/numpy_reference.py).
"""

from __future__ import annotations

import numpy as np
from numba import prange

from rntn_engine.jit_setup import numeric_kernel, threaded_kernel

NODE_BLOCK = 4  # nodes per register block of the own kernel
TILE = 256  # columns of Q per tile of the own kernel: NODE_BLOCK x TILE sums stay in L1 (8 KiB in float64)

# Levels of at most this many nodes take the own kernel. Measured with
# `python scripts/bench_tensor_term.py widths` (2026-12-02, this project's 2-core machine, shared;
# OpenBLAS 0.3.31 SkylakeX kernels, AVX-512), GFLOP/s of Q and h for one level, best of 9, own / BLAS:
#   n =          1      2      3      4      8     16     32
#   d=25 f32  19/37  21/60  20/64  26/84  25/90  25/111 27/71
#   d=25 f64  12/16  13/35  13/36  19/51  19/58  19/60  19/51
#   d=50 f32  18/30  20/50  20/14  28/17  28/31  27/50  26/74
#   d=50 f64   7/7   10/12  11/13  18/19  18/32  18/43  17/58
# BLAS is as fast or faster at every width but for d = 50 float32 at n = 3..4, the run's noisiest
# cells (its own n = 1..2 and 8 are faster with BLAS): numba leaves LLVM's SLP vectorizer off and has
# no vector types, so the own kernel's sums go through L1 on every i instead of staying in vector
# registers (DEVELOPERS.md). Hence 0: BLAS for every level; the own kernel stays tested and
# selectable (`scripts/bench.py --own-kernel-rows N`) for a machine where it wins.
OWN_KERNEL_ROWS = 0


@numeric_kernel
def _tensor_h(Z, Q, X, hv, s, e, q0):
    """Z[m, k] += x_m . q_k / 2 for m in s..e-1 (Q row of node m: q0 + m - s); hv (d,) workspace."""
    d = Z.shape[1]
    D = 2 * d
    for m in range(s, e):
        np.dot(Q[q0 + m - s].reshape((d, D)), X[m], hv)  # (d, D) x (D,): h_k * 2 for every k
        for k in range(d):
            Z[m, k] += 0.5 * hv[k]


@numeric_kernel
def tensor_term_forward_blas(Z, Q, X, Vsym, hv, s, e, q0):
    """Rows s..e-1: Q[q0 : q0+e-s] = X[s:e] Vsym (one BLAS product), then Z[m] += h (module docstring).

    Z (M, d) in/out; Q (R, d*D) out, R >= q0 + e - s; X (M, D); Vsym (D, d*D); hv (d,) workspace.
    """
    np.dot(X[s:e], Vsym, Q[q0 : q0 + e - s])  # (n, D) x (D, d*D)
    _tensor_h(Z, Q, X, hv, s, e, q0)


@numeric_kernel
def tensor_term_forward_own(Z, Q, X, Vsym, hv, acc, s, e, q0):
    """The same as tensor_term_forward_blas, register-blocked (module docstring).

    Z (M, d) in/out; Q (R, d*D) out, R >= q0 + e - s; X (M, D); Vsym (D, d*D);
    hv (d,), acc (NODE_BLOCK, TILE) workspaces.
    """
    D = X.shape[1]
    cols = Vsym.shape[1]
    for b in range(s, e, NODE_BLOCK):
        n = min(NODE_BLOCK, e - b)
        r = q0 + b - s  # Q row of node b
        for c in range(0, cols, TILE):
            w = min(TILE, cols - c)
            a0 = acc[0]
            a1 = acc[1]
            a2 = acc[2]
            a3 = acc[3]
            if n == NODE_BLOCK:
                v = Vsym[0, c : c + w]  # i = 0 starts the sums
                x0 = X[b, 0]
                x1 = X[b + 1, 0]
                x2 = X[b + 2, 0]
                x3 = X[b + 3, 0]
                for j in range(w):
                    a0[j] = x0 * v[j]
                    a1[j] = x1 * v[j]
                    a2[j] = x2 * v[j]
                    a3[j] = x3 * v[j]
                for i in range(1, D):
                    v = Vsym[i, c : c + w]  # (w,) loaded once for the 4 nodes
                    x0 = X[b, i]
                    x1 = X[b + 1, i]
                    x2 = X[b + 2, i]
                    x3 = X[b + 3, i]
                    for j in range(w):
                        vj = v[j]
                        a0[j] += x0 * vj
                        a1[j] += x1 * vj
                        a2[j] += x2 * vj
                        a3[j] += x3 * vj
            else:  # the level's last 1..3 nodes, one at a time
                for t in range(n):
                    a = acc[t]
                    v = Vsym[0, c : c + w]
                    xt = X[b + t, 0]
                    for j in range(w):
                        a[j] = xt * v[j]
                    for i in range(1, D):
                        v = Vsym[i, c : c + w]
                        xt = X[b + t, i]
                        for j in range(w):
                            a[j] += xt * v[j]
            for t in range(n):
                q = Q[r + t, c : c + w]
                a = acc[t]
                for j in range(w):
                    q[j] = a[j]
    _tensor_h(Z, Q, X, hv, s, e, q0)


@numeric_kernel
def pair_layout(T, V):
    """T (d, D(D+1)/2) out: T[k, p(i,j)] = V[k,i,j] + V[k,j,i] for i < j, V[k,i,i] for i = j;
    pairs row by row over the upper triangle (p(0,0), p(0,1), .., p(0,D-1), p(1,1), ..). V (d, D, D)."""
    d, D, _ = V.shape
    for k in range(d):
        p = 0
        for i in range(D):
            T[k, p] = V[k, i, i]
            p += 1
            for j in range(i + 1, D):
                T[k, p] = V[k, i, j] + V[k, j, i]
                p += 1


@numeric_kernel
def tensor_term_forward_pairs(Z, work, X, T, s, e):
    """Forward only, rows s..e-1: Z[m, k] += h_k from the pair products (module docstring).

    Z (M, d) in/out; work (>= (D(D+1)/2 + D + d) * n,) flat workspace; X (M, D); T (d, D(D+1)/2).
    """
    d = Z.shape[1]
    D = X.shape[1]
    pairs = T.shape[1]
    n = e - s
    XT = work[: D * n].reshape((D, n))  # (D, n) the block's x, one row per coordinate
    UT = work[D * n : (D + pairs) * n].reshape((pairs, n))  # (pairs, n) u_p of every node
    HT = work[(D + pairs) * n : (D + pairs + d) * n].reshape((d, n))  # (d, n) h of every node
    for m in range(n):
        for i in range(D):
            XT[i, m] = X[s + m, i]
    p = 0
    for i in range(D):
        xi = XT[i]
        for j in range(i, D):  # u_p = x_i x_j for every node at once
            xj = XT[j]
            u = UT[p]
            for m in range(n):
                u[m] = xi[m] * xj[m]
            p += 1
    np.dot(T, UT, HT)  # (d, pairs) x (pairs, n)
    for m in range(n):
        for k in range(d):
            Z[s + m, k] += HT[k, m]


@numeric_kernel
def tensor_gradient_pairs(dT, U, X, Delta):
    """dT (d, D(D+1)/2) out = Delta^T U with U[m, p(i,j)] = X[m, i] X[m, j] (module docstring).

    U (M, D(D+1)/2) workspace (filled here); X (M, D); Delta (M, d). M >= 1.
    """
    D = X.shape[1]
    for m in range(X.shape[0]):
        u = U[m]
        x = X[m]
        p = 0
        for i in range(D):  # u[p(i, i..D-1)] = x_i x[i:]
            xi = x[i]
            row = u[p : p + D - i]
            tail = x[i:]
            for j in range(D - i):
                row[j] = xi * tail[j]
            p += D - i
    np.dot(Delta.T, U, dT)  # (d, M) x (M, pairs)


@numeric_kernel
def add_pair_layout_gradient(dV, dT):
    """dV (d, D, D) += the pair-layout gradient: dV[k, i, j] += dT[k, p(i,j)] and dV[k, j, i] too (i < j)."""
    d, D, _ = dV.shape
    for k in range(d):
        p = 0
        for i in range(D):
            dV[k, i, i] += dT[k, p]
            p += 1
            for j in range(i + 1, D):
                dV[k, i, j] += dT[k, p]
                dV[k, j, i] += dT[k, p]
                p += 1


@numeric_kernel
def set_pair_layout_gradient(dV, dTs, k0, k1):
    """dV[k] (D, D) = 0 + the sum of the chunks' pair-layout gradients dTs (a tuple, one (d, D(D+1)/2)
    per chunk), for k0 <= k < k1 (out, not added to):

        s = dTs[0][k, p] + dTs[1][k, p] + ...    (in chunk order)
        dV[k, i, j] = dV[k, j, i] = 0 + s        (p = p(i, j))

    The bits of zeroing dV and adding the chunks' gradients one by one with add_pair_layout_gradient,
    which adds exactly one term to each element (0.0 + s, not s, so that a -0.0 gives +0.0 there too),
    in one pass: no zeroing of dV, no intermediate sum written back."""
    D = dV.shape[1]
    zero = dV.dtype.type(0.0)
    chunks = len(dTs)
    row = np.empty(D, dtype=dV.dtype)  # the pairs (i, i..D-1) of one i: contiguous in every dT
    for k in range(k0, k1):
        p = 0
        for i in range(D):
            w = D - i
            first = dTs[0][k, p : p + w]
            for j in range(w):
                row[j] = zero + first[j]  # 0 + a, then + b, ...: as zeroing dV then adding chunk by chunk
            for c in range(1, chunks):
                other = dTs[c][k, p : p + w]
                for j in range(w):
                    row[j] += other[j]
            out = dV[k, i, i:]
            for j in range(w):  # dV[k, i, j] for j >= i: a contiguous row
                out[j] = row[j]
            for j in range(1, w):  # dV[k, j, i] for j > i: a column
                dV[k, i + j, i] = row[j]
            p += w


@threaded_kernel
def set_pair_layout_gradients_parts(dV, dTs, cuts):
    """set_pair_layout_gradient for the k of each fixed range cuts[p]..cuts[p+1]-1, the ranges on numba's
    threads (every element is written by one range, with the same arithmetic: any thread count)."""
    for p in prange(cuts.shape[0] - 1):
        set_pair_layout_gradient(dV, dTs, cuts[p], cuts[p + 1])


@numeric_kernel
def tensor_term_input_gradient(EX, Delta, Q, s, e):
    """Rows s..e-1: EX[m, j] += sum_k Delta[m, k] Q[m, k*D + j]   (e_x += sum_k delta_k q_k).

    EX (M, D) in/out; Delta (M, d); Q (M, d*D) from the forward pass (one row per node).
    """
    d = Delta.shape[1]
    D = 2 * d
    for m in range(s, e):
        for k in range(d):
            dk = Delta[m, k]
            for j in range(D):
                EX[m, j] += dk * Q[m, k * D + j]
