"""Read a treebank file straight into an :class:`EncodedTreebank`, block by block, with no Tree objects.

Legend: N nodes of the file, W distinct words of the file.

Two ways in:

* :func:`read_treebank_words` when the vocabulary is still to be built from this
  file (training from scratch): the bank's ``word`` column holds indices into the
  file's own word list, which comes with every word's count; build the vocabulary
  from the counts (:func:`vocabulary.vocabulary_from_counts`), then
  :func:`apply_vocabulary` turns the indices into vocabulary ids in place.
* :func:`read_encoded_treebank` when the vocabulary is known (dev files, resume,
  evaluation): ids are looked up block by block, once per distinct word of a block.

:func:`iter_encoded_blocks` yields one small bank per block instead, for commands
whose memory must not grow with the treebank (evaluation). The results equal
``encode_treebank(read_trees(...), vocabulary)`` (tested).
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from typing import Callable, Iterator

import numpy as np

from rntn_engine.data.batches import CHILD_DTYPES, LABEL_DTYPES, ColumnBuilder, EncodedTreebank
from rntn_engine.data.treebank_bulk import TreeBlock, iter_tree_blocks
from rntn_engine.data.vocabulary import Vocabulary

BYTES_PER_NODE_GUESS = 5  # bytes of text per node, for the first allocation (grows if short)
REMAP_CHUNK = 1 << 22  # nodes per pass when word indices become vocabulary ids


@dataclass(frozen=True)
class FileWords:
    """The distinct words of a treebank file, in order of first appearance, and how often each occurs."""

    words: list[str]  # (W,)
    counts: np.ndarray  # (W,) int64

    def as_dict(self) -> dict[str, int]:
        return dict(zip(self.words, self.counts.tolist()))


class _BankBuilder:
    """Appends blocks to the columns of one EncodedTreebank."""

    def __init__(self, capacity: int) -> None:
        self.word = ColumnBuilder((np.int32,), capacity)
        self.left = ColumnBuilder(CHILD_DTYPES, capacity)
        self.right = ColumnBuilder(CHILD_DTYPES, capacity)
        self.label = ColumnBuilder(LABEL_DTYPES, capacity)
        self.start = ColumnBuilder((np.int64,), capacity // 16)
        self.start.append(np.zeros(1, dtype=np.int64))
        self.n_nodes = 0

    def append(self, block: TreeBlock, word: np.ndarray) -> None:
        """``word`` (N,) int32: the id stored for each node of ``block`` (-1 at internal nodes)."""
        self.word.append(word)
        self.left.append(block.left)
        self.right.append(block.right)
        self.label.append(block.label)
        self.start.append(block.node_start[1:] + self.n_nodes)
        self.n_nodes += block.n_nodes

    def finish(self) -> EncodedTreebank:
        left, right = self.left.finish(), self.right.finish()
        child = CHILD_DTYPES[max(CHILD_DTYPES.index(left.dtype.type), CHILD_DTYPES.index(right.dtype.type))]
        return EncodedTreebank(self.word.finish(), left.astype(child, copy=False), right.astype(child, copy=False),
                               self.label.finish(), self.start.finish())


class _VocabularyIds:
    """Vocabulary id of each word of a file's growing word list, with -1 after the last (for internal nodes)."""

    def __init__(self, vocabulary: Vocabulary) -> None:
        self.vocabulary = vocabulary
        self.ids = np.full(1, -1, dtype=np.int32)

    def of(self, block: TreeBlock) -> np.ndarray:
        """(N,) int32 vocabulary id of each node of ``block``, -1 at internal nodes."""
        known = self.ids.shape[0] - 1
        if len(block.words) > known:
            new = self.vocabulary.ids(block.words[known:])
            self.ids = np.concatenate([self.ids[:-1], new, [-1]]).astype(np.int32)
        return np.take(self.ids, block.token)


def _capacity(path: str | os.PathLike) -> int:
    try:
        return os.path.getsize(path) // BYTES_PER_NODE_GUESS + 1024
    except OSError:
        return 1024  # the reader reports the problem


