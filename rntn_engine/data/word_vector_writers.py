"""Write word vectors as GloVe text, word2vec text or word2vec binary (optionally gzip-compressed).

Legend: n words, d values per vector.

Values are written as float32. Text files use ``%.9g``: nine significant digits
identify every float32 exactly, and the readers (ours and gensim's) parse a
number to float64 and round it to float32, which gives back the same value
(nine digits put the decimal within 2^-27 relative of the float32, far from
the half-way points where that double rounding could go astray).
Binary rows are ``word``, a space, d little-endian float32 values and a line
feed, as the original C tool writes them.

A file is written under a temporary name in the same directory and renamed into
place, so a failed write never leaves half a file under the final name.
"""

from __future__ import annotations

import gzip
import os
import unicodedata
from pathlib import Path
from typing import BinaryIO, Sequence

import numpy as np

from rntn_engine.data.atomic_files import atomic_output



def write_glove_text(
    path: str | os.PathLike, words: Sequence[str], vectors: np.ndarray, *, compress: bool = False
) -> None:
    """GloVe text: ``word v1 ... vd`` per line, no header."""
    values = _checked(words, vectors)
    _write_atomically(path, compress, lambda out: _write_text_rows(out, words, values))


def write_word2vec_text(
    path: str | os.PathLike, words: Sequence[str], vectors: np.ndarray, *, compress: bool = False
) -> None:
    """word2vec text: the header ``n d``, then one ``word v1 ... vd`` line per word."""
    values = _checked(words, vectors)

    def write(out: BinaryIO) -> None:
        out.write(f"{values.shape[0]} {values.shape[1]}\n".encode("ascii"))
        _write_text_rows(out, words, values)

    _write_atomically(path, compress, write)


def write_word2vec_binary(
    path: str | os.PathLike, words: Sequence[str], vectors: np.ndarray, *, compress: bool = False
) -> None:
    """word2vec binary: the header ``n d\\n``; per word its UTF-8 bytes, a space, d little-endian float32, ``\\n``."""
    values = _checked(words, vectors).astype("<f4")

    def write(out: BinaryIO) -> None:
        out.write(f"{values.shape[0]} {values.shape[1]}\n".encode("ascii"))
        for word, row in zip(words, values):
            out.write(word.encode("utf-8") + b" " + row.tobytes() + b"\n")

    _write_atomically(path, compress, write)


def _checked(words: Sequence[str], vectors: np.ndarray) -> np.ndarray:
    """``vectors`` as a finite (n, d) float32 array matching ``words``; ValueError otherwise."""
    values = np.asarray(vectors)
    if values.ndim != 2 or values.shape[1] < 1:
        raise ValueError(f"vectors must be an (n, d) array with d >= 1, not of shape {values.shape}")
    if values.shape[0] != len(words):
        raise ValueError(f"{len(words)} words but {values.shape[0]} vectors")
    with np.errstate(over="ignore", invalid="ignore"):
        values = values.astype(np.float32)
    if not np.isfinite(values).all():
        raise ValueError("vectors must be finite float32 values (no NaN, Inf or values beyond 3.4e38)")
    seen: set[str] = set()
    for row, word in enumerate(words):
        bad = next((c for c in word if c.isspace() or unicodedata.category(c) in ("Cc", "Zl", "Zp")), None)
        if not word or bad is not None:
            what = "is empty" if not word else f"holds U+{ord(bad):04X} (whitespace or a control character)"
            raise ValueError(f"word {row} {word!r} {what}: readers of vector files would not see it as one word")
        if word in seen:
            raise ValueError(f"word {word!r} appears twice")
        seen.add(word)
    return values


def _write_text_rows(out: BinaryIO, words: Sequence[str], values: np.ndarray) -> None:
    row_format = " ".join(["%.9g"] * values.shape[1])
    for word, row in zip(words, values.tolist()):
        out.write(f"{word} {row_format % tuple(row)}\n".encode("utf-8"))


def _write_atomically(path: str | os.PathLike, compress: bool, write) -> None:
    with atomic_output(Path(path)) as raw:
        if compress:
            with gzip.GzipFile(fileobj=raw, mode="wb", mtime=0) as out:
                write(out)
        else:
            write(raw)
