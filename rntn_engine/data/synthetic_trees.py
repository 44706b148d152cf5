"""Random binary trees for self-checks and benchmarks (not for training real models).

A tree over n words is built by merging adjacent subtrees until one is left:
'random' merges a random adjacent pair each time, 'left' always the first pair
(a left-branching chain), 'right' always the last pair.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

from rntn_engine.data.tree import Tree, tree_from_arrays


def random_binary_tree(rng: np.random.Generator, n_words: int, num_classes: int, words: Sequence[str],
                       p_unlabelled: float = 0.0, shape: str = "random") -> Tree:
    """A random binary tree over ``n_words`` words drawn from ``words``, labels drawn uniformly."""
    if n_words < 1:
        raise ValueError("a tree needs at least one word")
    items: list[list[tuple[str, int]]] = [[("leaf", i)] for i in range(n_words)]  # subtrees in post-order
    while len(items) > 1:
        if shape == "left":
            j = 0
        elif shape == "right":
            j = len(items) - 2
        else:
            j = int(rng.integers(0, len(items) - 1))
        items[j : j + 2] = [items[j] + items[j + 1] + [("node", len(items[j + 1]))]]
    word, left, right, label = [], [], [], []
    for idx, (kind, value) in enumerate(items[0]):
        if kind == "leaf":
            word.append(value), left.append(-1), right.append(-1)
        else:  # value = size of the right subtree, which ends just before this node
            word.append(-1), right.append(idx - 1), left.append(idx - 1 - value)
        label.append(-1 if rng.random() < p_unlabelled else int(rng.integers(0, num_classes)))
    if all(lab < 0 for lab in label):
        label[-1] = int(rng.integers(0, num_classes))
    tokens = [words[int(rng.integers(0, len(words)))] for _ in range(n_words)]
    return tree_from_arrays(tokens, word, left, right, label)
