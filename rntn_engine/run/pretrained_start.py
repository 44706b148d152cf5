"""Starting a run from pretrained word vectors: vocabulary extension, initial L, coverage report.

Only a new run reads the vector file; the rows it gives are then part of the
parameters, so a resumed run never reads it again.

* ``extend_vocabulary = N`` appends the first N words of the vector file (files list
  the most frequent words first) to the training vocabulary, after the training
  words, so prediction knows more words than training saw.
* Rows of L for words the file has are copied from it (exactly, or after lowercasing
  the vocabulary word); every other row -- the unknown word included -- is drawn
  from U(-a, a) with a = sqrt(3) * s, s the per-coordinate standard deviation of the
  pretrained vectors (data/word_vectors.py: vectors_to_matrix), from a generator of its
  own seeded with (seed, 1), so the rest of the initialisation is unchanged.
"""

from __future__ import annotations

from typing import Callable

import numpy as np

from rntn_engine.data.batches import EncodedTreebank
from rntn_engine.data.vocabulary import Vocabulary
from rntn_engine.data.word_vectors import load_vectors_for, read_top_words, vectors_to_matrix
from rntn_engine.run.run_config import DIM_WITHOUT_VECTORS, ConfigError, TrainConfig


def vector_file_dim(config: TrainConfig) -> int:
    """d of the configured vector file (reads its first row only)."""
    return read_top_words(config.vectors_file, 1, format=config.vectors_format,
                          encoding_errors=config.vectors_encoding_errors).dim


def resolve_dim(config: TrainConfig) -> None:
    """Fill ``config.dim`` when it is 0 (auto): the vector file's d, else DIM_WITHOUT_VECTORS; refuse a clash."""
    if not config.vectors_file:
        config.dim = config.dim or DIM_WITHOUT_VECTORS
        return
    file_dim = vector_file_dim(config)
    if config.dim and config.dim != file_dim:
        raise ConfigError(f"--dim {config.dim} clashes with {config.vectors_file}, whose vectors have "
                          f"{file_dim} values; drop --dim to take the file's size")
    config.dim = file_dim


def extend_with_vector_words(config: TrainConfig, vocabulary: Vocabulary) -> Vocabulary:
    if not (config.vectors_file and config.extend_vocabulary):
        return vocabulary
    top = read_top_words(config.vectors_file, config.extend_vocabulary, format=config.vectors_format,
                         encoding_errors=config.vectors_encoding_errors)
    return vocabulary.extended(top.words)


def initial_word_vectors(config: TrainConfig, vocabulary: Vocabulary, train: EncodedTreebank,
                         dtype: np.dtype, echo: Callable[[str], None]) -> np.ndarray:
    """The initial L (|V|, d) from the vector file, after printing the coverage report."""
    loaded = load_vectors_for(config.vectors_file, vocabulary, format=config.vectors_format,
                              encoding_errors=config.vectors_encoding_errors, expected_dim=config.dim)
    matrix, _ = vectors_to_matrix(loaded, vocabulary, np.random.default_rng([config.seed, 1]), config.dim,
                                  dtype=dtype)
    for line in coverage_report(loaded, vocabulary, train, config):
        echo(line)
    return matrix


def coverage_report(loaded, vocabulary: Vocabulary, train: EncodedTreebank, config: TrainConfig) -> list[str]:
    """Word types and tokens of the training data found exactly, after lowercasing, and not found."""
    leaves = train.word[train.left < 0]
    counts = np.bincount(leaves, minlength=len(vocabulary))
    groups = {"exact": [0, 0], "lowercased": [0, 0], "missing": [0, 0]}
    for i in np.flatnonzero(counts[1:]) + 1:
        status = loaded.coverage.status(vocabulary.words[i])
        groups[status][0] += 1
        groups[status][1] += int(counts[i])
    types = sum(g[0] for g in groups.values())
    tokens = sum(g[1] for g in groups.values())

    def share(n: int, total: int) -> str:
        return f"{n:,} ({100 * n / total:.1f}%)" if total else "0"

    lines = [f"pretrained vectors: {loaded.path} ({loaded.format}{', gzip' if loaded.compressed else ''}, "
             f"d={loaded.dim}, {loaded.rows_scanned:,} rows scanned)"]
    for what, index, total in (("word types", 0, types), ("tokens", 1, tokens)):
        lines.append(f"  training {what}: {total:,}; found exactly {share(groups['exact'][index], total)}, "
                     f"after lowercasing {share(groups['lowercased'][index], total)}, "
                     f"not found {share(groups['missing'][index], total)}")
    lines.append(f"  unknown-word tokens (rarer than --min-count {config.min_count}): {int(counts[0]):,}")
    lines.append("  words not found start random, scaled to the spread of the pretrained vectors")
    extra = len(vocabulary) - 1 - types
    if config.extend_vocabulary:
        lines.append(f"  vocabulary extended to {len(vocabulary):,} words with the file's first "
                     f"{config.extend_vocabulary:,} rows ({extra:,} words not in the training data)")
    if config.freeze_vectors:
        lines.append("  word vectors are kept fixed during training (--freeze-vectors)")
    return lines
