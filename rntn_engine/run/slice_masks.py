"""Which nodes of a treebank each slice holds (the slices of run/slice_definitions.py).

Legend: N nodes (trees end to end, each in post-order, as in EncodedTreebank), T trees,
S slices, W the file's distinct words.

A slice is a node mask; every score of a slice is computed on the labelled nodes of its
mask (its root scores on the roots inside the mask).
"""

from __future__ import annotations

import numpy as np

from rntn_engine.data.batches import EncodedTreebank, phrase_lengths
from rntn_engine.jit_setup import byte_scanner
from rntn_engine.run.scores import LabelScheme
from rntn_engine.run.slice_definitions import SliceDefinition


@byte_scanner
def phrases_containing(leaf_flag: np.ndarray, left: np.ndarray, right: np.ndarray, start: np.ndarray) -> np.ndarray:
    """(N,) bool: the node's phrase holds a flagged leaf. ``leaf_flag`` (N,) bool, False at internal nodes."""
    out = leaf_flag.copy()
    for t in range(start.shape[0] - 1):
        a = start[t]
        for i in range(a, start[t + 1]):
            if left[i] >= 0:
                out[i] = out[a + left[i]] or out[a + right[i]]
    return out


@byte_scanner
def opposite_children(side: np.ndarray, left: np.ndarray, right: np.ndarray, start: np.ndarray) -> np.ndarray:
    """(N,) bool: internal nodes whose children lie on opposite sides (``side`` (N,) -1, 0 or +1 per node)."""
    out = np.zeros(left.shape[0], dtype=np.bool_)
    for t in range(start.shape[0] - 1):
        a = start[t]
        for i in range(a, start[t + 1]):
            if left[i] >= 0:
                out[i] = side[a + left[i]] * side[a + right[i]] < 0
    return out


class SliceSelector:
    """Node masks of a list of slices, block after block of one treebank file.

    ``class_names``: the names of classes 0..C-1 (root-class slices may name classes);
    ``scheme``: the sides of the scale (opposite-children slices). ValueError if a
    root-class slice names a class that does not exist.
    """

    def __init__(self, slices: list[SliceDefinition], class_names: list[str], scheme: LabelScheme) -> None:
        self.slices = list(slices)
        self.root_classes = [np.array(s.class_numbers(class_names) if s.kind == "root-class" else (), dtype=np.int64)
                             for s in self.slices]
        self.side_of_class = scheme.positive_mask().astype(np.int8) - scheme.negative_mask().astype(np.int8)  # (C,)
        self._word_slices = [k for k, s in enumerate(self.slices) if s.words]
        self._word_flags = np.zeros((0, len(self._word_slices)), dtype=bool)  # (W, word slices)

    def _flags_of_words(self, words: list[str]) -> np.ndarray:
        """(W, word slices) bool: the file word is one of the slice's words (case ignored)."""
        known = self._word_flags.shape[0]
        if len(words) > known:
            new = np.array([[w.lower() in self.slices[k].words for k in self._word_slices] for w in words[known:]],
                           dtype=bool).reshape(len(words) - known, len(self._word_slices))
            self._word_flags = np.concatenate([self._word_flags, new])
        return self._word_flags

    def masks(self, bank: EncodedTreebank, token: np.ndarray, words: list[str]) -> np.ndarray:
        """(S, N) bool mask of every slice over ``bank``; ``token`` (N,) int32 index into ``words`` at leaves,
        -1 at internal nodes (the file's words: slices match the text, not the model's vocabulary)."""
        n = bank.n_nodes
        out = np.zeros((len(self.slices), n), dtype=bool)
        sizes = np.diff(bank.start)
        roots = bank.start[1:] - 1
        left, right = bank.left, bank.right
        if self._word_slices:
            flags = self._flags_of_words(words)
            leaves = token >= 0
        lengths = phrase_lengths(bank) if any(s.kind == "phrase-length" for s in self.slices) else None
        for k, s in enumerate(self.slices):
            if s.words:
                leaf_flag = np.zeros(n, dtype=bool)
                leaf_flag[leaves] = flags[token[leaves], self._word_slices.index(k)]
                contains = phrases_containing(leaf_flag, left, right, bank.start)
                out[k] = contains if s.kind == "phrase-words" else np.repeat(contains[roots], sizes)
            elif s.kind == "phrase-length":
                out[k] = (lengths >= s.min_words) & (True if s.max_words is None else lengths <= s.max_words)
            elif s.kind == "root-class":
                out[k] = np.repeat(np.isin(bank.label[roots], self.root_classes[k]), sizes)
            elif s.kind == "opposite-children":
                label = bank.label.astype(np.int64)
                side = np.where(label >= 0, self.side_of_class[np.maximum(label, 0)], 0).astype(np.int8)
                out[k] = opposite_children(side, left, right, bank.start)
        return out
