"""External check: files written by gensim read the same with our loader as with gensim's, and the reverse.

Reference implementation: gensim (``gensim.models.KeyedVectors``, version >= 4.3),
``save_word2vec_format`` to write and ``load_word2vec_format`` to read word2vec
text, word2vec binary and header-less (GloVe) text, plain or gzip-compressed
(gensim compresses when the file name ends in ``.gz``).
"""

from __future__ import annotations

import logging
import warnings

import numpy as np
import pytest

with warnings.catch_warnings():
    warnings.simplefilter("ignore", DeprecationWarning)  # raised inside gensim's own imports
    from gensim.models import KeyedVectors

from rntn_engine.data.word_vector_writers import write_glove_text, write_word2vec_binary, write_word2vec_text
from rntn_engine.data.word_vectors import load_vectors_for

logging.getLogger("gensim").setLevel(logging.WARNING)

# words of the demo scenario, with non-ASCII ones and a mixed-case one
WORDS = ["the", "palm", "house", "café", "fiancé", "Orchid", "orchid", "ñandú", ",", "!", "glasshouse", "fern"]
# (gensim save option, our expected format)
GENSIM_LAYOUTS = [
    ({"binary": False}, "word2vec-text"),
    ({"binary": True}, "word2vec-binary"),
    ({"binary": False, "write_header": False}, "glove"),
]


def gensim_vectors(seed: int = 0, dim: int = 7) -> KeyedVectors:
    rng = np.random.default_rng(seed)
    values = rng.standard_normal((len(WORDS), dim)) * np.logspace(-6, 3, dim)  # tiny to large magnitudes
    kv = KeyedVectors(dim)
    kv.add_vectors(WORDS, values.astype(np.float32))
    return kv


def gensim_load(path, fmt: str) -> KeyedVectors:
    return KeyedVectors.load_word2vec_format(str(path), binary=fmt == "word2vec-binary", no_header=fmt == "glove")


@pytest.mark.parametrize("options, fmt", GENSIM_LAYOUTS)
@pytest.mark.parametrize("suffix", [".vec", ".vec.gz"])
def test_files_written_by_gensim_read_like_gensim_reads_them(tmp_path, options, fmt, suffix):
    path = tmp_path / f"vectors{suffix}"
    gensim_vectors().save_word2vec_format(str(path), **options)
    reference = gensim_load(path, fmt)  # gensim's own loader: the expected float32 values

    loaded = load_vectors_for(path, None)
    assert loaded.format == fmt and loaded.compressed == suffix.endswith(".gz")
    assert list(loaded.words) == list(reference.index_to_key)
    assert loaded.vectors.dtype == reference.vectors.dtype == np.float32
    np.testing.assert_array_equal(loaded.vectors.view(np.uint32), reference.vectors.view(np.uint32))

    subset = load_vectors_for(path, ["fern", "café", "Palm", "absent"])
    assert subset.coverage.exact == ("fern", "café") and subset.coverage.lowercased == ("Palm",)
    for word in ("fern", "café", "Palm"):
        np.testing.assert_array_equal(subset.vector_of(word), reference[word.lower()])


@pytest.mark.parametrize(
    "writer, fmt",
    [(write_word2vec_text, "word2vec-text"), (write_word2vec_binary, "word2vec-binary"), (write_glove_text, "glove")],
)
def test_files_written_by_us_read_the_same_in_gensim(tmp_path, writer, fmt):
    vectors = gensim_vectors(seed=1).vectors
    path = tmp_path / "ours.vec"
    writer(path, WORDS, vectors)
    reference = gensim_load(path, fmt)
    assert list(reference.index_to_key) == WORDS
    np.testing.assert_array_equal(reference.vectors.view(np.uint32), vectors.view(np.uint32))
    np.testing.assert_array_equal(load_vectors_for(path, None).vectors, reference.vectors)
