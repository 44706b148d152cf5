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
chunk of a minibatch first sums its own leaves into rows of its own (its distinct words);
``add_word_rows`` then adds the chunks' rows into the minibatch's rows in chunk order, so
the result never depends on which thread, or which MPI rank, computed a chunk.
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
def add_word_rows(values, at, part):
    """values (n, w) += part (m, w) at rows at (m,) int64 of ``values`` (a chunk's rows into the minibatch's)."""
    width = part.shape[1]
    for j in range(part.shape[0]):
        r = at[j]
        for c in range(width):
            values[r, c] += part[j, c]


def touched_rows(leaf_words: list[np.ndarray]) -> np.ndarray:
    """The distinct word ids of a minibatch, ascending (int64), from each chunk's leaf words."""
    if not leaf_words:
        return np.zeros(0, dtype=np.int64)
    words = np.sort(np.concatenate(leaf_words).astype(np.int64))
    if words.size < 2:
        return words
    # np.unique does the same in about 5x the time on a minibatch's few hundred words (numpy 2.4,
    # measured); this runs twice a chunk every step
    keep = np.empty(words.size, dtype=bool)
    keep[0] = True
    np.not_equal(words[1:], words[:-1], out=keep[1:])
    return words[keep]
