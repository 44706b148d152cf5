"""A labelled binary tree stored flat, in post-order.

Legend: N nodes, n words (leaves), N = 2n - 1 for a binary tree.

Nodes are numbered in post-order (children before their parent, the root last),
so every algorithm over a tree is a loop over ``range(N)`` or its reverse: no
recursion, and 10,000-deep trees cost nothing special.

    word[i]   index into ``words`` at a leaf, -1 at an internal node
    left[i]   index of the left child, -1 at a leaf
    right[i]  index of the right child, -1 at a leaf
    label[i]  class 0..C-1, or -1 for "unlabelled" (no loss at that node)

Leaves appear in post-order in sentence order, so ``word`` at the leaves reads
0, 1, 2, ... n-1 left to right.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

UNLABELLED = -1


@dataclass(frozen=True, eq=False)
class Tree:
    """One sentence's binary parse tree with a class label (or none) per node."""

    words: tuple[str, ...]  # (n,) leaf tokens left to right, unescaped
    word: np.ndarray  # (N,) int32 index into words, -1 at internal nodes
    left: np.ndarray  # (N,) int32 left child, -1 at leaves
    right: np.ndarray  # (N,) int32 right child, -1 at leaves
    label: np.ndarray  # (N,) int32 class, -1 when unlabelled
    source: str = field(default="", compare=False)  # "FILE:LINE" the tree came from

    @property
    def n_nodes(self) -> int:
        return int(self.left.shape[0])

    @property
    def root(self) -> int:
        return self.n_nodes - 1

    @property
    def root_label(self) -> int:
        return int(self.label[-1])

    def is_leaf(self, i: int) -> bool:
        return self.left[i] < 0

    def spans(self) -> np.ndarray:
        """(N, 2) int32: [start, end) word positions covered by each node."""
        span = np.empty((self.n_nodes, 2), dtype=np.int32)
        for i in range(self.n_nodes):
            if self.left[i] < 0:
                span[i, 0] = self.word[i]
                span[i, 1] = self.word[i] + 1
            else:
                span[i, 0] = span[self.left[i], 0]
                span[i, 1] = span[self.right[i], 1]
        return span

    def heights(self) -> np.ndarray:
        """(N,) int32: 0 at leaves, 1 + max(children) above."""
        h = np.zeros(self.n_nodes, dtype=np.int32)
        for i in range(self.n_nodes):
            if self.left[i] >= 0:
                h[i] = 1 + max(h[self.left[i]], h[self.right[i]])
        return h

    def same_as(self, other: "Tree") -> bool:
        """Structural equality: same words, shape and labels."""
        return (
            self.words == other.words
            and np.array_equal(self.word, other.word)
            and np.array_equal(self.left, other.left)
            and np.array_equal(self.right, other.right)
            and np.array_equal(self.label, other.label)
        )


def tree_from_arrays(words, word, left, right, label, source: str = "") -> Tree:
    """Build a :class:`Tree` from sequences, converting to int32 arrays."""
    return Tree(
        words=tuple(words),
        word=np.asarray(word, dtype=np.int32),
        left=np.asarray(left, dtype=np.int32),
        right=np.asarray(right, dtype=np.int32),
        label=np.asarray(label, dtype=np.int32),
        source=source,
    )


def right_branching_tree(words: list[str] | tuple[str, ...], source: str = "") -> Tree:
    """``(w1 (w2 (... (w_{n-1} w_n))))``, every node unlabelled: the tree given to a sentence that
    comes without a parse (English constituency structure is mostly right-branching, which keeps
    negators and intensifiers next to what follows them)."""
    n = len(words)
    # post-order of (w1 (w2 (... (w_{n-1} w_n)))): all leaves first, then parents from the innermost out
    word = list(range(n)) + [-1] * (n - 1)
    left = [-1] * n + [n - 2 - k for k in range(n - 1)]
    right = [-1] * n + [n - 1 if k == 0 else n + k - 1 for k in range(n - 1)]
    return tree_from_arrays(words, word, left, right, [UNLABELLED] * (2 * n - 1), source)
