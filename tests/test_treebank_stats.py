"""Treebank statistics on a hand-made treebank whose numbers are counted by hand below."""

from __future__ import annotations

import json
import statistics

import numpy as np
import pytest

from rntn_engine.data.synthetic_trees import random_binary_tree
from rntn_engine.data.treebank_reader import parse_tree
from rntn_engine.data.treebank_stats import (
    PHRASE_LENGTH_BUCKETS,
    length_bucket,
    treebank_stats,
)

HAND_MADE = [
    "(3 (2 The) (4 (3 roses) (2 bloomed)))",  # 3 words, 5 nodes
    "(1 (2 too) (1 crowded))",  # 2 words, 3 nodes
    "(_ (4 lovely))",  # unary chain: one leaf labelled 4
    "(0 (_ (1 the) (1 roses)) (0 (_ wilted) (0 early)))",  # 4 words, 7 nodes
]
# Counted by hand, node by node:
#   tree 1: leaves The 2, roses 3, bloomed 2; (roses bloomed) 4 spans 2; root 3 spans 3
#   tree 2: leaves too 2, crowded 1; root 1 spans 2
#   tree 3: leaf lovely 4 (root, spans 1)
#   tree 4: leaves the 1, roses 1, wilted _, early 0; (the roses) _ spans 2; (wilted early) 0 spans 2;
#           root 0 spans 4
ALL_NODES = {"0": 3, "1": 4, "2": 3, "3": 2, "4": 2, "unlabelled": 2}
ROOTS = {"0": 1, "1": 1, "2": 0, "3": 1, "4": 1, "unlabelled": 0}
BY_LENGTH = {
    "1": {"0": 1, "1": 3, "2": 3, "3": 1, "4": 1, "unlabelled": 1},
    "2": {"0": 1, "1": 1, "2": 0, "3": 0, "4": 1, "unlabelled": 1},
    "3-5": {"0": 1, "1": 0, "2": 0, "3": 1, "4": 0, "unlabelled": 0},
}


@pytest.fixture
def hand_made():
    return treebank_stats([parse_tree(t) for t in HAND_MADE])


def test_sizes(hand_made):
    assert hand_made.n_trees == 4
    assert hand_made.n_nodes == 16
    assert hand_made.n_tokens == 10
    assert hand_made.n_word_types == 9  # 'roses' twice; 'The' and 'the' differ


def test_sentence_lengths(hand_made):
    length = hand_made.sentence_length
    assert (length.min, length.median, length.mean, length.max) == (1, 2.5, 2.5, 4)  # lengths 3, 2, 1, 4
    assert length.histogram == {"1-5": 4, "6-10": 0, "11-20": 0, "21-30": 0, "31-40": 0, "41-60": 0, "61+": 0}


def test_label_distributions_at_roots_and_all_nodes(hand_made):
    assert hand_made.root_labels.counts == ROOTS
    assert hand_made.root_labels.total == 4
    assert hand_made.root_labels.fractions["0"] == pytest.approx(0.25)
    assert hand_made.node_labels.counts == ALL_NODES
    assert hand_made.node_labels.total == 16
    assert hand_made.node_labels.fractions == pytest.approx({k: v / 16 for k, v in ALL_NODES.items()})
    assert list(hand_made.node_labels.counts) == ["0", "1", "2", "3", "4", "unlabelled"]


def test_labels_by_phrase_length(hand_made):
    by_length = hand_made.labels_by_phrase_length
    assert list(by_length) == [name for name, _, _ in PHRASE_LENGTH_BUCKETS]
    for bucket, counts in BY_LENGTH.items():
        assert by_length[bucket].counts == counts
        assert by_length[bucket].total == sum(counts.values())
    assert by_length["2"].fractions["4"] == pytest.approx(0.25)
    for bucket in ("6-10", "11-20", "21+"):
        assert by_length[bucket].total == 0
        assert set(by_length[bucket].fractions.values()) == {0.0}


