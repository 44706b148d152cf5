"""Word rows: the leaves' lookup p = L[w] differentiated into the rows a minibatch touched.

Legend: N nodes in a chunk, n distinct words of the minibatch, w width of a word row
(d for the word vectors L, d*d for the MV-RNN's word matrices LM, one matrix per row).

Forward (inside forward_compose / forward_compose_mv): a leaf with word w takes p = L[w].

Backward: dL[w] += e for every leaf with word w. Only the rows of words that occur in
the minibatch receive anything, so the gradient is kept as those rows only:

    rows   (n,)   the distinct word ids of the minibatch, ascending
    values (n, w) values[j] = dL[rows[j]]
    slot   per leaf, the j with rows[j] = word of the leaf

and ``scatter_word_rows`` adds each leaf's error to ``values[slot]``, in leaf order. Each
chunk of a minibatch first sums its own leaves into rows of its own (its distinct words and
the slots, ``chunk_word_rows``); ``add_word_rows`` then adds the chunks' rows into the
minibatch's rows in chunk order, so the result never depends on which thread, or which MPI
rank, computed a chunk.
"""

from __future__ import annotations

import numpy as np

from rntn_engine.jit_setup import numeric_kernel


@numeric_kernel
def scatter_word_rows(values, E, slot, leaves):
    """values (n, w) += E[leaves[k]] at row slot[k], for k in order.

    E (N, w) error reaching each node's word row (node vectors, or node matrices flattened);
    slot (K,) int64 row of ``values`` of each leaf; leaves (K,) int32 node index of each leaf.
    """
    width = E.shape[1]
    for k in range(leaves.shape[0]):
        j = slot[k]
        i = leaves[k]
        for c in range(width):
            values[j, c] += E[i, c]


@numeric_kernel
def chunk_word_rows(word, leaves):
    """A chunk's distinct leaf words and each leaf's row among them, in one compiled pass.

    word (N,) int32 word id of each node; leaves (K,) int32 node index of each leaf.
    Returns rows (n,) int64, the distinct words ascending, and slot (K,) int64 with
    rows[slot[k]] = word[leaves[k]].
    """
    K = leaves.shape[0]
    words = np.empty(K, dtype=np.int64)
    for k in range(K):
        words[k] = word[leaves[k]]
    order = np.argsort(words)
    slot = np.empty(K, dtype=np.int64)
    rows = np.empty(K, dtype=np.int64)
    n = 0
    for t in range(K):
        k = order[t]
        if n == 0 or words[k] != rows[n - 1]:
            rows[n] = words[k]
            n += 1
        slot[k] = n - 1
    return rows[:n].copy(), slot


@numeric_kernel
def add_word_rows(values, rows, part_rows, part_values):
    """values (n, w) += part_values (m, w) at the rows where rows == part_rows (both ascending, distinct,
    part_rows a subset of rows): a chunk's rows into the minibatch's, the positions found by one merge."""
    width = part_values.shape[1]
    r = 0
    for j in range(part_rows.shape[0]):
        while rows[r] != part_rows[j]:
            r += 1
        for c in range(width):
            values[r, c] += part_values[j, c]


@numeric_kernel
def merged_rows(a, b):
    """The distinct word ids of two chunks together, ascending: a (n,) and b (m,) int64, each ascending and
    distinct, merged in one pass (the minibatch's rows from its chunks' rows, instead of sorting every
    leaf word again: that took 26-29 us a d = 25 step, per-call timers)."""
    out = np.empty(a.shape[0] + b.shape[0], dtype=np.int64)
    i = 0
    j = 0
    n = 0
    while i < a.shape[0] and j < b.shape[0]:
        if a[i] < b[j]:
            out[n] = a[i]
            i += 1
        elif b[j] < a[i]:
            out[n] = b[j]
            j += 1
        else:
            out[n] = a[i]
            i += 1
            j += 1
        n += 1
    while i < a.shape[0]:
        out[n] = a[i]
        i += 1
        n += 1
    while j < b.shape[0]:
        out[n] = b[j]
        j += 1
        n += 1
    return out[:n]


def touched_rows(leaf_words: list[np.ndarray]) -> np.ndarray:
    """The distinct word ids of a minibatch, ascending (int64), from each chunk's leaf words."""
    if not leaf_words:
        return np.zeros(0, dtype=np.int64)
    words = np.sort(np.concatenate(leaf_words).astype(np.int64))
    if words.size < 2:
        return words
    # np.unique does the same in about 5x the time on a minibatch's few hundred words (numpy 2.4,
    # measured)
    keep = np.empty(words.size, dtype=bool)
    keep[0] = True
    np.not_equal(words[1:], words[:-1], out=keep[1:])
    return words[keep]
