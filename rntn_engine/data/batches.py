"""Flatten trees into contiguous post-ordered arrays, and minibatches into level schedules.

Legend: T trees in a treebank, N nodes in a batch, M internal nodes in a batch,
H the height of the tallest tree in a batch.

A treebank is encoded once (:func:`encode_treebank`): every node of every tree in
one set of int32 arrays, trees one after another, each tree in post-order. A
minibatch (:func:`make_batch`) is a gather of whole trees from those arrays, with
child indices moved to batch positions, plus a *level schedule*: internal nodes
sorted by height (stable, so post-order within a level). All nodes of one level
are independent of each other (their children sit on lower levels), so a kernel
can compose a whole level with one matrix product. Encoding costs 24 bytes per
node and is done once; a batch costs a few vectorised NumPy operations.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np

from rntn_engine.data.tree import Tree
from rntn_engine.data.vocabulary import Vocabulary


@dataclass(frozen=True)
class EncodedTreebank:
    """All trees of a treebank as flat arrays, tree after tree, each in post-order."""

    word: np.ndarray  # (total_nodes,) int32 vocabulary id at leaves, -1 at internal nodes
    left: np.ndarray  # (total_nodes,) int32 left child, index local to its tree, -1 at leaves
    right: np.ndarray  # (total_nodes,) int32 right child, local index, -1 at leaves
    label: np.ndarray  # (total_nodes,) int32 class, -1 unlabelled
    height: np.ndarray  # (total_nodes,) int32 0 at leaves
    start: np.ndarray  # (T + 1,) int64 first node of each tree; start[T] = total_nodes

    @property
    def n_trees(self) -> int:
        return int(self.start.shape[0] - 1)

    @property
    def n_nodes(self) -> int:
        return int(self.start[-1])

    def tree_sizes(self) -> np.ndarray:
        return np.diff(self.start)


@dataclass(frozen=True)
class FlatBatch:
    """A minibatch of trees as contiguous arrays with a level schedule of its internal nodes."""

    word: np.ndarray  # (N,) int32 vocabulary id at leaves, -1 at internal nodes
    left: np.ndarray  # (N,) int32 left child (batch index), -1 at leaves
    right: np.ndarray  # (N,) int32 right child (batch index), -1 at leaves
    label: np.ndarray  # (N,) int32 class, -1 unlabelled
    height: np.ndarray  # (N,) int32 0 at leaves
    tree: np.ndarray  # (N,) int32 position of the node's tree in the batch, 0..B-1
    root: np.ndarray  # (B,) int32 batch index of each tree's root
    order: np.ndarray  # (M,) int32 internal nodes sorted by height, post-order within a height
    level_start: np.ndarray  # (H + 1,) int32 level h (1-based) is order[level_start[h-1]:level_start[h]]
    leaves: np.ndarray  # (N - M,) int32 leaf nodes in batch order

    @property
    def n_trees(self) -> int:
        return int(self.root.shape[0])

    @property
    def n_nodes(self) -> int:
        return int(self.word.shape[0])

    @property
    def n_internal(self) -> int:
        return int(self.order.shape[0])


def encode_treebank(trees: Sequence[Tree], vocabulary: Vocabulary) -> EncodedTreebank:
    """Look up every word once and lay all trees end to end."""
    sizes = np.fromiter((t.n_nodes for t in trees), dtype=np.int64, count=len(trees))
    start = np.zeros(len(trees) + 1, dtype=np.int64)
    np.cumsum(sizes, out=start[1:])
    total = int(start[-1])
    word = np.empty(total, dtype=np.int32)
    left = np.empty(total, dtype=np.int32)
    right = np.empty(total, dtype=np.int32)
    label = np.empty(total, dtype=np.int32)
    height = np.empty(total, dtype=np.int32)
    for t, tree in enumerate(trees):
        a, z = int(start[t]), int(start[t + 1])
        word_ids = vocabulary.ids(tree.words)
        word[a:z] = np.where(tree.word >= 0, word_ids[np.maximum(tree.word, 0)], -1)
        left[a:z] = tree.left
        right[a:z] = tree.right
        label[a:z] = tree.label
        height[a:z] = tree.heights()
    return EncodedTreebank(word, left, right, label, height, start)


def make_batch(bank: EncodedTreebank, tree_ids: np.ndarray) -> FlatBatch:
    """Gather the trees ``tree_ids`` (in that order) into one :class:`FlatBatch`."""
    tree_ids = np.asarray(tree_ids, dtype=np.int64)
    sizes = bank.start[tree_ids + 1] - bank.start[tree_ids]  # (B,)
    offset = np.zeros(len(tree_ids) + 1, dtype=np.int64)
    np.cumsum(sizes, out=offset[1:])
    n = int(offset[-1])
    # source index of each batch node: start of its tree + position inside the tree
    tree_of_node = np.repeat(np.arange(len(tree_ids), dtype=np.int32), sizes)
    within = np.arange(n, dtype=np.int64) - offset[tree_of_node]
    src = bank.start[tree_ids][tree_of_node] + within

    word = bank.word[src]
    height = bank.height[src]
    label = bank.label[src]
    shift = offset[:-1][tree_of_node].astype(np.int32)  # local child index -> batch index
    left = bank.left[src]
    right = bank.right[src]
    internal = left >= 0
    left = np.where(internal, left + shift, -1).astype(np.int32)
    right = np.where(internal, right + shift, -1).astype(np.int32)

    internal_nodes = np.flatnonzero(internal).astype(np.int32)
    order = internal_nodes[np.argsort(height[internal_nodes], kind="stable")]
    max_height = int(height.max()) if n else 0
    level_start = np.searchsorted(height[order], np.arange(1, max_height + 2), side="left").astype(np.int32)
    root = (offset[1:] - 1).astype(np.int32)
    leaves = np.flatnonzero(~internal).astype(np.int32)
    return FlatBatch(word, left, right, label, height, tree_of_node, root, order, level_start, leaves)


def phrase_lengths(bank: EncodedTreebank) -> np.ndarray:
    """(total_nodes,) int32: number of words under each node, computed level by level (no recursion)."""
    n_words = np.where(bank.left < 0, 1, 0).astype(np.int32)
    tree_start = np.repeat(bank.start[:-1], bank.tree_sizes())  # first node of each node's tree
    internal = np.flatnonzero(bank.left >= 0)
    heights = bank.height[internal]
    for h in range(1, int(heights.max(initial=0)) + 1):
        nodes = internal[heights == h]
        n_words[nodes] = n_words[bank.left[nodes] + tree_start[nodes]] + n_words[bank.right[nodes] + tree_start[nodes]]
    return n_words
