"""The committed demo data in data_demo/ is what the scripts write, and it is well formed.

Trees are read with nltk (an independent bracket reader); the vector file with
gensim (an independent word-vector reader). Nothing here imports rntn_engine, so
these tests hold the data to the open formats, not to our own reader.
"""

from __future__ import annotations

import subprocess
import sys
from collections import Counter
from pathlib import Path

import numpy as np
import pytest
from gensim.models import KeyedVectors
from nltk import Tree

REPO = Path(__file__).resolve().parent.parent
DATA = REPO / "data_demo"
TREEBANK_SCRIPT = REPO / "scripts" / "make_demo_treebank.py"
VECTOR_SCRIPT = REPO / "scripts" / "make_demo_vectors.py"
SPLIT_SIZES = {"garden_train.trees": 3000, "garden_dev.trees": 400, "garden_test.trees": 600}
VECTOR_FILE = "garden_vectors_25d.glove.txt"
DIM = 25
NEGATORS = ("not", "never", "hardly", "barely")
INTENSIFIERS = ("very", "really", "truly", "so", "remarkably", "extremely", "incredibly", "absolutely")
NEUTRAL = 2


def run_script(*args: str) -> list[str]:
    """Run a data script with this interpreter; return its stdout lines (stderr must be empty)."""
    done = subprocess.run([sys.executable, *args], capture_output=True, text=True, check=True)
    assert done.stderr == ""
    return done.stdout.splitlines()


@pytest.fixture(scope="module")
def regenerated(tmp_path_factory) -> tuple[Path, list[str], list[str]]:
    out = tmp_path_factory.mktemp("demo_data")
    treebank_lines = run_script(str(TREEBANK_SCRIPT), "--out-dir", str(out))
    vector_lines = run_script(str(VECTOR_SCRIPT), "--trees-dir", str(out))
    return out, treebank_lines, vector_lines


@pytest.fixture(scope="module")
def splits() -> dict[str, list[Tree]]:
    # external check: nltk's bracket reader; fromstring also refuses text after the tree
    return {
        name: [Tree.fromstring(line) for line in (DATA / name).read_text(encoding="utf-8").splitlines()]
        for name in SPLIT_SIZES
    }


def all_nodes(splits: dict[str, list[Tree]]):
    for trees in splits.values():
        for tree in trees:
            yield from tree.subtrees()


def is_leaf_node(node: Tree) -> bool:
    return len(node) == 1 and isinstance(node[0], str)


# --- the committed files are exactly what the scripts write ------------------


@pytest.mark.parametrize("name", list(SPLIT_SIZES))
def test_regenerated_treebank_is_byte_identical(regenerated, name):
    out, _, _ = regenerated
    assert (out / name).read_bytes() == (DATA / name).read_bytes()


def test_treebank_script_prints_one_summary_line_per_file(regenerated):
    out, treebank_lines, _ = regenerated
    assert [line.split(":")[0] for line in treebank_lines] == [str(out / name) for name in SPLIT_SIZES]


def test_regenerated_vectors_are_byte_identical(regenerated):
    out, _, vector_lines = regenerated
    assert (out / VECTOR_FILE).read_bytes() == (DATA / VECTOR_FILE).read_bytes()
    assert len(vector_lines) == 1 and vector_lines[0].startswith(str(out / VECTOR_FILE))


def test_another_seed_gives_other_sentences(tmp_path):
    run_script(str(TREEBANK_SCRIPT), "--out-dir", str(tmp_path), "--seed", "12")
    committed = set((DATA / "garden_train.trees").read_text(encoding="utf-8").splitlines())
    other = (tmp_path / "garden_train.trees").read_text(encoding="utf-8").splitlines()
    assert len(other) == SPLIT_SIZES["garden_train.trees"]
    assert sum(line in committed for line in other) < len(other) // 10


# --- tree format ---------------------------------------------------------------


def test_split_sizes_and_total_size():
    for name, size in SPLIT_SIZES.items():
        assert len((DATA / name).read_text(encoding="utf-8").splitlines()) == size
    assert sum((DATA / name).stat().st_size for name in SPLIT_SIZES) < 2 * 1024 * 1024


def test_every_node_is_binary_or_a_one_word_leaf_with_label_0_to_4(splits):
    for node in all_nodes(splits):
        assert node.label() in ("0", "1", "2", "3", "4")
        if not is_leaf_node(node):
            assert len(node) == 2 and all(isinstance(child, Tree) for child in node)
        else:
            word = node[0]
            assert word == word.lower() and word.strip() == word and " " not in word


def test_sentence_lengths_and_means(splits):
    for trees in splits.values():
        lengths = [len(tree.leaves()) for tree in trees]
        assert min(lengths) >= 3 and max(lengths) <= 35
        assert 12 <= sum(lengths) / len(lengths) <= 18


def test_sentences_are_disjoint_across_splits(splits):
    sentences = [" ".join(tree.leaves()) for trees in splits.values() for tree in trees]
    assert len(set(sentences)) == len(sentences)


