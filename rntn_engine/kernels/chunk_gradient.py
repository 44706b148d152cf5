"""One chunk's whole gradient in one compiled call, for the vector models (RNN, RNTN 2013), and the
chunks of a minibatch at once on numba's threads.

A chunk's gradient is five kernels in a row, each documented (equations, shapes) in its own file:

    forward_compose     (tree_compose.py)      node vectors P, children X, X Vsym kept in Q
    forward_classify    (node_classifier.py)   Y = softmax(Ws p + bs), the chunk's loss
    backward_classify   (node_classifier.py)   dWs, dbs, the classifier's error E at every node
    backward_compose    (tree_compose.py)      dW, db, the tensor's pair-layout gradient dT, E down to the leaves
    chunk_word_rows, scatter_word_rows (word_rows.py)   dL at the chunk's distinct words

``vector_chunk_gradient`` calls them in that order with nothing between them, the arithmetic of calling
them one by one from Python (the same bits: tests/test_chunk_gradient.py), without the interpreter in
between; ``vector_chunks_gradient`` runs it for a group of chunks at once on numba's threads
(jit_setup.py, "numba's threads"; model/rnn_model.py hands it one chunk per thread, so that it
compiles once per thread count): each chunk writes only its own buffers, so the result does not
depend on the thread count. There is no backward "twin" to pair here: this file only composes.

Per-chunk arguments of ``vector_chunks_gradient`` are tuples with one entry per chunk (numba indexes a
tuple of arrays of one type by the loop variable); the parameters are shared, read-only.
"""

from __future__ import annotations

from numba import prange

from rntn_engine.jit_setup import numeric_kernel, threaded_kernel
from rntn_engine.kernels.node_classifier import backward_classify, forward_classify
from rntn_engine.kernels.tree_compose import backward_compose, forward_compose
from rntn_engine.kernels.word_rows import chunk_word_rows, scatter_word_rows


@numeric_kernel
def vector_chunk_gradient(dW, db, dT, dWs, dbs, P, X, Z, Q, U, Y, S, E, dS, Delta, EX, L, W, b, Vsym, Ws, bs,
                          word, left, right, order, level_start, label, leaves, weight, scale, with_tensor,
                          own_rows, no_pairs, word_values, word_ids):
    """The chunk's loss; its gradient added into dW (d, D), db (d,), dWs (C, d), dbs (C,) and written into
    dT (d, D(D+1)/2) (RNTN; (0, 0) for the RNN); its word rows: returns (loss, n) with word_ids[:n] its
    distinct words ascending and word_values[:n] (n, d) their gradient (dL rows).

    P (N, d), X (M, D), Z (M, d), Q (M, d*D) and U (M, D(D+1)/2) (sharing memory, tree_compose.py),
    Y, S, dS (N, C), E (N, d), Delta (M, d), EX (M, D): the chunk's workspaces, as
    forward_compose / backward_compose / the classifier kernels take them. word_values (>= K, d),
    word_ids (>= K,) int64 with K the chunk's leaves. own_rows as forward_compose takes it; no_pairs: a (0, 0)
    array (training keeps Q).
    """
    forward_compose(P, X, Z, Q, L, W, b, Vsym, word, left, right, order, level_start, with_tensor, own_rows,
                    no_pairs)
    loss = forward_classify(Y, S, P, Ws, bs, label, weight, scale)
    backward_classify(dWs, dbs, E, dS, Y, P, Ws, label, weight, scale)
    backward_compose(dW, db, dT, E, Delta, EX, P, X, Q, U, W, left, right, order, level_start, with_tensor)
    rows, slot = chunk_word_rows(word, leaves)  # the chunk's distinct words; each leaf's row among them
    n = rows.shape[0]
    values = word_values[:n]
    values[:, :] = 0.0
    scatter_word_rows(values, E, slot, leaves)
    word_ids[:n] = rows
    return loss, n


@threaded_kernel
def vector_chunks_gradient(dW, db, dT, dWs, dbs, P, X, Z, Q, U, Y, S, E, dS, Delta, EX, L, W, b, Vsym, Ws, bs,
                           word, left, right, order, level_start, label, leaves, weight, scale, with_tensor,
                           own_rows, no_pairs, word_values, word_ids, losses, word_counts):
    """vector_chunk_gradient for every chunk k at once: every argument but the shared parameters (L, W,
    b, Vsym, Ws, bs), weight, scale, with_tensor, own_rows and no_pairs is a tuple of one array per chunk.
    losses (K,) float64 and word_counts (K,) int64 out: each chunk's (loss, n)."""
    for k in prange(len(P)):
        loss, n = vector_chunk_gradient(dW[k], db[k], dT[k], dWs[k], dbs[k], P[k], X[k], Z[k], Q[k], U[k], Y[k],
                                        S[k], E[k], dS[k], Delta[k], EX[k], L, W, b, Vsym, Ws, bs, word[k],
                                        left[k], right[k], order[k], level_start[k], label[k], leaves[k], weight,
                                        scale, with_tensor, own_rows, no_pairs, word_values[k], word_ids[k])
        losses[k] = loss
        word_counts[k] = n
