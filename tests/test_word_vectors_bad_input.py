"""Bad vector files: one test per case; each error is one line naming the file and the line (or byte)."""

from __future__ import annotations

import gzip
from pathlib import Path
from unittest import mock

import numpy as np
import pytest

from rntn_engine.data import word_vector_files
from rntn_engine.data.errors import VectorFileError
from rntn_engine.data.vocabulary import UNKNOWN_WORD, Vocabulary
from rntn_engine.data.word_vector_writers import write_word2vec_binary, write_word2vec_text
from rntn_engine.data.word_vectors import load_vectors_for, read_top_words, vectors_to_matrix


def write(path: Path, content: str | bytes) -> Path:
    path.write_bytes(content.encode("utf-8") if isinstance(content, str) else content)
    return path


def expect(path: Path, match: str, *, line=None, column=None, byte=None, wanted=None, **options) -> VectorFileError:
    """Load ``path``; assert a VectorFileError at the given place whose one-line message matches."""
    with pytest.raises(VectorFileError, match=match) as caught:
        load_vectors_for(path, wanted, **options)
    error = caught.value
    assert (error.line, error.column, error.byte_offset) == (line, column, byte)
    text = str(error)
    assert "\n" not in text
    place = f":{line}" + (f":{column}" if column is not None else "") if line is not None else f":byte {byte}"
    assert text.startswith(f"{path}{place}: "), text
    return error


def binary_file(tmp_path: Path, words=("a", "bb"), vectors=((1, 2), (3, 4))) -> Path:
    """word2vec binary: header "2 2\\n" (4 bytes), then rows of word, space, 8 bytes of values, \\n."""
    path = tmp_path / "v.bin"
    write_word2vec_binary(path, list(words), np.array(vectors, dtype=np.float32))
    return path


# --- the file as a whole -----------------------------------------------------------------------------


def test_empty_file(tmp_path):
    path = write(tmp_path / "v.txt", b"")
    expect(path, "empty file", line=1)
    expect(path, "empty file", byte=0, format="word2vec-binary")


def test_missing_file_is_a_vector_file_error(tmp_path):
    with pytest.raises(VectorFileError, match="cannot open the file"):
        load_vectors_for(tmp_path / "nowhere.txt", None)


@pytest.mark.parametrize("header", ["3 x", "3 2 1", "three 2", "-3 2"])
def test_header_not_count_dim(tmp_path, header):
    path = write(tmp_path / "v.txt", f"{header}\na 1 2\n")
    expect(path, r"expected a header 'count dim' \(two integers\)", line=1, format="word2vec-text")
    expect(path, r"expected a header 'count dim'", byte=0, format="word2vec-binary")


def test_header_dimension_zero(tmp_path):
    expect(write(tmp_path / "v.txt", "3 0\n"), "dimension 0", line=1)


def test_header_declares_more_rows_than_the_body_has(tmp_path):
    bad = write(tmp_path / "v.txt", "3 2\na 1 2\nb 1 2\n")
    expect(bad, "ends after 2 rows; the header on line 1 declares 3", line=4)


def test_header_declares_fewer_rows_than_the_body_has(tmp_path):
    expect(write(tmp_path / "v.txt", "1 2\na 1 2\n\nb 1 2\n"), "more rows than the 1 the header", line=4)


def test_header_dimension_disagrees_with_the_rows(tmp_path):
    bad = write(tmp_path / "v.txt", "2 3\na 1 2\nb 1 2\n")
    expect(bad, "expected a word followed by 3 values, found 2", line=2, column=6)


def test_header_implying_more_memory_than_allowed_is_refused_before_reading(tmp_path):
    path = write(tmp_path / "v.txt", "1000000000000 300\na 1\n")
    with mock.patch.object(word_vector_files.RowKeeper, "__init__", side_effect=AssertionError("allocated")):
        expect(path, r"1,000,000,000,000 rows of 300 values, .* more than the limit", line=1)
    bad = write(tmp_path / "small.txt", "4 3\n")
    expect(bad, "48 bytes as float32, more than the limit of 40", line=1, max_bytes=40)


def test_kept_vectors_beyond_max_bytes(tmp_path):
    path = write(tmp_path / "v.txt", "a 1 2 3\nb 1 2 3\nc 1 2 3\n")
    expect(path, "keeping more than 2 vectors of 3 values", line=3, max_bytes=24)
    assert load_vectors_for(path, {"a", "c"}, max_bytes=24).words == ("a", "c")


