"""Reading and writing bracketed treebanks: structure, binarisation, unary chains, escapes, streaming."""

from __future__ import annotations

import io
import tracemalloc

import numpy as np
import pytest

from rntn_engine.data import treebank_bulk, treebank_reader
from rntn_engine.data.bracket_tokens import escape_word, unescape_token
from rntn_engine.data.errors import TreebankError
from rntn_engine.data.tree import UNLABELLED
from rntn_engine.data.treebank_reader import iter_trees, iter_trees_exact, parse_tree, read_trees
from rntn_engine.data.treebank_writer import format_tree, write_trees

CANONICAL = [
    "(4 lovely)",
    "(_ lovely)",
    "(3 (2 The) (4 (3 roses) (2 bloomed)))",
    "(1 (_ (2 too) (1 crowded)) (_ (2 on) (2 Sundays)))",
    "(0 (0 (0 (0 (1 rain) (1 all)) (2 day)) (1 -LRB-again-RRB-)) (2 .))",
    "(2 (2 -LCB-map-RCB-) (2 -LSB-1-RSB-))",
    "(3 (2 café) (4 (3 naïve) (2 庭園)))",
    "(2 (2 :-RRB-) (2 #hashtag))",
    "(12 (11 big) (10 labels))",
]


@pytest.mark.parametrize("text", CANONICAL)
def test_canonical_text_round_trips(text):
    assert format_tree(parse_tree(text)) == text


def test_arrays_of_a_small_tree_are_in_post_order():
    tree = parse_tree("(3 (2 The) (4 (3 roses) (2 bloomed)))", path="garden.txt", line=7)
    assert tree.words == ("The", "roses", "bloomed")
    np.testing.assert_array_equal(tree.word, [0, 1, 2, -1, -1])
    np.testing.assert_array_equal(tree.left, [-1, -1, -1, 1, 0])
    np.testing.assert_array_equal(tree.right, [-1, -1, -1, 2, 3])
    np.testing.assert_array_equal(tree.label, [2, 3, 2, 4, 3])
    np.testing.assert_array_equal(tree.spans(), [[0, 1], [1, 2], [2, 3], [1, 3], [0, 3]])
    assert tree.source == "garden.txt:7"
    assert tree.word.dtype == np.int32 and tree.label.dtype == np.int32


def test_placeholder_means_unlabelled():
    tree = parse_tree("(_ (2 a) (_ b))")
    np.testing.assert_array_equal(tree.label, [2, UNLABELLED, UNLABELLED])


@pytest.mark.parametrize(
    "nary, right, left",
    [
        ("(4 (1 a) (2 b) (3 c))", "(4 (1 a) (_ (2 b) (3 c)))", "(4 (_ (1 a) (2 b)) (3 c))"),
        (
            "(4 (1 a) (2 b) (3 c) (0 d))",
            "(4 (1 a) (_ (2 b) (_ (3 c) (0 d))))",
            "(4 (_ (_ (1 a) (2 b)) (3 c)) (0 d))",
        ),
        (  # n-ary inside n-ary
            "(_ (1 a) (2 (0 b) (0 c) (0 d)) (3 e))",
            "(_ (1 a) (_ (2 (0 b) (_ (0 c) (0 d))) (3 e)))",
            "(_ (_ (1 a) (2 (_ (0 b) (0 c)) (0 d))) (3 e))",
        ),
    ],
)
def test_nary_nodes_are_factored_with_unlabelled_intermediate_nodes(nary, right, left):
    assert parse_tree(nary).same_as(parse_tree(right, binarise="strict"))
    assert parse_tree(nary, binarise="left").same_as(parse_tree(left, binarise="strict"))
    assert format_tree(parse_tree(nary)) == right
    assert format_tree(parse_tree(nary, binarise="left")) == left


@pytest.mark.parametrize(
    "chain, collapsed",
    [
        ("(3 (2 word))", "(3 word)"),  # over a leaf: the outer label wins
        ("(_ (2 word))", "(2 word)"),  # an unlabelled outer node keeps the inner label
        ("(_ (_ (1 (2 word))))", "(1 word)"),  # the outermost LABELLED node wins
        ("(_ (_ word))", "(_ word)"),  # all unlabelled: unlabelled
        ("(2 (_ (1 a) (3 b)))", "(2 (1 a) (3 b))"),
        ("(4 (1 (_ a)) (_ (3 (2 b) (0 c))))", "(4 (1 a) (3 (2 b) (0 c)))"),
        ("(1 (1 (1 (1 (1 a) (2 b)))))", "(1 (1 a) (2 b))"),
    ],
)
def test_unary_chains_collapse_keeping_the_outermost_label(chain, collapsed):
    for mode in ("right", "left"):
        assert format_tree(parse_tree(chain, binarise=mode)) == collapsed