def read_treebank_words(
    path: str | os.PathLike,
    *,
    num_classes: int | None = None,
    binarise: str = "right",
    progress: Callable[[int], None] | None = None,
) -> tuple[EncodedTreebank, FileWords]:
    """The file as a bank whose ``word`` column indexes the file's own words, and those words with counts."""
    builder = _BankBuilder(_capacity(path))
    counts = np.zeros(0, dtype=np.int64)
    words: list[str] = []
    for block in iter_tree_blocks(path, num_classes=num_classes, binarise=binarise, progress=progress):
        words = block.words
        more = block.word_counts()
        if more.shape[0] > counts.shape[0]:
            counts = np.concatenate([counts, np.zeros(more.shape[0] - counts.shape[0], dtype=np.int64)])
        counts += more
        builder.append(block, block.token)
    bank = builder.finish()
    unique: dict[str, int] = {}
    first = np.fromiter((unique.setdefault(w, len(unique)) for w in words), dtype=np.int32, count=len(words))
    if len(unique) < len(words):  # two tokens (such as '{' and -LCB-) stand for one word: one id for both
        bank = _remap_words(bank, first)
        counts = np.bincount(first, weights=counts, minlength=len(unique)).astype(np.int64)
    return bank, FileWords(list(unique), counts)


def _remap_words(bank: EncodedTreebank, ids: np.ndarray) -> EncodedTreebank:
    """``bank`` with every leaf's word index i replaced by ``ids[i]``, in place."""
    word = bank.word
    for a in range(0, word.shape[0], REMAP_CHUNK):
        piece = word[a : a + REMAP_CHUNK]
        leaves = piece >= 0
        piece[leaves] = ids[piece[leaves]]
    return bank


def apply_vocabulary(bank: EncodedTreebank, words: FileWords, vocabulary: Vocabulary) -> EncodedTreebank:
    """Turn the file-word indices of ``bank.word`` (from :func:`read_treebank_words`) into vocabulary ids, in place."""
    return _remap_words(bank, vocabulary.ids(words.words))


def read_encoded_treebank(
    path: str | os.PathLike,
    vocabulary: Vocabulary,
    *,
    num_classes: int | None = None,
    binarise: str = "right",
    progress: Callable[[int], None] | None = None,
) -> EncodedTreebank:
    """The whole file encoded with a known vocabulary."""
    builder = _BankBuilder(_capacity(path))
    ids = _VocabularyIds(vocabulary)
    for block in iter_tree_blocks(path, num_classes=num_classes, binarise=binarise, progress=progress):
        builder.append(block, ids.of(block))
    return builder.finish()


def iter_encoded_blocks(
    path: str | os.PathLike,
    vocabulary: Vocabulary,
    *,
    num_classes: int | None = None,
    binarise: str = "right",
    progress: Callable[[int], None] | None = None,
) -> Iterator[EncodedTreebank]:
    """The file as a sequence of small banks, one per block of the reader: memory bounded by a block."""
    for bank, _, _ in iter_encoded_blocks_and_words(path, vocabulary, num_classes=num_classes, binarise=binarise,
                                                    progress=progress):
        yield bank


def iter_encoded_blocks_and_words(
    path: str | os.PathLike,
    vocabulary: Vocabulary,
    *,
    num_classes: int | None = None,
    binarise: str = "right",
    progress: Callable[[int], None] | None = None,
) -> Iterator[tuple[EncodedTreebank, np.ndarray, list[str]]]:
    """As :func:`iter_encoded_blocks`, with each block's text: (bank, token, words), ``token`` (N,) int32
    the index into ``words`` of each leaf (-1 at internal nodes), ``words`` the file's words so far
    (unescaped, in order of first appearance; one list, growing from block to block)."""
    ids = _VocabularyIds(vocabulary)
    for block in iter_tree_blocks(path, num_classes=num_classes, binarise=binarise, progress=progress):
        builder = _BankBuilder(block.n_nodes)
        builder.append(block, ids.of(block))
        yield builder.finish(), block.token.copy(), block.words
