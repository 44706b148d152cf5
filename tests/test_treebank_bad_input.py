"""Every malformed treebank gets one TreebankError line: FILE:LINE:COL: what was expected.

Columns are 1-based and count characters; each case states the line and column
of the offending character, worked out by hand from the input.
"""

from __future__ import annotations

import gzip

import pytest

from rntn_engine.data import treebank_reader
from rntn_engine.data.errors import TreebankError
from rntn_engine.data.treebank_reader import parse_tree, read_trees

# id: (file content, line, column, fragment of the message, reader options)
CASES = {
    "empty file": (b"", 1, 1, "empty file: expected bracketed trees", {}),
    "only comments and blank lines": ("# header\n\n   \n", 1, 1, "no tree in 3 line(s)", {}),
    "missing closing bracket": ("(3 (2 a) (1 b)\n", 1, 15, "expected ')' to close the node opened at column 1", {}),
    "extra closing bracket": ("(3 (2 a) (1 b)))\n", 1, 16, "extra ')' after the end of the tree", {}),
    "missing label": ("((2 a) (1 b))\n", 1, 2, "missing label", {}),
    "missing label at end of line": ("(2 (1 a) (\n", 1, 11, "expected a label", {}),
    "non-integer label": ("(pos (2 a) (1 b))\n", 1, 2, "an integer 0..C-1, or '_' for unlabelled; found 'pos'", {}),
    "negative label": ("(3 (-1 a) (1 b))\n", 1, 5, "negative label '-1'", {}),
    "label not below num_classes": ("(2 (1 a) (3 b))\n", 1, 11, "label '3' out of range (num_classes=3)", {"num_classes": 3}),
    "label beyond int32": ("(99999999999 a)\n", 1, 2, "label '99999999999' is too large", {}),
    "empty node ()": ("(2 (1 a) ())\n", 1, 11, "empty node '()'", {}),
    "label without word (3 )": ("(2 (1 a) (3 ))\n", 1, 13, "empty node: expected a word or child nodes", {}),
    "leaf with two tokens": ("(2 (1 big) (3 red roses))\n", 1, 19, "leaf with two tokens 'red' and 'roses'", {}),
    "word beside a child node": ("(2 big (3 roses))\n", 1, 8, "expected ')' after the word 'big', found '('", {}),
    "word after a child node": ("(2 (3 roses) big)\n", 1, 14, "after a child node, found the word 'big'", {}),
    "text before the tree": ("so (3 a)\n", 1, 1, "expected '(' to start a tree, found 'so'", {}),
    "closing bracket before the tree": (")(3 a)\n", 1, 1, "expected '(' to start a tree, found ')'", {}),
    "text after the tree": ("(3 a) so\n", 1, 7, "unexpected text after the end of the tree: 'so'", {}),
    "two trees on a line": ("(3 a) (2 b)\n", 1, 7, "a second tree starts on the same line", {}),
    "literal ( inside a word": ("(2 (1 a(b) (2 c))\n", 1, 8, "literal '(' inside the word 'a(': write '(' as -LRB-", {}),
    "literal ) inside a word": ("(2 :-))\n", 1, 7, "a ')' inside a word is written -RRB-", {}),
    "invalid UTF-8": (b"(1 a)\n(2 (2 \xc3\xa9t\xc3\xa9) (2 caf\xe9))\n", 2, 18, "invalid UTF-8 byte 0xe9 (byte 25 of the file)", {}),
    "NUL byte": (b"(2 a\x00b)\n", 1, 5, "binary or compressed file: NUL byte at byte 4", {}),
    "gzip file": (gzip.compress(b"(2 a)\n"), 1, 1, "binary or compressed file (gzip data)", {}),
    "HDF5 file": (b"\x89HDF\r\n\x1a\n" + bytes(64), 1, 1, "binary or compressed file (HDF5", {}),
    "UTF-16 file": ("(2 a)\n".encode("utf-16"), 1, 1, "UTF-16 text", {}),
    "strict: three children": ("(3 (1 a) (2 b) (3 c))\n", 1, 16, "more than two children in strict mode", {"binarise": "strict"}),
    "strict: unary chain": ("(2 (1 a) (3 (2 b)))\n", 1, 10, "single child in strict mode", {"binarise": "strict"}),
    "error on a later line": ("(1 a)\n\n# note\n(2 b\n", 4, 5, "expected ')'", {}),
    "columns count characters": ("(2 (1 café) (1 thé) x)\n", 1, 21, "found the word 'x'", {}),
    "columns after a BOM and tabs": (b"\xef\xbb\xbf(2\ta b)\n", 1, 6, "leaf with two tokens 'a' and 'b'", {}),
}


@pytest.mark.parametrize("case", list(CASES), ids=list(CASES))
def test_bad_treebank_gives_one_line_with_file_line_and_column(case, treebank_file):
    content, line, column, fragment, options = CASES[case]
    path = treebank_file(content)
    with pytest.raises(TreebankError) as caught:
        read_trees(path, **options)
    message = str(caught.value)
    assert message.startswith(f"{path}:{line}:{column}: "), message
    assert (caught.value.line, caught.value.column) == (line, column)
    assert fragment in message
    assert "\n" not in message


def test_a_line_longer_than_the_limit_is_refused(treebank_file, monkeypatch):
    monkeypatch.setattr(treebank_reader, "MAX_LINE_BYTES", 64)
    path = treebank_file("(1 a)\n(2 " + "x" * 100 + ")\n")
    with pytest.raises(TreebankError, match=r":2:1: line longer than 64 bytes"):
        read_trees(path)


@pytest.mark.parametrize("make", ["missing", "directory"])
def test_an_unreadable_path_is_a_treebank_error(make, tmp_path):
    path = tmp_path / "nothing.txt"
    if make == "directory":
        path.mkdir()
    with pytest.raises(TreebankError) as caught:
        read_trees(path)
    assert str(caught.value).startswith(f"{path}: cannot read the file: ")


@pytest.mark.parametrize(
    "text, line, column, fragment",
    [
        ("(2 a)\n(3 b)", 10, 1, "expected one tree, found more text after it: '(3 b)'"),
        ("(2\n  a)\n\n  x", 12, 3, "expected one tree, found more text after it: 'x'"),
        ("", 9, 1, "found an empty line"),
        ("  # a comment", 9, 3, "found a comment"),
        ("\n(2 a)", 9, 1, "found an empty line"),
    ],
)
def test_parse_tree_refuses_what_is_not_one_tree(text, line, column, fragment):
    with pytest.raises(TreebankError) as caught:
        parse_tree(text, path="input", line=9)
    assert str(caught.value).startswith(f"input:{line}:{column}: ")
    assert fragment in str(caught.value)


def test_an_error_message_shows_unprintable_characters_escaped():
    with pytest.raises(TreebankError) as caught:
        parse_tree("(2 a\u2028b c)")
    assert "'a\\u2028b'" in str(caught.value)
    assert str(caught.value).isprintable()


def test_ten_thousand_unclosed_nodes_are_reported_not_recursed():
    text = "(1 " * 10_000 + "a"
    with pytest.raises(TreebankError) as caught:
        parse_tree(text)
    assert str(caught.value).startswith(f"<string>:1:{len(text) + 1}: expected ')' to close the node opened at column ")
    assert "(10000 node(s) still open)" in str(caught.value)
