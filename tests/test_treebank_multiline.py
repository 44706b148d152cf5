"""Trees spread over several lines, as parsers' pretty printers write them.

External reference: nltk (``nltk.Tree.pformat`` with a small margin breaks a tree over
lines, indenting every line after the first; ``nltk.Tree.fromstring`` reads it back).
Every case of bad input states the line and column of the offending character, worked
out by hand from the input.
"""

from __future__ import annotations

import nltk  # independent bracketed-tree printer and reader (external check)
import numpy as np
import pytest
from test_treebank_against_nltk import HANDWRITTEN, RANDOM, _nltk_flat

from rntn_engine.data import treebank_reader
from rntn_engine.data.errors import TreebankError
from rntn_engine.data.treebank_reader import parse_tree, read_trees
from rntn_engine.data.treebank_writer import format_tree

SAMPLE = [t.strip() for t in HANDWRITTEN + RANDOM]


def _pretty(text: str, margin: int) -> str:
    """nltk's pretty-printed form of a bracketed tree (one line if it fits in ``margin``)."""
    return nltk.Tree.fromstring(text).pformat(margin=margin)


def test_the_pretty_printer_really_breaks_the_sample_over_lines():
    broken = [_pretty(t, 12) for t in SAMPLE]
    assert sum("\n" in p for p in broken) >= 0.8 * len(broken)
    assert any("\n" in p and any(line.lstrip()[:1] not in "()" for line in p.split("\n")[1:]) for p in broken), \
        "some word should sit on a line of its own"


@pytest.mark.parametrize("factor", ["right", "left"])
@pytest.mark.parametrize("margin", [6, 12, 30])
def test_a_pretty_printed_tree_reads_as_nltk_reads_it(margin, factor):
    for text in SAMPLE:
        pretty = _pretty(text, margin)
        assert nltk.Tree.fromstring(pretty) == nltk.Tree.fromstring(text)  # nltk's own round trip
        ours = parse_tree(pretty, binarise=factor)
        assert ours.same_as(parse_tree(text, binarise=factor)), pretty
        words, word, left, right, label, _ = _nltk_flat(pretty, factor)
        assert ours.words == words
        np.testing.assert_array_equal(ours.word, word)
        np.testing.assert_array_equal(ours.left, left)
        np.testing.assert_array_equal(ours.right, right)
        np.testing.assert_array_equal(ours.label, label)


def test_a_file_of_pretty_printed_trees_reads_back_with_first_lines_as_sources(treebank_file):
    pieces, first_lines, line = [], [], 1
    for k, text in enumerate(SAMPLE):
        pretty = _pretty(text, 10 + k % 20)
        if k % 7 == 0:
            pieces.append("# a comment between trees")
            line += 1
        if k % 5 == 0:
            pieces.append("")
            line += 1
        first_lines.append(line)
        pieces.append(pretty)
        line += pretty.count("\n") + 1
    path = treebank_file("\r\n".join(pieces) + "\r\n")
    trees = read_trees(path)
    assert len(trees) == len(SAMPLE)
    for tree, text, first in zip(trees, SAMPLE, first_lines):
        assert tree.same_as(parse_tree(text)), text
        assert tree.source == f"{path}:{first}"


@pytest.mark.parametrize(
    "content, expected",
    [
        ("(3\n  a)\n", ["(3 a)"]),  # a leaf's word on a line of its own
        ("(3\n\n  (2 a)\n  (1 b))\n", ["(3 (2 a) (1 b))"]),  # a blank line inside a tree is white space
        ("(2\n  #hashtag)\n# a comment\n(1 x)\n", ["(2 #hashtag)", "(1 x)"]),  # '#' inside a tree is a word
        ("(3 (2 a) (1 b)\n)\n", ["(3 (2 a) (1 b))"]),  # ')' in the first column continues the tree
        ("\t(3 (2 a)\n\t\t(1 b))\n\n(4 c)", ["(3 (2 a) (1 b))", "(4 c)"]),
    ],
)
def test_multi_line_layouts_that_are_accepted(content, expected, treebank_file):
    assert [format_tree(t) for t in read_trees(treebank_file(content))] == expected


# id: (file content, line, column, fragment of the message)
BAD = {
    "missing ')' before a tree in the first column": (
        "(3 (2 a)\n  (1 b)\n(2 c)\n", 2, 8,
        "expected ')' to close the node opened at line 1, column 1, found a new tree starting in the first "
        "column of line 3 (1 node(s) still open); the lines of a tree after its first must be indented",
    ),
    "unindented continuation line": ("(3 (2 a)\n(1 b))\n", 1, 9, "found a new tree starting in the first column of line 2"),
    "missing ')' at the end of the file": (
        "(3\n  (2 a)\n  (1 b)\n\n", 3, 8, "expected ')' to close the node opened at line 1, column 1, found the end of the file",
    ),
    "error on a continuation line": ("(3\n  (2 a b)\n  (1 c))\n", 2, 8, "leaf with two tokens 'a' and 'b'"),
    "text after the last ')' of a multi-line tree": (
        "(3\n  (2 a)\n  (1 b)) x\n", 3, 10, "unexpected text after the end of the tree: 'x'",
    ),
    "a second tree on the last line of a multi-line tree": (
        "(3\n  (2 a)\n  (1 b)) (2 c)\n", 3, 10, "a second tree starts on the same line",
    ),
    "a second tree still open at the end of a line": (
        "(1 a) (2\n  b)\n", 1, 7, "a second tree starts on the same line",
    ),
    "missing label at the end of a line": ("(3 (2 a) (\n  1 b))\n(2\n", 3, 3, "found the end of the file"),
    "label cut by a new tree": ("(3 (2 a) (\n(1 b))\n", 1, 11, "expected a label: an integer 0..C-1, or '_' for "
                                "unlabelled; found a new tree starting in the first column of line 2"),
}


@pytest.mark.parametrize("case", list(BAD), ids=list(BAD))
def test_bad_multi_line_input_is_located_on_the_line_of_the_offending_character(case, treebank_file):
    content, line, column, fragment = BAD[case]
    path = treebank_file(content)
    with pytest.raises(TreebankError) as caught:
        read_trees(path)
    message = str(caught.value)
    assert message.startswith(f"{path}:{line}:{column}: "), message
    assert fragment in message
    assert "\n" not in message


def test_a_tree_longer_than_the_limit_is_refused_where_it_starts(treebank_file, monkeypatch):
    monkeypatch.setattr(treebank_reader, "MAX_TREE_BYTES", 64)
    path = treebank_file("(1 a)\n  (2\n" + "    (2 x)\n" * 10 + "  )\n")
    with pytest.raises(TreebankError) as caught:
        read_trees(path)
    assert str(caught.value).startswith(f"{path}:2:3: tree still open after 64 bytes: expected its closing ')'")
