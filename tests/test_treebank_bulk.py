"""The bulk reader (block scanner + exact fallback) gives exactly the exact reader's trees and errors.

Compared on the demo treebanks, on the property-test trees (random words, binary,
n-ary and unary shapes, pretty-printed over several lines), and on the fuzz corpus
(random bytes and damaged treebanks): the same trees with the same sources, and for
bad input the same trees before the same one-line error. Small block sizes make
records fall across block boundaries.
"""

from __future__ import annotations

from pathlib import Path

import nltk  # multi-line layouts from nltk's pretty printer (external tool)
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from test_treebank_against_nltk import HANDWRITTEN, RANDOM
from test_treebank_properties import VALID, binary_trees, mutated_treebanks

from rntn_engine.data import treebank_bulk
from rntn_engine.data.errors import TreebankError
from rntn_engine.data.treebank_bulk import iter_tree_blocks
from rntn_engine.data.treebank_reader import BINARISE_MODES, iter_trees, iter_trees_exact
from rntn_engine.data.treebank_writer import format_tree

DEMO = sorted((Path(__file__).resolve().parents[1] / "data_demo").glob("*.trees"))
FAST = settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])


def _outcome(reader, path, **options):
    """(trees read, error line or None): trees as (words, arrays, source) for exact comparison."""
    trees, error = [], None
    try:
        for tree in reader(path, **options):
            trees.append((tree.words, tree.word.tolist(), tree.left.tolist(), tree.right.tolist(),
                          tree.label.tolist(), tree.source))
    except TreebankError as exc:
        error = str(exc)
    return trees, error


def _assert_same_as_exact(path, **options):
    bulk = _outcome(iter_trees, path, **options)
    exact = _outcome(iter_trees_exact, path, **options)
    assert bulk[1] == exact[1]
    assert len(bulk[0]) == len(exact[0])
    for a, b in zip(bulk[0], exact[0]):
        assert a == b
    return bulk


@pytest.mark.parametrize("block_bytes", [4096, treebank_bulk.BLOCK_BYTES])
@pytest.mark.parametrize("binarise", BINARISE_MODES)
@pytest.mark.parametrize("path", DEMO, ids=[p.name for p in DEMO])
def test_demo_treebanks_read_the_same(path, binarise, block_bytes, monkeypatch):
    monkeypatch.setattr(treebank_bulk, "BLOCK_BYTES", block_bytes)
    trees, error = _assert_same_as_exact(path, binarise=binarise, num_classes=5)
    assert error is None and len(trees) >= 400


def test_the_demo_is_read_by_the_scanner_not_by_the_fallback(monkeypatch):
    def refuse(*args, **kwargs):
        raise AssertionError("the exact reader was used")

    monkeypatch.setattr(treebank_bulk, "ExactRecordReader", refuse)
    blocks = list(iter_tree_blocks(DEMO[0], num_classes=5))
    assert sum(b.n_trees for b in blocks) >= 400


def _pretty_or_as_is(text: str, margin: int) -> str:
    """nltk's multi-line form, or the text itself where nltk's reader takes a word for an escape (a backslash)."""
    try:
        return nltk.Tree.fromstring(text).pformat(margin=margin)
    except ValueError:
        return text


def _layout(texts: list[str], draw) -> bytes:
    """The trees as a file, with drawn comments, blank lines, indentation, line ends and pretty printing."""
    end = draw(st.sampled_from(["\n", "\r\n"]))
    pieces = []
    for text in texts:
        if draw(st.booleans()):
            pieces.append(draw(st.sampled_from(["", "# note", "  # indented note", "\t", "#"])))
        margin = draw(st.sampled_from([0, 0, 8, 20]))
        tree_text = _pretty_or_as_is(text, margin) if margin else text
        pieces.append(draw(st.sampled_from(["", " ", "\t"])) + tree_text + draw(st.sampled_from(["", " ", "\t"])))
    body = end.join(p.replace("\n", end) for p in pieces)
    if draw(st.booleans()):
        body += end  # a final line end, or none
    head = "\ufeff" if draw(st.booleans()) else ""
    return (head + body).encode("utf-8")


