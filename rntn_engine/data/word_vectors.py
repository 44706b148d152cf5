"""Pretrained word vectors: load the rows a vocabulary needs, report coverage, build the matrix L.

Legend: |V| vocabulary size, d values per vector, n rows kept.

Formats and detection are described in :mod:`word_vector_files`; the readers in
:mod:`word_vectors_text` and :mod:`word_vectors_binary`; the writers in
:mod:`word_vector_writers`. In short: GloVe text, word2vec text and word2vec
binary, plain or gzip-compressed, told apart by their content, read in one
streaming pass that parses only the values of wanted words.

Matching words
--------------
A wanted word ``w`` is found *exactly* if the file has a row for ``w``; otherwise,
with ``lowercase_fallback`` (the default), it is found *after lowercasing* if the
file has a row for ``w.lower()`` (cased vocabulary, lowercase file). The first
row of a word wins; later repeats of a word that was looked up are counted in
``duplicates`` and reported by one :class:`DuplicateWordsWarning`. With
``wanted=None`` every row is kept (and every repeat counted).

Bad input raises :class:`VectorFileError` with one line ``FILE:LINE:COL: message``
for text files and ``FILE:byte N: message`` for binary ones.
"""

from __future__ import annotations

import math
import os
import warnings
from dataclasses import dataclass, field
from typing import Iterable

import numpy as np

from rntn_engine.data import word_vector_files as files
from rntn_engine.data.vocabulary import Vocabulary
from rntn_engine.data.word_vector_files import RowKeeper, open_vector_stream, read_file_start
from rntn_engine.data.word_vectors_binary import BinaryRowReader
from rntn_engine.data.word_vectors_text import TextRowReader

DEFAULT_MAX_BYTES = files.DEFAULT_MAX_BYTES
# Half-width of the uniform draw for rows of words not found when no pretrained scale
# can be measured (fewer than two vectors found): the model's own default, L ~ U(-0.1, 0.1).
FALLBACK_HALF_WIDTH = 0.1


class DuplicateWordsWarning(UserWarning):
    """A vector file holds some words more than once; the first row of each was used."""


@dataclass(frozen=True)
class VectorCoverage:
    """Which wanted words the file covers, each in exactly one of three groups (in the order asked)."""

    exact: tuple[str, ...] = ()  # a row for the word as written
    lowercased: tuple[str, ...] = ()  # no such row, but one for word.lower()
    missing: tuple[str, ...] = ()  # neither
    _status: dict[str, str] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        status = {w: "missing" for w in self.missing}
        status.update((w, "lowercased") for w in self.lowercased)
        status.update((w, "exact") for w in self.exact)
        object.__setattr__(self, "_status", status)

    @property
    def wanted(self) -> int:
        return len(self.exact) + len(self.lowercased) + len(self.missing)

    @property
    def found(self) -> int:
        return len(self.exact) + len(self.lowercased)

    def fraction_found(self) -> float:
        """Found / wanted (1.0 when nothing was wanted)."""
        return self.found / self.wanted if self.wanted else 1.0

    def status(self, word: str) -> str:
        """"exact", "lowercased" or "missing"; KeyError for a word that was not wanted."""
        return self._status[word]

    def summary(self) -> str:
        """One line, e.g. ``812 of 860 words found (790 exactly, 22 after lowercasing), 48 missing``."""
        return (
            f"{self.found} of {self.wanted} words found ({len(self.exact)} exactly, "
            f"{len(self.lowercased)} after lowercasing), {len(self.missing)} missing"
        )


@dataclass(frozen=True, eq=False)
class LoadedVectors:
    """The rows read from a vector file, and what the reading found out."""

    path: str
    format: str  # "glove", "word2vec-text" or "word2vec-binary"
    compressed: bool  # the file was gzip data
    dim: int  # d
    words: tuple[str, ...]  # the file's words that were kept, in file order
    vectors: np.ndarray  # (n, d) float32, row i belongs to words[i]
    coverage: VectorCoverage  # per wanted word: exact / lowercased / missing
    duplicates: int  # repeated rows of kept words that were skipped
    rows_scanned: int  # rows read (all rows, unless reading stopped early)
    bytes_scanned: int  # uncompressed bytes read up to the last row
    declared_rows: int | None  # the word2vec header's count; None for GloVe
    lowercase_fallback: bool = True  # vector_of() also tries word.lower()
    _index: dict[str, int] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "_index", {w: i for i, w in enumerate(self.words)})

    def row_of(self, word: str) -> int | None:
        """Row of ``vectors`` for ``word`` (as written, else lowercased if allowed), or None."""
        row = self._index.get(word)
        if row is None and self.lowercase_fallback:
            row = self._index.get(word.lower())
        return row

    def vector_of(self, word: str) -> np.ndarray | None:
        row = self.row_of(word)
        return None if row is None else self.vectors[row]