def test_a_unary_node_over_an_nary_node_gives_its_label_to_the_factored_node():
    chain = "(3 (_ (1 a) (2 b) (0 c)))"
    assert format_tree(parse_tree(chain)) == "(3 (1 a) (_ (2 b) (0 c)))"
    assert format_tree(parse_tree(chain, binarise="left")) == "(3 (_ (1 a) (2 b)) (0 c))"


def test_strict_mode_accepts_binary_trees():
    text = "(3 (2 The) (4 (3 roses) (2 bloomed)))"
    assert parse_tree(text, binarise="strict").same_as(parse_tree(text))


def test_missing_spaces_between_brackets_are_accepted():
    assert parse_tree("(3(2 a)(1 b))").same_as(parse_tree("(3 (2 a) (1 b))"))
    assert parse_tree("  (3\t(2 a)\t(1 b) )  ").same_as(parse_tree("(3 (2 a) (1 b))"))


@pytest.mark.parametrize(
    "token, word",
    [
        ("-LRB-", "("),
        ("-RRB-", ")"),
        ("-LCB-", "{"),
        ("-RCB-", "}"),
        ("-LSB-", "["),
        ("-RSB-", "]"),
        (":-RRB-", ":)"),
        ("-LRB-a-RRB-b", "(a)b"),
        ("-LRB-RRB-", "(RRB-"),  # left to right, no overlapping matches
        ("co-op", "co-op"),
        ("{x}", "{x}"),  # curly and square brackets may also appear literally
    ],
)
def test_escaped_brackets_are_read_as_brackets(token, word):
    tree = parse_tree(f"(2 (1 {token}) (1 x))")
    assert tree.words == (word, "x")
    assert unescape_token(token) == word


@pytest.mark.parametrize("word", ["(", ")", "{", "}", "[", "]", ":-)", "a(b)c", "(RRB-", "-", "--", "-L", "x-"])
def test_bracket_words_are_escaped_when_written_and_read_back(word):
    token = escape_word(word)
    assert not set(token) & set("(){}[]")
    tree = parse_tree(f"(2 {token})")
    assert tree.words == (word,)
    assert format_tree(tree) == f"(2 {token})"


@pytest.mark.parametrize("word", ["", "a b", "tab\there", "nul\x00", "line\nbreak", "-LRB(", "x-RSB-"])
def test_words_no_reader_could_take_back_are_refused_by_the_writer(word):
    with pytest.raises(ValueError, match="cannot write"):
        escape_word(word)


def test_file_quirks_are_accepted_quietly(treebank_file):
    content = (
        "\ufeff# visitor feedback, first batch\r\n"
        "(3(2 The)(4 (3 roses) (2 bloomed)))\r\n"
        "\r\n"
        "   # an indented comment\n"
        "\t(1\t(2 too)\t(1 crowded))\t\n"
        "\n"
        "(_ (4 lovely))"  # no final newline
    )
    path = treebank_file(content)
    trees = read_trees(path)
    expected = ["(3 (2 The) (4 (3 roses) (2 bloomed)))", "(1 (2 too) (1 crowded))", "(4 lovely)"]
    assert [format_tree(t) for t in trees] == expected
    assert [t.source for t in trees] == [f"{path}:2", f"{path}:5", f"{path}:7"]


def test_a_hash_inside_a_tree_line_is_an_ordinary_word(treebank_file):
    (tree,) = read_trees(treebank_file("(2 (2 #1) (2 #))\n"))
    assert tree.words == ("#1", "#")


def test_num_classes_accepts_labels_in_range():
    tree = parse_tree("(4 (0 a) (_ b))", num_classes=5)
    np.testing.assert_array_equal(tree.label, [0, UNLABELLED, 4])


def test_iter_trees_streams_and_stops_at_the_first_bad_line(treebank_file):
    path = treebank_file("(1 a)\n(2 b)\n(3 c\n(4 d)\n")
    trees = iter_trees(path)
    assert next(trees).words == ("a",)
    assert next(trees).words == ("b",)
    with pytest.raises(TreebankError, match=r":3:5: "):
        next(trees)


def _peak_bytes_while_iterating(reader, path) -> tuple[int, int]:
    tracemalloc.start()
    try:
        count = sum(1 for _ in reader(path))
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    return count, peak


LINE = "(3 (2 (1 moss) (2 ferns)) (4 (3 (2 glass) (3 house)) (2 (2 quiet) (2 benches))))\n"


def test_the_exact_reader_does_not_hold_the_file_in_memory(treebank_file):
    n_lines = 4000
    path = treebank_file(LINE * n_lines)  # about 330 kB
    count, peak = _peak_bytes_while_iterating(iter_trees_exact, path)
    assert count == n_lines
    assert peak < len(LINE) * n_lines / 5, peak  # a read buffer and one tree, not the whole file