def test_dimension_differs_from_the_expected_one(tmp_path):
    expect(write(tmp_path / "g.txt", "a 1 2 3\n"), "the vectors have 3 values, expected 4", line=1, expected_dim=4)
    expect(write(tmp_path / "w.txt", "1 3\na 1 2 3\n"), "have 3 values, expected 4", line=1, expected_dim=4)
    expect(binary_file(tmp_path), "have 2 values, expected 3", byte=0, expected_dim=3)


def test_matrix_for_a_model_of_another_dimension(tmp_path):
    loaded = load_vectors_for(write(tmp_path / "v.txt", "a 1 2 3\n"), None)
    vocabulary = Vocabulary((UNKNOWN_WORD, "a"))
    with pytest.raises(VectorFileError, match="have 3 values, expected 5") as caught:
        vectors_to_matrix(loaded, vocabulary, np.random.default_rng(0), 5)
    assert str(caught.value).startswith(f"{tmp_path / 'v.txt'}:1: ")


# --- text rows ---------------------------------------------------------------------------------------


# (content, what the message says, line, column): one malformed text row each
MALFORMED_TEXT_ROWS = {
    "too few values": ("a 1 2 3\nb 1 2\n", "expected a word followed by 3 values, found 2", 2, 6),
    "too many values (column at the first extra)": ("a 1 2 3\nb 1 2 3 4 5\n", "followed by 3 values, found 5", 2, 9),
    "tab between values": ("a 1 2 3\nb 1\t2\n", "found 1 value; values must be separated by spaces, not tabs", 2, 6),
    "two spaces in a row": ("a 1 2\nb 1  2\n", "two spaces in a row", 2, 5),
    # the same two spaces when they add up to the right count: found while parsing the row
    "two spaces, right count": ("a 1 2 3\nb 1  2\n", "expected a number, found two spaces in a row", 2, 5),
    "only a word": ("a\nb 1\n", "a word followed by its values, found 0 values", 1, 2),
    "empty word": ("a 1 2 3\n 1 2 3\n", r"empty word \(the line starts with a space\)", 2, 1),
    "blank line between rows": ("a 1 2 3\n\nb 1 2 3\n", "blank line", 2, 1),
    "blank first line": ("\na 1 2 3\n", "blank line", 1, 1),
}


@pytest.mark.parametrize("case", sorted(MALFORMED_TEXT_ROWS))
def test_malformed_text_row(tmp_path, case):
    content, message, line, column = MALFORMED_TEXT_ROWS[case]
    expect(write(tmp_path / "v.txt", content), message, line=line, column=column)


def test_non_numeric_value_located_by_character_column(tmp_path):
    path = write(tmp_path / "v.txt", "a 1 2 3\nbé 1 x2 3\n")
    expect(path, "expected a number, found 'x2'", line=2, column=6, wanted={"bé"})


def test_non_numeric_value_in_a_row_nobody_wants_is_not_parsed(tmp_path):
    # documented: rows that are not kept are checked for their number of fields only
    path = write(tmp_path / "v.txt", "a 1 2 3\nb 1 x2 3\n")
    assert load_vectors_for(path, {"a"}).words == ("a",)
    expect(path, "expected a number, found 'x2'", line=2, column=5)


@pytest.mark.parametrize(
    "value, message",
    [("nan", "'nan' is not a finite number"), ("-inf", "'-inf' is not a finite number"),
     ("Infinity", "'Infinity' is not a finite number"), ("1e39", "'1e39' is beyond the float32 range")],
)
def test_nan_inf_and_overflow_in_text(tmp_path, value, message):
    expect(write(tmp_path / "v.txt", f"a 1 2 3\nb 1 {value} 3\n"), message, line=2, column=5)


def test_undecodable_bytes_in_a_word(tmp_path):
    path = write(tmp_path / "v.txt", b"a 1 2 3\nb\xff 1 2 3\n")
    expect(path, r"bytes that are not UTF-8 \('\\\\xff'\); choose the 'replace' encoding-error mode", line=2, column=2)
    assert load_vectors_for(path, None, encoding_errors="replace").words == ("a", "b\ufffd")


def test_undecodable_bytes_among_values(tmp_path):
    path = write(tmp_path / "v.txt", b"a 1 2 3\nb 1 2\xff 3\n")
    expect(path, "not UTF-8", line=2, column=6)
    expect(path, r"expected a number, found '2\\\\xff'", line=2, column=5, encoding_errors="replace")