def test_num_classes_lists_unused_classes():
    result = treebank_stats([parse_tree(t) for t in HAND_MADE], num_classes=6)
    assert result.node_labels.counts["5"] == 0
    assert list(result.root_labels.counts) == ["0", "1", "2", "3", "4", "5", "unlabelled"]


def test_the_result_is_json_serialisable(hand_made):
    data = json.loads(json.dumps(hand_made.as_dict()))
    assert data["n_nodes"] == 16
    assert data["labels_by_phrase_length"]["1"]["counts"] == BY_LENGTH["1"]
    assert data["sentence_length"]["median"] == 2.5


@pytest.mark.parametrize(
    "n_words, bucket",
    [(1, "1"), (2, "2"), (3, "3-5"), (5, "3-5"), (6, "6-10"), (10, "6-10"), (11, "11-20"), (20, "11-20"),
     (21, "21+"), (1000, "21+")],
)
def test_length_bucket_edges(n_words, bucket):
    assert length_bucket(n_words) == bucket


def test_length_bucket_refuses_an_empty_phrase():
    with pytest.raises(ValueError):
        length_bucket(0)


def test_no_trees_gives_zero_counts_and_no_lengths():
    result = treebank_stats([])
    assert (result.n_trees, result.n_nodes, result.n_tokens) == (0, 0, 0)
    assert result.sentence_length.median is None
    assert result.node_labels.counts == {"unlabelled": 0}


@pytest.mark.parametrize("seed", range(5))
def test_lengths_and_counts_agree_with_a_direct_count(seed):
    rng = np.random.default_rng(seed)
    n_trees = int(rng.integers(1, 40))
    trees = [
        random_binary_tree(rng, int(rng.integers(1, 30)), 5, ["a", "b", "c", "d", "e", "f"], p_unlabelled=0.2)
        for _ in range(n_trees)
    ]
    result = treebank_stats(trees)
    lengths = [len(t.words) for t in trees]
    # the standard library's statistics module as the independent reference for median and mean
    assert result.sentence_length.median == statistics.median(lengths)
    assert result.sentence_length.mean == pytest.approx(statistics.fmean(lengths))
    assert (result.sentence_length.min, result.sentence_length.max) == (min(lengths), max(lengths))
    assert sum(d.total for d in result.labels_by_phrase_length.values()) == result.n_nodes
    spans = np.concatenate([t.spans() for t in trees])
    n_long = int(((spans[:, 1] - spans[:, 0]) >= 21).sum())
    assert result.labels_by_phrase_length["21+"].total == n_long



@pytest.mark.parametrize("block_bytes", [48, 1 << 20])
def test_counting_whole_blocks_equals_counting_tree_by_tree(tmp_path, monkeypatch, block_bytes):
    from pathlib import Path

    from rntn_engine.data import treebank_bulk
    from rntn_engine.data.treebank_bulk import iter_tree_blocks
    from rntn_engine.data.treebank_reader import read_trees
    from rntn_engine.data.treebank_stats import StatsAccumulator

    monkeypatch.setattr(treebank_bulk, "BLOCK_BYTES", block_bytes)
    path = tmp_path / "mixed.trees"
    # the hand-made trees (unary chains, unlabelled nodes), an n-ary node, a word escaped two ways, a demo slice
    demo = (Path(__file__).resolve().parents[1] / "data_demo" / "garden_dev.trees").read_text(encoding="utf-8")
    extra = ["(2 (1 -LCB-) (3 {) (0 x))", "(4\n  (2 spread)\n  (1 over))"]
    path.write_text("\n".join(HAND_MADE + extra) + "\n" + demo, encoding="utf-8")
    by_tree, by_block = StatsAccumulator(5), StatsAccumulator(5)
    for tree in read_trees(path):
        by_tree.add(tree)
    for block in iter_tree_blocks(path):
        by_block.add_block(block)
    assert by_block.result() == by_tree.result()
    assert by_block.result().n_trees == len(HAND_MADE) + len(extra) + 400
