"""Reading a treebank file straight into the compact EncodedTreebank gives what encoding its trees gives.

Also: the narrow column types widen when a value needs it, heights computed per batch
equal the tree's own, phrase lengths equal the spans, and the vocabulary built from a
file's word counts is the one built from its trees.
"""

from __future__ import annotations

from collections import Counter
from pathlib import Path

import numpy as np
import pytest
from random_trees import corner_case_treebank

from rntn_engine.data import treebank_bulk
from rntn_engine.data.batches import EncodedTreebank, encode_treebank, make_batch, phrase_lengths
from rntn_engine.data.treebank_encoding import (
    apply_vocabulary,
    iter_encoded_blocks,
    read_encoded_treebank,
    read_treebank_words,
)
from rntn_engine.data.treebank_reader import read_trees
from rntn_engine.data.treebank_writer import write_trees
from rntn_engine.data.vocabulary import UNKNOWN_WORD, build_vocabulary, vocabulary_from_counts

DEMO = Path(__file__).resolve().parents[1] / "data_demo"
COLUMNS = ("word", "left", "right", "label", "start")


def _assert_same_bank(a: EncodedTreebank, b: EncodedTreebank) -> None:
    for name in COLUMNS:
        x, y = getattr(a, name), getattr(b, name)
        assert x.dtype == y.dtype, (name, x.dtype, y.dtype)
        np.testing.assert_array_equal(x, y, err_msg=name)


@pytest.mark.parametrize("lowercase", [False, True])
@pytest.mark.parametrize("min_count", [1, 2])
@pytest.mark.parametrize("name", ["garden_train.trees", "garden_test.trees"])
def test_a_file_read_for_training_equals_its_trees_encoded(name, min_count, lowercase):
    path = DEMO / name
    trees = read_trees(path, num_classes=5)
    vocabulary = build_vocabulary(trees, min_count, lowercase)
    bank, words = read_treebank_words(path, num_classes=5)
    assert vocabulary_from_counts(words.as_dict(), min_count, lowercase) == vocabulary
    _assert_same_bank(apply_vocabulary(bank, words, vocabulary), encode_treebank(trees, vocabulary))


def test_the_vocabulary_keeps_words_by_count_then_by_code_point():
    counts = {"fern": 3, "Fern": 2, "moss": 3, "ash": 1, UNKNOWN_WORD: 9, "bench": 2}
    # by hand: counts >= 2, highest count first, ties by code point; the unknown token is never a word
    assert vocabulary_from_counts(counts, 2).words == (UNKNOWN_WORD, "fern", "moss", "Fern", "bench")
    folded = Counter({"fern": 5, "moss": 3, "ash": 1, "bench": 2})
    assert vocabulary_from_counts(counts, 2, lowercase=True).words == (
        UNKNOWN_WORD, *sorted((w for w, c in folded.items() if c >= 2), key=lambda w: (-folded[w], w)))


@pytest.mark.parametrize("block_bytes", [512, treebank_bulk.BLOCK_BYTES])
def test_a_file_encoded_with_a_known_vocabulary_equals_its_trees_encoded(block_bytes, monkeypatch):
    monkeypatch.setattr(treebank_bulk, "BLOCK_BYTES", block_bytes)
    path = DEMO / "garden_dev.trees"
    trees = read_trees(path, num_classes=5)
    vocabulary = build_vocabulary(read_trees(DEMO / "garden_train.trees"), 2)
    expected = encode_treebank(trees, vocabulary)
    _assert_same_bank(read_encoded_treebank(path, vocabulary, num_classes=5), expected)
    blocks = list(iter_encoded_blocks(path, vocabulary, num_classes=5))
    assert len(blocks) > (1 if block_bytes == 512 else 0)
    assert sum(b.n_trees for b in blocks) == expected.n_trees
    for name in ("word", "left", "right", "label"):
        np.testing.assert_array_equal(np.concatenate([getattr(b, name) for b in blocks]), getattr(expected, name))


def test_the_columns_are_narrow_for_a_usual_treebank():
    bank = read_encoded_treebank(DEMO / "garden_train.trees", build_vocabulary([], 1), num_classes=5)
    assert (bank.word.dtype, bank.left.dtype, bank.right.dtype, bank.label.dtype, bank.start.dtype) == (
        np.int32, np.int16, np.int16, np.int8, np.int64)
    assert bank.nbytes / bank.n_nodes < 10  # 4 + 2 + 2 + 1 bytes a node, and 8 a tree


def _chain_text(n_words: int, label: str = "1") -> str:
    return f"({label} " * (n_words - 1) + "(2 a)" + " (3 b))" * (n_words - 1)


def test_columns_widen_when_a_tree_or_a_label_needs_it(tmp_path, monkeypatch):
    monkeypatch.setattr(treebank_bulk, "BLOCK_BYTES", 4096)
    path = tmp_path / "wide.trees"
    big = _chain_text(16_400)  # 32,799 nodes: local child indices beyond int16
    path.write_text("(3 (1 x) (2 y))\n" * 200 + big + "\n(300 (1 x) (2 y))\n", encoding="utf-8")
    trees = read_trees(path)
    vocabulary = build_vocabulary(trees, 1)
    expected = encode_treebank(trees, vocabulary)
    assert (expected.left.dtype, expected.right.dtype, expected.label.dtype) == (np.int32, np.int32, np.int16)
    _assert_same_bank(read_encoded_treebank(path, vocabulary), expected)
    bank, words = read_treebank_words(path)
    _assert_same_bank(apply_vocabulary(bank, words, vocabulary), expected)


def test_heights_computed_per_batch_equal_the_trees_own(tmp_path):
    trees = corner_case_treebank(seed=3)
    bank = encode_treebank(trees, build_vocabulary(trees, 1))
    order = np.random.default_rng(0).permutation(len(trees))
    batch = make_batch(bank, order)
    expected = np.concatenate([trees[t].heights() for t in order])
    np.testing.assert_array_equal(batch.height, expected)
    assert batch.height.dtype == np.int32 and batch.label.dtype == np.int32 and batch.left.dtype == np.int32


def test_phrase_lengths_equal_the_spans(tmp_path):
    trees = corner_case_treebank(seed=4)
    bank = encode_treebank(trees, build_vocabulary(trees, 1))
    expected = np.concatenate([np.diff(t.spans(), axis=1)[:, 0] for t in trees])
    np.testing.assert_array_equal(phrase_lengths(bank), expected)
    path = tmp_path / "corner.trees"
    write_trees(trees, path)
    np.testing.assert_array_equal(phrase_lengths(read_encoded_treebank(path, build_vocabulary(trees, 1))), expected)