def test_undecodable_bytes_after_many_blocks_are_located(tmp_path):
    path = write(tmp_path / "v.txt", b"a 1\n" * 50 + b"\xc3( 1\n")
    with mock.patch.object(word_vector_files, "BLOCK_BYTES", 16):
        expect(path, "not UTF-8", line=51, column=1)


def test_line_longer_than_the_limit(tmp_path):
    path = write(tmp_path / "v.txt", "a 1\n" + "b" + " 1" * 100 + "\n")
    with mock.patch.object(word_vector_files, "MAX_LINE_BYTES", 64):
        with mock.patch.object(word_vector_files, "BLOCK_BYTES", 16):
            expect(path, "line longer than 64 bytes", line=2)


def test_binary_file_read_as_text(tmp_path):
    path = binary_file(tmp_path)
    expect(path, "found binary data .* looks like a word2vec binary file", line=2, format="word2vec-text")
    assert load_vectors_for(path, None).format == "word2vec-binary"


# --- binary rows ---------------------------------------------------------------------------------------


def test_text_file_read_as_binary(tmp_path):
    path = tmp_path / "v.txt"
    write_word2vec_text(path, ["a", "bb"], np.ones((2, 2)))
    expect(path, "found text .* looks like a word2vec text file", byte=4, format="word2vec-binary")


def test_truncated_binary_row(tmp_path):
    data = binary_file(tmp_path).read_bytes()  # rows at bytes 4 and 15; "bb"'s values start at 18
    path = write(tmp_path / "cut.bin", data[:-3])
    expect(path, "truncated row 2: its 2 float32 values need 8 bytes, the file ends after 6", byte=18)
    expect(write(tmp_path / "word.bin", data[:17]), "the file ends inside row 2", byte=15)


def test_binary_file_with_fewer_rows_than_declared(tmp_path):
    data = binary_file(tmp_path).read_bytes()
    bad = write(tmp_path / "v.bin", data.replace(b"2 2\n", b"3 2\n"))
    expect(bad, "ends after 2 rows; the header declares 3", byte=27)


def test_binary_file_with_more_rows_than_declared(tmp_path):
    data = binary_file(tmp_path).read_bytes()
    bad = write(tmp_path / "v.bin", data.replace(b"2 2\n", b"1 2\n"))
    expect(bad, "data after the 1 rows the header declares", byte=15)


def test_nan_in_binary(tmp_path):
    # written by hand: our writer refuses NaN
    rows = b"a " + np.float32([1, 2]).tobytes() + b"\nbb " + np.float32([3, np.nan]).tobytes() + b"\n"
    path = write(tmp_path / "v.bin", b"2 2\n" + rows)
    expect(path, "value 2 of 'bb' is nan", byte=22, wanted={"bb"})
    assert load_vectors_for(path, {"a"}).words == ("a",)  # values of rows not kept are not looked at


def test_undecodable_word_in_binary(tmp_path):
    path = binary_file(tmp_path, words=("a", "b\xff"))
    data = path.read_bytes().replace("b\xff".encode("utf-8"), b"b\xff")  # a raw 0xff byte, not UTF-8
    path = write(tmp_path / "raw.bin", data)
    expect(path, r"not UTF-8 \('\\\\xff'\) in the word", byte=16)
    assert load_vectors_for(path, None, encoding_errors="replace").words == ("a", "b\ufffd")


def test_empty_word_in_binary(tmp_path):
    data = binary_file(tmp_path).read_bytes()
    expect(write(tmp_path / "v.bin", data.replace(b"bb ", b"\n  ")), "empty word", byte=16)


def test_binary_word_without_a_space(tmp_path):
    data = binary_file(tmp_path).read_bytes()
    path = write(tmp_path / "v.bin", data[:15] + b"x" * 100)
    with mock.patch.object(word_vector_files, "MAX_WORD_BYTES", 32):
        expect(path, "no space within 32 bytes", byte=15, format="word2vec-binary")


def test_corrupt_gzip_data(tmp_path):
    data = gzip.compress(b"a 1 2 3\n" * 1000)
    expect(write(tmp_path / "cut.gz", data[:-30]), "corrupt or truncated gzip data", byte=0)
    expect(write(tmp_path / "junk.gz", b"\x1f\x8bnot gzip at all"), "corrupt or truncated gzip data", byte=0)


def test_read_top_words_reports_errors_in_the_rows_it_reads(tmp_path):
    path = write(tmp_path / "v.txt", "2 2\na 1 2\nb 1 x\n")
    with pytest.raises(VectorFileError, match="expected a number, found 'x'") as caught:
        read_top_words(path, 5)
    assert (caught.value.line, caught.value.column) == (3, 5)