def load_vectors_for(
    path: str | os.PathLike,
    wanted: Vocabulary | Iterable[str] | None,
    *,
    format: str = "auto",
    lowercase_fallback: bool = True,
    encoding_errors: str = "strict",
    max_bytes: int = DEFAULT_MAX_BYTES,
    expected_dim: int | None = None,
) -> LoadedVectors:
    """Read the vectors of the ``wanted`` words from a GloVe or word2vec file, in one streaming pass.

    ``wanted``: a :class:`Vocabulary` (its unknown-word token, id 0, is not looked
    up), any collection of words, or None for every row. ``format``: "auto",
    "glove", "word2vec-text" or "word2vec-binary". ``encoding_errors``: "strict"
    (undecodable bytes are an error) or "replace" (they become U+FFFD).
    ``max_bytes``: a word2vec header may declare at most this many bytes of
    float32 values (count x dim x 4), and no more than this may be kept.
    ``expected_dim``: the file's d must be this. Raises VectorFileError.
    """
    words = _wanted_words(wanted)
    keys = None
    if words is not None:
        keys = set(words)
        if lowercase_fallback:
            keys.update(w.lower() for w in words)
    result = _read(path, keys, None, format, encoding_errors, max_bytes, expected_dim, lowercase_fallback)
    if words is None:
        return result
    coverage, used = _coverage(words, result, lowercase_fallback)
    keep = [i for i, w in enumerate(result.words) if w in used]  # drop lowercase forms nobody needed
    return LoadedVectors(
        result.path,
        result.format,
        result.compressed,
        result.dim,
        tuple(result.words[i] for i in keep),
        np.ascontiguousarray(result.vectors[keep]),
        coverage,
        result.duplicates,
        result.rows_scanned,
        result.bytes_scanned,
        result.declared_rows,
        lowercase_fallback,
    )


def read_top_words(
    path: str | os.PathLike,
    n: int,
    *,
    format: str = "auto",
    encoding_errors: str = "strict",
    max_bytes: int = DEFAULT_MAX_BYTES,
    expected_dim: int | None = None,
) -> LoadedVectors:
    """The first ``n`` rows of a vector file (files list the most frequent words first).

    Reading stops after row ``n``, so the header's count is only checked against
    the body when the file has no more than ``n`` rows. A repeated word is skipped
    (counted in ``duplicates``), so fewer than ``n`` words may come back.
    """
    if n < 0:
        raise ValueError(f"n must be at least 0, not {n}")
    return _read(path, None, n, format, encoding_errors, max_bytes, expected_dim, True)


def vectors_to_matrix(
    loaded: LoadedVectors,
    vocabulary: Vocabulary,
    rng: np.random.Generator,
    dim: int,
    *,
    dtype: type = np.float64,
) -> tuple[np.ndarray, np.ndarray]:
    """The word-vector matrix L (|V| x d) for ``vocabulary``, and a bool mask of the rows filled from the file.

    Row i is the file's vector of word i when :meth:`LoadedVectors.row_of` finds
    it. Every other row, row 0 (the unknown word) included, is drawn from
    U(-a, a) with a = sqrt(3) * s, where s is the per-coordinate standard
    deviation of the found vectors, pooled over coordinates:
    s^2 = mean over j of Var_i(L[i, j]) for the found rows i. A uniform draw on
    [-a, a] has standard deviation a / sqrt(3) = s, so random and pretrained rows
    have the same spread. With fewer than two found rows (or s = 0), a = 0.1,
    the model's default initialisation. All |V| x d values are drawn, found rows
    then overwritten, so the generator advances the same way whatever was found.
    """
    if loaded.dim != dim:
        binary = loaded.format == "word2vec-binary"
        files.check_dim(loaded.path, loaded.dim, dim, binary)
    found_mask = np.zeros(len(vocabulary), dtype=bool)
    rows = np.zeros(len(vocabulary), dtype=np.intp)
    for i, word in enumerate(vocabulary.words):
        row = loaded.row_of(word) if i > 0 else None
        if row is not None:
            found_mask[i] = True
            rows[i] = row
    found = loaded.vectors[rows[found_mask]].astype(np.float64)
    scale = math.sqrt(float(found.var(axis=0).mean())) if len(found) >= 2 else 0.0
    half_width = math.sqrt(3.0) * scale if scale > 0 else FALLBACK_HALF_WIDTH
    matrix = rng.uniform(-half_width, half_width, size=(len(vocabulary), dim)).astype(dtype)
    matrix[found_mask] = found
    return matrix, found_mask