def test_the_bulk_reader_holds_one_block_not_the_file(treebank_file, monkeypatch):
    monkeypatch.setattr(treebank_bulk, "BLOCK_BYTES", 8192)
    small = treebank_file(LINE * 8_000, "small.trees")  # about 650 kB
    large = treebank_file(LINE * 32_000, "large.trees")  # about 2.6 MB
    _peak_bytes_while_iterating(iter_trees, small)  # warm: kernels loaded or compiled
    count_small, peak_small = _peak_bytes_while_iterating(iter_trees, small)
    count_large, peak_large = _peak_bytes_while_iterating(iter_trees, large)
    assert (count_small, count_large) == (8_000, 32_000)
    assert peak_large < 1.2 * peak_small, (peak_small, peak_large)  # four times the file, the same memory
    assert peak_large < 2_000_000, peak_large  # word tables, and the scanners' arrays of the blocks in flight


def test_progress_reports_every_line_read(treebank_file, monkeypatch):
    monkeypatch.setattr(treebank_reader, "PROGRESS_EVERY", 3)
    content = "# header\n(1 a)\n\n(2 b)\n(3 c)\n(4 d)\n(0 e)\n"
    calls = []
    trees = list(iter_trees_exact(treebank_file(content), progress=calls.append))
    assert len(trees) == 5
    assert calls == [3, 3, 1]  # every PROGRESS_EVERY lines, and the rest at the end
    monkeypatch.setattr(treebank_bulk, "BLOCK_BYTES", 16)
    calls = []
    assert len(read_trees(treebank_file(content * 50, "long.trees"), progress=calls.append)) == 250
    assert sum(calls) == 350 and len(calls) > 10  # after every block


def _deep_trees(depth: int) -> dict[str, str]:
    return {
        "left-branching": "(1 " * (depth - 1) + "(1 a)" + " (2 b))" * (depth - 1),
        "right-branching": "(1 (2 b) " * (depth - 1) + "(1 a)" + ")" * (depth - 1),
    }


@pytest.mark.parametrize("shape", ["left-branching", "right-branching"])
def test_ten_thousand_deep_nesting_parses_and_writes(shape, treebank_file):
    depth = 10_000
    text = _deep_trees(depth)[shape]
    tree = parse_tree(text, binarise="strict")
    assert tree.n_nodes == 2 * depth - 1
    assert int(tree.heights().max()) == depth - 1
    assert format_tree(tree) == text
    (from_file,) = read_trees(treebank_file(text + "\n"))
    assert from_file.same_as(tree)
    out = io.StringIO()
    write_trees([tree], out)
    assert out.getvalue() == text + "\n"


def test_ten_thousand_deep_unary_chain_collapses_to_one_leaf():
    depth = 10_000
    tree = parse_tree("(_ " * (depth - 1) + "(3 a" + ")" * depth)
    assert format_tree(tree) == "(3 a)"


def test_format_tree_writes_given_labels_instead_of_the_tree_labels():
    tree = parse_tree("(3 (2 The) (4 (3 roses) (2 bloomed)))")
    predicted = np.array([1, 1, -1, 0, 4], dtype=np.int64)
    assert format_tree(tree, predicted) == "(4 (1 The) (0 (1 roses) (_ bloomed)))"
    assert format_tree(tree) == "(3 (2 The) (4 (3 roses) (2 bloomed)))"


@pytest.mark.parametrize(
    "labels, message",
    [
        (np.zeros(4, dtype=np.int32), "shape"),
        (np.zeros(5, dtype=np.float64), "integers"),
        (np.array([0, 0, -2, 0, 0]), ">= -1"),
    ],
)
def test_format_tree_refuses_bad_label_arrays(labels, message):
    tree = parse_tree("(3 (2 The) (4 (3 roses) (2 bloomed)))")
    with pytest.raises(ValueError, match=message):
        format_tree(tree, labels)


def test_write_trees_to_a_path_reads_back_the_same_trees(tmp_path):
    trees = [parse_tree(t) for t in CANONICAL]
    path = tmp_path / "out.txt"
    assert write_trees(trees, path) == len(trees)
    assert path.read_bytes() == ("\n".join(CANONICAL) + "\n").encode("utf-8")
    again = read_trees(path)
    assert all(a.same_as(b) for a, b in zip(again, trees, strict=True))


@pytest.mark.parametrize(
    "kwargs",
    [{"binarise": "up"}, {"num_classes": 0}, {"num_classes": 2.5}],
)
def test_bad_options_are_programming_errors(kwargs, treebank_file):
    with pytest.raises(ValueError):
        parse_tree("(1 a)", **kwargs)
    with pytest.raises(ValueError):
        iter_trees(treebank_file("(1 a)\n"), **kwargs)  # at the call, before any reading
