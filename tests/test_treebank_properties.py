"""Property tests: written trees read back the same; any input gives trees or one TreebankError line."""

from __future__ import annotations

import re

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rntn_engine.data.bracket_tokens import escape_word
from rntn_engine.data.errors import TreebankError
from rntn_engine.data.synthetic_trees import random_binary_tree
from rntn_engine.data.tree import Tree
from rntn_engine.data.treebank_reader import BINARISE_MODES, parse_tree, read_trees
from rntn_engine.data.treebank_writer import format_tree, write_trees

FAST = settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])


def _writable(word: str) -> bool:
    try:
        escape_word(word)
    except ValueError:
        return False
    return True


# any characters but surrogates, separators, line breaks and NUL; plus words full of brackets and dashes
WORDS = st.one_of(
    st.text(st.characters(blacklist_categories=("Cs",), blacklist_characters=" \t\r\n\f\v\x00"), min_size=1, max_size=8),
    st.sampled_from(["(", ")", "{", "}", "[", "]", ":-)", "a(b)", "-", "-LRB", "RB-", "#", "_", "庭園", "🌹", "\u00a0"]),
).filter(_writable)


@st.composite
def binary_trees(draw) -> Tree:
    """A random binary tree (shape from a drawn seed) over drawn words, about a third of nodes unlabelled."""
    words = draw(st.lists(WORDS, min_size=1, max_size=12))
    seed = draw(st.integers(0, 2**32 - 1))
    return random_binary_tree(np.random.default_rng(seed), len(words), 5, words, p_unlabelled=0.3)


@FAST
@given(binary_trees())
def test_a_written_tree_reads_back_the_same(tree):
    assert parse_tree(format_tree(tree), binarise="strict").same_as(tree)


@FAST
@given(st.lists(binary_trees(), min_size=1, max_size=5))
def test_a_written_file_reads_back_the_same(tmp_path_factory, trees):
    path = tmp_path_factory.mktemp("round_trip") / "trees.txt"
    write_trees(trees, path)
    again = read_trees(path, binarise="strict")
    assert len(again) == len(trees)
    assert all(a.same_as(b) for a, b in zip(again, trees))


def _assert_one_line_error(error: TreebankError, path: str, text_lines: list[str] | None = None) -> None:
    message = str(error)
    assert re.fullmatch(re.escape(path) + r":\d+(:\d+)?: \S.*", message), message
    assert "\n" not in message and "\r" not in message
    if text_lines is not None and error.column is not None:
        assert 1 <= error.column <= len(text_lines[error.line - 1]) + 1


@st.composite
def damaged_tree_texts(draw) -> str:
    """The text of a random tree with up to three pieces cut out or pasted in (none: a valid tree)."""
    text = format_tree(draw(binary_trees()))
    pieces = ["(", ")", " ", "\t", "\n", "_", "3", "-1", "x", "x(", ")x", "", "(2 a)", "(_ (1 b) (2 c) (3 d))", "(4 (0 e))"]
    for _ in range(draw(st.integers(0, 3))):
        at = draw(st.integers(0, len(text)))
        text = text[:at] + draw(st.sampled_from(pieces)) + text[at + draw(st.integers(0, 2)) :]
    return text


@settings(max_examples=300, deadline=None)
@given(st.one_of(st.text(max_size=60), damaged_tree_texts()), st.sampled_from(BINARISE_MODES), st.sampled_from([None, 3]))
def test_any_text_gives_a_tree_or_one_error_line(text, binarise, num_classes):
    try:
        tree = parse_tree(text, binarise=binarise, num_classes=num_classes)
    except TreebankError as error:
        _assert_one_line_error(error, "<string>", [piece.rstrip("\r") for piece in text.split("\n")])
    else:
        assert isinstance(tree, Tree) and tree.n_nodes == 2 * len(tree.words) - 1


VALID = "(3 (2 The) (4 (3 roses) (2 bloomed)))\n# comment\n(1 (2 -LRB-) (1 café))\n".encode("utf-8")


@st.composite
def mutated_treebanks(draw) -> bytes:
    """A valid treebank with a few bytes replaced, inserted or deleted."""
    data = bytearray(VALID)
    for _ in range(draw(st.integers(1, 4))):
        at = draw(st.integers(0, len(data)))
        op = draw(st.sampled_from(["replace", "insert", "delete"]))
        byte = draw(st.sampled_from([0x00, 0x0A, 0x0D, 0x20, 0x28, 0x29, 0x5F, 0x33, 0x2D, 0xC3, 0xFF, 0x8B]))
        if op == "insert" or at == len(data):
            data.insert(at, byte)
        elif op == "replace":
            data[at] = byte
        else:
            del data[at]
    return bytes(data)


@FAST
@given(st.one_of(st.binary(max_size=200), mutated_treebanks()), st.sampled_from(BINARISE_MODES))
def test_any_bytes_give_trees_or_one_error_line(tmp_path_factory, content, binarise):
    path = tmp_path_factory.mktemp("fuzz") / "trees.txt"
    path.write_bytes(content)
    try:
        trees = read_trees(path, binarise=binarise)
    except TreebankError as error:
        _assert_one_line_error(error, str(path))
    else:
        assert trees and all(isinstance(t, Tree) for t in trees)
