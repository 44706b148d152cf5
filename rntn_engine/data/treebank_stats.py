"""Counts that describe a treebank: sizes, sentence lengths, label distributions.

Everything here is a pure function of the trees (no files, no printing). The
result, :class:`TreebankStats`, holds only ints, floats, strings, lists and
dicts with string keys, so ``json.dumps(stats.as_dict())`` works as is.

Label distributions are keyed by the label as text (``"0"``, ``"1"``, ...) plus
``"unlabelled"`` for nodes written ``_``; fractions are over all nodes counted,
unlabelled ones included. Phrase length is the number of words a node spans
(1 at a leaf, the sentence length at the root), grouped by
:data:`PHRASE_LENGTH_BUCKETS`; :func:`length_bucket` is the one definition of
that grouping, shared with evaluation.
"""

from __future__ import annotations

import dataclasses
from collections import Counter
from dataclasses import dataclass
from typing import Iterable

import numpy as np

from rntn_engine.data.batches import phrase_lengths_of
from rntn_engine.data.tree import UNLABELLED, Tree
from rntn_engine.data.treebank_bulk import TreeBlock

UNLABELLED_KEY = "unlabelled"

# (name, smallest length, largest length or None for no limit), in order
PHRASE_LENGTH_BUCKETS: tuple[tuple[str, int, int | None], ...] = (
    ("1", 1, 1),
    ("2", 2, 2),
    ("3-5", 3, 5),
    ("6-10", 6, 10),
    ("11-20", 11, 20),
    ("21+", 21, None),
)
SENTENCE_LENGTH_BUCKETS: tuple[tuple[str, int, int | None], ...] = (
    ("1-5", 1, 5),
    ("6-10", 6, 10),
    ("11-20", 11, 20),
    ("21-30", 21, 30),
    ("31-40", 31, 40),
    ("41-60", 41, 60),
    ("61+", 61, None),
)


def _bucket_starts(buckets: tuple[tuple[str, int, int | None], ...]) -> np.ndarray:
    return np.array([lo for _, lo, _ in buckets])


_PHRASE_STARTS = _bucket_starts(PHRASE_LENGTH_BUCKETS)
_SENTENCE_STARTS = _bucket_starts(SENTENCE_LENGTH_BUCKETS)


def _bucket_index(starts: np.ndarray, n_words) -> np.ndarray:
    """Index of the bucket holding each length (lengths >= 1; buckets are contiguous from 1)."""
    return np.searchsorted(starts, n_words, side="right") - 1


def phrase_length_bucket_index(n_words: np.ndarray) -> np.ndarray:
    """Index into PHRASE_LENGTH_BUCKETS of each phrase length (vectorised :func:`length_bucket`)."""
    return _bucket_index(_PHRASE_STARTS, np.asarray(n_words))


def length_bucket(n_words: int) -> str:
    """Name of the phrase-length bucket of a phrase of ``n_words`` words: '1', '2', '3-5', '6-10', '11-20', '21+'."""
    if n_words < 1:
        raise ValueError(f"a phrase has at least one word, not {n_words}")
    return PHRASE_LENGTH_BUCKETS[int(_bucket_index(_PHRASE_STARTS, n_words))][0]


@dataclass
class LabelDistribution:
    """How many nodes carry each label."""

    total: int  # nodes counted, unlabelled ones included
    counts: dict[str, int]  # label ("0", "1", ..., "unlabelled") -> nodes
    fractions: dict[str, float]  # label -> counts / total (0.0 when total is 0)


@dataclass
class LengthSummary:
    """Sentence lengths in words; min, median, mean, max are None for no sentences."""

    min: int | None
    median: float | None
    mean: float | None
    max: int | None
    histogram: dict[str, int]  # SENTENCE_LENGTH_BUCKETS name -> sentences


@dataclass
class TreebankStats:
    """Everything :func:`treebank_stats` reports about a set of trees."""

    n_trees: int
    n_nodes: int
    n_tokens: int  # words, counted with repetition (leaves)
    n_word_types: int  # distinct words
    sentence_length: LengthSummary
    root_labels: LabelDistribution
    node_labels: LabelDistribution  # all nodes, roots and leaves included
    labels_by_phrase_length: dict[str, LabelDistribution]  # PHRASE_LENGTH_BUCKETS name -> labels

    def as_dict(self) -> dict:
        """A plain, JSON-serialisable dict of the same content."""
        return dataclasses.asdict(self)