# --- helpers ---------------------------------------------------------------------------------------


def _wanted_words(wanted: Vocabulary | Iterable[str] | None) -> list[str] | None:
    """The words to look up, in a fixed order (a set is sorted), without duplicates."""
    if wanted is None:
        return None
    if isinstance(wanted, Vocabulary):
        return list(wanted.words[1:])
    if isinstance(wanted, str):
        raise TypeError("wanted must be a collection of words, not one string")
    if isinstance(wanted, (set, frozenset)):
        return sorted(wanted)
    return list(dict.fromkeys(wanted))


def _coverage(words: list[str], result: LoadedVectors, lowercase_fallback: bool) -> tuple[VectorCoverage, set[str]]:
    """Sort ``words`` into exact / lowercased / missing; also the file words they use."""
    exact, lowered, missing, used = [], [], [], set()
    present = set(result.words)
    for word in words:
        if word in present:
            exact.append(word)
            used.add(word)
        elif lowercase_fallback and word.lower() in present:
            lowered.append(word)
            used.add(word.lower())
        else:
            missing.append(word)
    return VectorCoverage(tuple(exact), tuple(lowered), tuple(missing)), used


def _read(
    path: str | os.PathLike,
    keys: set[str] | None,
    stop_after: int | None,
    fmt: str,
    encoding_errors: str,
    max_bytes: int,
    expected_dim: int | None,
    lowercase_fallback: bool,
) -> LoadedVectors:
    """Open, detect, read; the rows of ``keys`` (None: all), stopping after ``stop_after`` rows."""
    if fmt not in files.FORMATS:
        raise ValueError(f"format must be one of {', '.join(files.FORMATS)}, not {fmt!r}")
    if encoding_errors not in files.ENCODING_ERRORS:
        raise ValueError(f"encoding_errors must be one of {', '.join(files.ENCODING_ERRORS)}, not {encoding_errors!r}")
    if max_bytes < 1:
        raise ValueError(f"max_bytes must be positive, not {max_bytes}")
    name = os.fspath(path)
    with open_vector_stream(name) as stream:
        start = read_file_start(stream, fmt, max_bytes, expected_dim)
        binary = start.format == "word2vec-binary"
        keeper = RowKeeper(name, keys, max_bytes, "byte" if binary else "line")
        if binary:
            reader: BinaryRowReader | TextRowReader = BinaryRowReader(
                stream, start, keeper, encoding_errors=encoding_errors, stop_after=stop_after
            )
        else:
            reader = TextRowReader(
                stream,
                start,
                keeper,
                encoding_errors=encoding_errors,
                expected_dim=expected_dim,
                stop_after=stop_after,
            )
        reader.read()
        dim = reader.dim
        assert dim is not None
        if keeper.duplicates:
            warnings.warn(
                f"{name}: {keeper.duplicates} repeated word(s) skipped, the first row of each kept "
                f"(first repeat: {keeper.first_duplicate})",
                DuplicateWordsWarning,
                stacklevel=3,
            )
        return LoadedVectors(
            name,
            start.format,
            stream.compressed,
            dim,
            tuple(keeper.words),
            keeper.matrix(dim),
            VectorCoverage(),
            keeper.duplicates,
            reader.rows,
            reader.offset,
            start.declared_rows,
            lowercase_fallback,
        )
