"""Word vocabulary: deterministic ids, one unknown-word token, optional lowercasing.

Ids are decided by the data alone, so the same training trees give the same ids on
any machine: id 0 is the unknown-word token, then words by descending count, ties
broken by the word's Unicode code points. Words seen fewer than ``min_count``
times in training map to the unknown token, which therefore learns a vector of
its own from rare words (default ``min_count=2``, common practice).
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field
from typing import Iterable, Mapping

import numpy as np

from rntn_engine.data.tree import Tree

UNKNOWN_WORD = "<unknown>"


@dataclass(frozen=True)
class Vocabulary:
    """Maps words to row ids of the word-vector matrix L."""

    words: tuple[str, ...]  # id -> word; words[0] is UNKNOWN_WORD
    lowercase: bool = False  # fold words to lower case before lookup
    min_count: int = 1  # minimum training count a word needed to get its own id
    _index: dict[str, int] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        if not self.words or self.words[0] != UNKNOWN_WORD:
            raise ValueError(f"vocabulary must start with the unknown-word token {UNKNOWN_WORD!r}")
        index = {w: i for i, w in enumerate(self.words)}
        if len(index) != len(self.words):
            raise ValueError("vocabulary has duplicated words")
        object.__setattr__(self, "_index", index)

    def __len__(self) -> int:
        return len(self.words)

    def __contains__(self, word: str) -> bool:
        return self.normalise(word) in self._index

    def normalise(self, word: str) -> str:
        return word.lower() if self.lowercase else word

    def id_of(self, word: str) -> int:
        """The word's id, or 0 (the unknown-word token) when it has none."""
        return self._index.get(self.normalise(word), 0)

    def ids(self, words: Iterable[str]) -> np.ndarray:
        """int32 ids of a sequence of words."""
        return np.fromiter((self.id_of(w) for w in words), dtype=np.int32)

    def extended(self, more_words: Iterable[str]) -> "Vocabulary":
        """A copy with ``more_words`` appended (those not already present), in the given order."""
        seen = set(self.words)
        extra = []
        for w in more_words:
            w = self.normalise(w)
            if w not in seen:
                seen.add(w)
                extra.append(w)
        return Vocabulary(self.words + tuple(extra), self.lowercase, self.min_count)


def build_vocabulary(trees: Iterable[Tree], min_count: int = 2, lowercase: bool = False) -> Vocabulary:
    """Count the leaf words of ``trees`` and keep those seen at least ``min_count`` times."""
    counts: Counter[str] = Counter()
    for tree in trees:
        counts.update(tree.words)
    return vocabulary_from_counts(counts, min_count, lowercase)


def vocabulary_from_counts(counts: Mapping[str, int], min_count: int = 2, lowercase: bool = False) -> Vocabulary:
    """The vocabulary of words counted ``counts[word]`` times in the training data (see build_vocabulary)."""
    if min_count < 1:
        raise ValueError("min_count must be at least 1")
    if lowercase:
        folded: Counter[str] = Counter()
        for w, c in counts.items():
            folded[w.lower()] += c
        counts = folded
    kept = sorted((w for w, c in counts.items() if c >= min_count and w != UNKNOWN_WORD),
                  key=lambda w: (-counts[w], w))
    return Vocabulary((UNKNOWN_WORD, *kept), lowercase, min_count)