class StatsAccumulator:
    """Collects the counts tree by tree (for streaming input); :meth:`result` gives the stats.

    Memory is one entry per distinct word, sentence length and label, whatever the treebank size.
    """

    def __init__(self, num_classes: int | None = None) -> None:
        self.num_classes = num_classes
        self.n_trees = 0
        self.n_nodes = 0
        self.word_types: set[str] = set()
        self.sentence_lengths: Counter[int] = Counter()
        self.root_labels: Counter[int] = Counter()
        self.node_labels: Counter[int] = Counter()
        self.by_length: Counter[tuple[int, int]] = Counter()  # (phrase bucket index, label) -> nodes

    def add(self, tree: Tree) -> None:
        spans = tree.spans()
        phrase_bucket = _bucket_index(_PHRASE_STARTS, spans[:, 1] - spans[:, 0])
        labels = tree.label.tolist()
        self.n_trees += 1
        self.n_nodes += tree.n_nodes
        self.word_types.update(tree.words)
        self.sentence_lengths[len(tree.words)] += 1
        self.root_labels[labels[-1]] += 1
        self.node_labels.update(labels)
        self.by_length.update(zip(phrase_bucket.tolist(), labels))

    def add_block(self, block: TreeBlock) -> None:
        """Count all trees of a block of the bulk reader at once (the same counts as :meth:`add` per tree)."""
        lengths = np.diff(block.leaf_start)
        labels = block.label
        n_words = phrase_lengths_of(block.left, block.right, block.node_start)
        bucket_of = _bucket_index(_PHRASE_STARTS, n_words)
        self.n_trees += block.n_trees
        self.n_nodes += block.n_nodes
        words = block.words
        self.word_types.update(words[i] for i in np.unique(block.leaf_word).tolist())
        self.sentence_lengths.update(_counts(lengths))
        self.root_labels.update(_counts(labels[block.node_start[1:] - 1]))
        self.node_labels.update(_counts(labels))
        pairs = _counts(bucket_of.astype(np.int64) * 2**32 + (labels.astype(np.int64) + 1))
        self.by_length.update({(key >> 32, (key & 0xFFFFFFFF) - 1): n for key, n in pairs.items()})

    def result(self) -> TreebankStats:
        keys = self._label_keys()
        by_length: list[Counter[int]] = [Counter() for _ in PHRASE_LENGTH_BUCKETS]
        for (bucket, label), count in self.by_length.items():
            by_length[bucket][label] = count
        return TreebankStats(
            n_trees=self.n_trees,
            n_nodes=self.n_nodes,
            n_tokens=sum(n * k for n, k in self.sentence_lengths.items()),
            n_word_types=len(self.word_types),
            sentence_length=_length_summary(self.sentence_lengths),
            root_labels=_distribution(self.root_labels, keys),
            node_labels=_distribution(self.node_labels, keys),
            labels_by_phrase_length={
                name: _distribution(counts, keys) for (name, _, _), counts in zip(PHRASE_LENGTH_BUCKETS, by_length)
            },
        )

    def _label_keys(self) -> list[int]:
        """Labels to report, in order: 0..C-1 if C is known, else those seen; UNLABELLED last."""
        if self.num_classes is not None:
            labelled = set(range(self.num_classes))
        else:
            labelled = set()
        labelled.update(label for label in self.node_labels if label != UNLABELLED)
        return sorted(labelled) + [UNLABELLED]


def treebank_stats(trees: Iterable[Tree], num_classes: int | None = None) -> TreebankStats:
    """Statistics of ``trees``; with ``num_classes``, every label 0..C-1 is listed, even when unused."""
    accumulator = StatsAccumulator(num_classes)
    for tree in trees:
        accumulator.add(tree)
    return accumulator.result()


def _counts(values: np.ndarray) -> dict[int, int]:
    """value -> occurrences, for an integer array."""
    keys, counts = np.unique(values, return_counts=True)
    return dict(zip(keys.tolist(), counts.tolist()))


def _label_key(label: int) -> str:
    return UNLABELLED_KEY if label == UNLABELLED else str(label)


def _distribution(counts: Counter[int], keys: list[int]) -> LabelDistribution:
    total = sum(counts.values())
    return LabelDistribution(
        total=total,
        counts={_label_key(k): counts[k] for k in keys},
        fractions={_label_key(k): (counts[k] / total if total else 0.0) for k in keys},
    )


def _length_summary(lengths: Counter[int]) -> LengthSummary:
    histogram = dict.fromkeys((name for name, _, _ in SENTENCE_LENGTH_BUCKETS), 0)
    if not lengths:
        return LengthSummary(min=None, median=None, mean=None, max=None, histogram=histogram)
    values = np.array(sorted(lengths))
    weights = np.array([lengths[v] for v in values])
    for bucket, count in zip(_bucket_index(_SENTENCE_STARTS, values).tolist(), weights.tolist()):
        histogram[SENTENCE_LENGTH_BUCKETS[bucket][0]] += count
    n = int(weights.sum())
    cumulative = np.cumsum(weights)
    # median of the sorted lengths: the middle one, or the mean of the two middle ones
    low = int(values[np.searchsorted(cumulative, (n + 1) // 2)])
    high = int(values[np.searchsorted(cumulative, n // 2 + 1)])
    return LengthSummary(
        min=int(values[0]),
        median=(low + high) / 2,
        mean=float((values * weights).sum() / n),
        max=int(values[-1]),
        histogram=histogram,
    )
