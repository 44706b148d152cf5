"""Fuzz: any bytes given to any vector reader either load or raise a located VectorFileError, nothing else."""

from __future__ import annotations

import gzip
import warnings
from unittest import mock

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rntn_engine.data import word_vector_files
from rntn_engine.data.errors import VectorFileError
from rntn_engine.data.word_vector_writers import write_glove_text, write_word2vec_binary, write_word2vec_text
from rntn_engine.data.word_vectors import LoadedVectors, load_vectors_for, read_top_words

FORMATS = ["auto", "glove", "word2vec-text", "word2vec-binary"]
FUZZ = settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])

# pieces that make near-miss vector files more likely than uniform random bytes do
PIECES = [b"a", b"b", b"\xc3\xa9", b"1", b"-2.5", b"1e3", b"nan", b"inf", b"x", b" ", b"  ", b"\t", b"\r", b"\n",
          b"\n\n", b"2 2\n", b"3 1\n", b"\x00", b"\xff", b"\x1f\x8b", b"\x00\x00\x80?"]
near_files = st.lists(st.sampled_from(PIECES), max_size=40).map(b"".join)


def load_or_error(path, fmt: str, wanted, errors: str = "strict") -> LoadedVectors | str:
    """The loaded vectors, or the error's text after checking that it is located and one line."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # duplicate-word warnings
            return load_vectors_for(path, wanted, format=fmt, encoding_errors=errors, max_bytes=10**6)
    except VectorFileError as error:
        assert error.line is not None or error.byte_offset is not None, str(error)
        assert str(error).startswith(f"{path}:") and "\n" not in str(error)
        return str(error)


def check_result(loaded: LoadedVectors | str) -> None:
    if isinstance(loaded, LoadedVectors):
        assert loaded.vectors.shape == (len(loaded.words), loaded.dim) and loaded.dim >= 1
        assert loaded.vectors.dtype == np.float32 and np.isfinite(loaded.vectors).all()


@FUZZ
@given(
    data=st.binary(max_size=300) | near_files,
    fmt=st.sampled_from(FORMATS),
    wanted=st.sampled_from([None, {"a", "b"}]),
)
def test_any_bytes_load_or_raise_a_located_error(tmp_path, data, fmt, wanted):
    path = tmp_path / "fuzz.vec"
    path.write_bytes(data)
    check_result(load_or_error(path, fmt, wanted))
    check_result(load_or_error(path, fmt, wanted, errors="replace"))


@FUZZ
@given(data=st.binary(max_size=200) | near_files, fmt=st.sampled_from(FORMATS))
def test_any_gzip_content_or_broken_gzip_loads_or_raises(tmp_path, data, fmt):
    path = tmp_path / "fuzz.vec.gz"
    compressed = gzip.compress(data, mtime=0)
    for content in (compressed, compressed[: len(compressed) // 2], b"\x1f\x8b" + data):
        path.write_bytes(content)
        check_result(load_or_error(path, fmt, None))


@FUZZ
@given(
    writer=st.sampled_from([write_glove_text, write_word2vec_text, write_word2vec_binary]),
    edits=st.lists(
        st.tuples(
            st.integers(0, 10**6),
            st.sampled_from(["flip", "cut", "insert", "truncate"]),
            st.binary(min_size=1, max_size=3),
        ),
        min_size=1,
        max_size=3,
    ),
    fmt=st.sampled_from(FORMATS),
)
def test_damaged_valid_files_load_or_raise(tmp_path, writer, edits, fmt):
    path = tmp_path / "damaged.vec"
    writer(path, ["a", "b", "café", "d"], np.arange(12, dtype=np.float32).reshape(4, 3) / 7)
    data = bytearray(path.read_bytes())
    for position, kind, payload in edits:
        i = position % (len(data) + 1)
        if kind == "flip" and i < len(data):
            data[i] ^= payload[0] or 1
        elif kind == "cut":
            del data[i : i + len(payload)]
        elif kind == "insert":
            data[i:i] = payload
        else:
            del data[i:]
    path.write_bytes(bytes(data))
    check_result(load_or_error(path, fmt, {"a", "café"}))


@FUZZ
@given(
    data=near_files,
    fmt=st.sampled_from(FORMATS),
    block=st.integers(1, 9),
    top=st.integers(0, 4),
    wanted=st.sampled_from([None, {"a", "b", "é"}]),
)
def test_the_block_size_never_changes_the_outcome(tmp_path, data, fmt, block, top, wanted):
    # the same result or the same error, whether the file is read at once or a few bytes at a time
    path = tmp_path / "blocks.vec"
    path.write_bytes(data)
    whole = load_or_error(path, fmt, wanted)
    with mock.patch.object(word_vector_files, "BLOCK_BYTES", block):
        pieces = load_or_error(path, fmt, wanted)
    if isinstance(whole, str):
        assert pieces == whole
    else:
        assert isinstance(pieces, LoadedVectors), pieces
        assert (pieces.words, pieces.dim, pieces.rows_scanned) == (whole.words, whole.dim, whole.rows_scanned)
        np.testing.assert_array_equal(pieces.vectors, whole.vectors)
        assert pieces.coverage == whole.coverage and pieces.duplicates == whole.duplicates
    top_whole = top_words_or_error(path, top, fmt)
    with mock.patch.object(word_vector_files, "BLOCK_BYTES", block):
        assert top_words_or_error(path, top, fmt) == top_whole


def top_words_or_error(path, n: int, fmt: str) -> tuple[str, ...] | str:
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return read_top_words(path, n, format=fmt).words
    except VectorFileError as error:
        return str(error)
