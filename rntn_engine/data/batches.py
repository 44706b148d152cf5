"""Flatten trees into one compact treebank of post-ordered arrays, and minibatches into level schedules.

Legend: T trees in a treebank, N nodes in a batch, M internal nodes in a batch,
H the height of the tallest tree in a batch.

A treebank is encoded once (:func:`encode_treebank`, or straight from a file by
treebank_encoding.py): every node of every tree in one set of arrays, trees one after
another, each tree in post-order, holding only what training needs in the narrowest
integer type that holds it -- int32 word ids, child offsets from the tree's first
node as int16 when every tree has at most 32,768 nodes (else int32), labels as int8
when they fit (else int16 or int32), and int64 tree starts: 9 bytes per node for
usual treebanks. A minibatch (:func:`make_batch`) is a gather of whole trees from
those arrays, widened to the int32 arrays the kernels take, with child indices moved
to batch positions and node heights computed for the batch (cheaper than storing
them: one pass over the batch's nodes), plus a *level schedule*: internal nodes
sorted by height (stable, so post-order within a level). All nodes of one level are
independent of each other (their children sit on lower levels), so a kernel can
compose a whole level with one matrix product.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np

from rntn_engine.data.tree import Tree
from rntn_engine.data.vocabulary import Vocabulary
from rntn_engine.jit_setup import byte_scanner

# narrowest first: the dtype a column starts with, and what it widens to when a value does not fit
CHILD_DTYPES = (np.int16, np.int32)
LABEL_DTYPES = (np.int8, np.int16, np.int32)


@dataclass(frozen=True)
class EncodedTreebank:
    """All trees of a treebank as flat arrays, tree after tree, each in post-order (module docstring)."""

    word: np.ndarray  # (total_nodes,) int32 vocabulary id at leaves, -1 at internal nodes
    left: np.ndarray  # (total_nodes,) int16 or int32 left child, index local to its tree, -1 at leaves
    right: np.ndarray  # (total_nodes,) int16 or int32 right child, local index, -1 at leaves
    label: np.ndarray  # (total_nodes,) int8, int16 or int32 class, -1 unlabelled
    start: np.ndarray  # (T + 1,) int64 first node of each tree; start[T] = total_nodes

    @property
    def n_trees(self) -> int:
        return int(self.start.shape[0] - 1)

    @property
    def n_nodes(self) -> int:
        return int(self.start[-1])

    @property
    def nbytes(self) -> int:
        """Bytes held by the arrays."""
        return sum(a.nbytes for a in (self.word, self.left, self.right, self.label, self.start))

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


def narrowest(values: np.ndarray, dtypes: tuple) -> type:
    """The first of ``dtypes`` that holds every value (the last one when none is given)."""
    if values.size == 0:
        return dtypes[0]
    low, high = int(values.min()), int(values.max())
    for dtype in dtypes:
        info = np.iinfo(dtype)
        if info.min <= low and high <= info.max:
            return dtype
    return dtypes[-1]


class ColumnBuilder:
    """One column of an :class:`EncodedTreebank` grown block by block, in the narrowest of ``dtypes``.

    The array grows in place (``ndarray.resize``, a realloc: no second copy of a large
    column is resident) and widens to the next dtype only when a block needs it.
    """

    def __init__(self, dtypes: tuple, capacity: int = 1024) -> None:
        self.dtypes = dtypes
        self.array = np.empty(max(capacity, 16), dtype=dtypes[0])
        self.size = 0

    def append(self, values: np.ndarray) -> None:
        needed = narrowest(values, self.dtypes)
        if self.dtypes.index(needed) > self.dtypes.index(self.array.dtype.type):
            self.array = self.array.astype(needed)
        end = self.size + values.shape[0]
        if end > self.array.shape[0]:
            self.array.resize(max(end, self.array.shape[0] + self.array.shape[0] // 2), refcheck=False)
        self.array[self.size : end] = values
        self.size = end

    def finish(self) -> np.ndarray:
        self.array.resize(self.size, refcheck=False)
        return self.array


def encode_treebank(trees: Sequence[Tree], vocabulary: Vocabulary) -> EncodedTreebank:
    """Look up every word once and lay all trees end to end, in the narrowest dtypes."""
    sizes = np.fromiter((t.n_nodes for t in trees), dtype=np.int64, count=len(trees))
    start = np.zeros(len(trees) + 1, dtype=np.int64)
    np.cumsum(sizes, out=start[1:])
    total = int(start[-1])
    word = np.empty(total, dtype=np.int32)
    left = np.empty(total, dtype=np.int32)
    right = np.empty(total, dtype=np.int32)
    label = np.empty(total, dtype=np.int32)
    for t, tree in enumerate(trees):
        a, z = int(start[t]), int(start[t + 1])
        word_ids = vocabulary.ids(tree.words)
        word[a:z] = np.where(tree.word >= 0, word_ids[np.maximum(tree.word, 0)], -1)
        left[a:z] = tree.left
        right[a:z] = tree.right
        label[a:z] = tree.label
    child = narrowest(right, CHILD_DTYPES)  # a right child's index is its tree's largest but the root's
    return EncodedTreebank(word, left.astype(child), right.astype(child), label.astype(narrowest(label, LABEL_DTYPES)),
                           start)


@byte_scanner
def node_heights(left: np.ndarray, right: np.ndarray) -> np.ndarray:
    """(N,) int32 height of each node (0 at leaves) of trees in post-order; ``left``/``right`` (N,)
    index the same arrays, children before parents."""
    n = left.shape[0]
    height = np.zeros(n, dtype=np.int32)
    for i in range(n):
        a = left[i]
        if a >= 0:
            b = right[i]
            height[i] = 1 + (height[a] if height[a] > height[b] else height[b])
    return height


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
    label = bank.label[src].astype(np.int32)
    shift = offset[:-1][tree_of_node].astype(np.int32)  # local child index -> batch index
    left = bank.left[src]
    right = bank.right[src]
    internal = left >= 0
    left = np.where(internal, left + shift, -1).astype(np.int32)
    right = np.where(internal, right + shift, -1).astype(np.int32)
    height = node_heights(left, right)

    internal_nodes = np.flatnonzero(internal).astype(np.int32)
    order = internal_nodes[np.argsort(height[internal_nodes], kind="stable")]
    max_height = int(height.max()) if n else 0
    level_start = np.searchsorted(height[order], np.arange(1, max_height + 2), side="left").astype(np.int32)
    root = (offset[1:] - 1).astype(np.int32)
    leaves = np.flatnonzero(~internal).astype(np.int32)
    return FlatBatch(word, left, right, label, height, tree_of_node, root, order, level_start, leaves)


@byte_scanner
def phrase_lengths_of(left: np.ndarray, right: np.ndarray, start: np.ndarray) -> np.ndarray:
    """(N,) int32 words under each node of trees laid end to end (``start`` (T + 1,) their first nodes)."""
    n_words = np.empty(left.shape[0], dtype=np.int32)
    for t in range(start.shape[0] - 1):
        a = start[t]
        for i in range(a, start[t + 1]):
            if left[i] < 0:
                n_words[i] = 1
            else:
                n_words[i] = n_words[a + left[i]] + n_words[a + right[i]]
    return n_words


def phrase_lengths(bank: EncodedTreebank) -> np.ndarray:
    """(total_nodes,) int32: number of words under each node (children come before parents)."""
    return phrase_lengths_of(bank.left, bank.right, bank.start)


def bank_slice(bank: EncodedTreebank, a: int, z: int) -> EncodedTreebank:
    """Trees ``a..z-1`` of ``bank`` as a bank of their own (views, no copy)."""
    lo, hi = int(bank.start[a]), int(bank.start[z])
    return EncodedTreebank(bank.word[lo:hi], bank.left[lo:hi], bank.right[lo:hi], bank.label[lo:hi],
                           bank.start[a : z + 1] - lo)


def concatenate_banks(first: EncodedTreebank, second: EncodedTreebank) -> EncodedTreebank:
    """The trees of ``first`` then those of ``second``, in the wider of their dtypes."""
    return EncodedTreebank(*(np.concatenate([getattr(first, n), getattr(second, n)])
                             for n in ("word", "left", "right", "label")),
                           np.concatenate([first.start, second.start[1:] + first.start[-1]]))