def test_root_labels_cover_all_classes_and_none_dominates(splits):
    for trees in splits.values():
        roots = Counter(tree.label() for tree in trees)
        assert sorted(roots) == ["0", "1", "2", "3", "4"]
        assert max(roots.values()) <= 0.45 * len(trees)


def test_dev_and_test_hold_words_unseen_in_train(splits):
    train_words = {w for tree in splits["garden_train.trees"] for w in tree.leaves()}
    for name in ("garden_dev.trees", "garden_test.trees"):
        unseen = {w for tree in splits[name] for w in tree.leaves()} - train_words
        assert len(unseen) >= 100


# --- the labels follow the documented composition --------------------------------


def test_negation_flips_the_polarity_of_its_sibling(splits):
    """(l1 (x not) (l2 ...)) with l2 non-neutral: l1 on the other side of neutral, or neutral."""
    opposite = neutralised = same_side = 0
    for node in all_nodes(splits):
        if len(node) == 2 and is_leaf_node(node[0]) and node[0][0] in NEGATORS:
            inner, outer = int(node[1].label()), int(node.label())
            if inner == NEUTRAL:
                assert outer == NEUTRAL  # negating nothing gives nothing
                continue
            if (inner - NEUTRAL) * (outer - NEUTRAL) < 0:
                opposite += 1
            elif outer == NEUTRAL:
                neutralised += 1  # dampening can bring a mild phrase to neutral
            else:
                same_side += 1
    assert same_side == 0
    assert opposite >= 500 and opposite >= 0.85 * (opposite + neutralised)


def test_same_word_gets_opposite_labels_alone_and_negated(splits):
    """A bag-of-words model sees the same word; the phrase labels disagree."""
    alone: dict[str, set[int]] = {}
    negated: dict[str, set[int]] = {}
    for node in all_nodes(splits):
        if is_leaf_node(node):
            alone.setdefault(node[0], set()).add(int(node.label()))
        elif is_leaf_node(node[0]) and node[0][0] == "not" and is_leaf_node(node[1]):
            negated.setdefault(node[1][0], set()).add(int(node.label()))
    flipped = [
        w for w, labels in negated.items()
        if any((a - NEUTRAL) * (b - NEUTRAL) < 0 for a in alone[w] for b in labels)
    ]
    assert len(flipped) >= 20


def test_intensifiers_never_move_a_phrase_towards_neutral(splits):
    for node in all_nodes(splits):
        if len(node) == 2 and is_leaf_node(node[0]) and node[0][0] in INTENSIFIERS:
            assert abs(int(node.label()) - NEUTRAL) >= abs(int(node[1].label()) - NEUTRAL)


def test_x_but_y_leans_to_y(splits):
    """(l X (l_c but Y)) with X and Y on opposite sides: the whole mostly sides with Y."""
    follows_y = total = 0
    for node in all_nodes(splits):
        right = node[1] if len(node) == 2 else None
        if right is not None and not is_leaf_node(right) and is_leaf_node(right[0]) and right[0][0] == "but":
            x, y, whole = int(node[0].label()), int(node[1].label()), int(node.label())
            if (x - NEUTRAL) * (y - NEUTRAL) < 0:
                total += 1
                follows_y += (whole - NEUTRAL) * (y - NEUTRAL) > 0
    assert total >= 300 and follows_y >= 0.75 * total


# --- vectors ----------------------------------------------------------------------


def test_vector_file_shape_order_and_coverage(splits):
    lines = (DATA / VECTOR_FILE).read_text(encoding="utf-8").splitlines()
    rows = [line.split(" ") for line in lines]
    assert all(len(row) == 1 + DIM for row in rows)
    values = np.array([[float(x) for x in row[1:]] for row in rows])
    assert np.isfinite(values).all()
    assert 0.9 <= np.linalg.norm(values, axis=1).mean() <= 1.1

    counts = Counter(w for trees in splits.values() for tree in trees for w in tree.leaves())
    words = [row[0] for row in rows]
    assert sorted(words) == sorted(counts)  # one vector per corpus word, none repeated
    assert words == sorted(counts, key=lambda w: (-counts[w], w))

    train_words = {w for tree in splits["garden_train.trees"] for w in tree.leaves()}
    assert 150 <= sum(w not in train_words for w in words) <= 260


def test_vector_file_reads_with_gensim():
    # external check: gensim's reader for headerless GloVe text
    path = DATA / VECTOR_FILE
    vectors = KeyedVectors.load_word2vec_format(str(path), binary=False, no_header=True)
    assert vectors.vectors.shape == (len(path.read_text(encoding="utf-8").splitlines()), DIM)
    # the co-occurrence vectors put words used alike next to each other
    neighbours = {w for w, _ in vectors.most_similar("monday", topn=5)}
    assert {"tuesday", "wednesday", "thursday", "friday"} & neighbours