@st.composite
def treebank_files(draw) -> bytes:
    binary = [format_tree(t) for t in draw(st.lists(binary_trees(), min_size=1, max_size=6))]
    nary = draw(st.lists(st.sampled_from(HANDWRITTEN + RANDOM), max_size=6))
    texts = draw(st.permutations(binary + [t.strip() for t in nary]))
    return _layout(texts, draw)


@FAST
@given(treebank_files(), st.sampled_from(BINARISE_MODES), st.sampled_from([None, 5]), st.sampled_from([16, 64, 1 << 20]))
def test_property_trees_in_any_layout_read_the_same(tmp_path_factory, content, binarise, num_classes, block_bytes):
    path = tmp_path_factory.mktemp("bulk") / "trees.txt"
    path.write_bytes(content)
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(treebank_bulk, "BLOCK_BYTES", block_bytes)
        _assert_same_as_exact(path, binarise=binarise, num_classes=num_classes)


@FAST
@given(st.one_of(st.binary(max_size=200), mutated_treebanks(), st.just(VALID)), st.sampled_from(BINARISE_MODES),
       st.sampled_from([16, 1 << 20]))
def test_fuzz_corpus_gives_the_same_trees_and_the_same_error(tmp_path_factory, content, binarise, block_bytes):
    path = tmp_path_factory.mktemp("bulk_fuzz") / "trees.txt"
    path.write_bytes(content)
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(treebank_bulk, "BLOCK_BYTES", block_bytes)
        _assert_same_as_exact(path, binarise=binarise)


@pytest.mark.parametrize(
    "content",
    [
        "(1 a)\n(2 b)\n(3 c\n(4 d)\n",  # an unclosed tree between good ones
        "(1 a)\n" * 50 + "(0000000003 b)\n" + "(2 c)\n" * 50,  # a label the scanner leaves to the exact reader
        "(1 a)\n" * 50 + "(2 caf\xe9)\n",  # text the scanner cannot decode (as bytes below)
        "(1 a)\n# caf\u00e9 \u5ead\n(2 b)\n",  # a non-ASCII comment
        "(1 a)\n" + "(2\n  b)\n" * 30 + "(2 (1 a)\n(1 b))\n",  # multi-line trees, then an unindented line
        "(12 (11 big) (10 labels))\n(99999999999 x)\n",
    ],
)
def test_records_the_scanner_leaves_alone_read_the_same(content, treebank_file, monkeypatch):
    monkeypatch.setattr(treebank_bulk, "BLOCK_BYTES", 64)
    raw = content.encode("latin-1") if "\xe9)" in content else content.encode("utf-8")
    _assert_same_as_exact(treebank_file(raw))


def test_a_long_line_and_a_long_tree_are_refused_as_by_the_exact_reader(treebank_file, monkeypatch):
    from rntn_engine.data import treebank_reader

    monkeypatch.setattr(treebank_bulk, "BLOCK_BYTES", 32)
    monkeypatch.setattr(treebank_reader, "MAX_LINE_BYTES", 40)
    monkeypatch.setattr(treebank_reader, "MAX_TREE_BYTES", 60)
    cases = {  # content: refused?
        "(1 a)\n(2 " + "x" * 50 + ")\n": True,
        "(1 a)\n(2\n" + "  (1 b)\n" * 12 + ")\n": True,
        "\ufeff(1 " + "y" * 35 + ")\n": True,  # the byte-order mark counts on the first line
        "\ufeff(1 " + "y" * 33 + ")\n": False,
        "(1 " + "z" * 37 + ")": True,
        "(1 " + "z" * 36 + ")": False,  # just at the limit
    }
    for content, refused in cases.items():
        trees, error = _assert_same_as_exact(treebank_file(content))
        assert (error is not None) == refused, content
