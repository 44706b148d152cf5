"""Slices of `rntn evaluate`: the slice-file parser and its errors, the --slice option, and the
per-slice scores on a hand-made treebank whose every number is worked out by hand below.

The model of the hand-made case is built so that its predictions can be read off: an RNN with
d = C = 5, W = 0 and b = 0 (every internal node's vector is tanh(0) = 0), Ws = 10 I, and each
word's vector the one-hot vector of "its" class. So a leaf gets the scores 10 e_k + bs and
predicts its word's class k, and every internal node gets the scores bs = (0, 0, 1, 0.5, 0):
it predicts class 2 (neutral), and for binary scores the positive side (e^0.5 + e^0 > e^0 + e^0).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from typer.testing import CliRunner

from rntn_engine.cli.app import app
from rntn_engine.data.treebank_reader import read_trees
from rntn_engine.data.vocabulary import build_vocabulary
from rntn_engine.model.parameters import ModelShape, init_parameters
from rntn_engine.run.checkpoint_evaluation import detail_report, evaluate_checkpoint, score_treebank
from rntn_engine.run.checkpoints import Checkpoint, save_checkpoint
from rntn_engine.run.run_config import TrainConfig
from rntn_engine.run.scores import LabelScheme
from rntn_engine.run.slice_definitions import SliceDefinition, SliceFileError, read_slice_file, slice_from_option

# --- the parser -----------------------------------------------------------------------------------

GOOD_FILE = """\
# a comment
[negation]
kind = "phrase-words"
words = ["Not", "never", "not"]

[contrast]
kind = "tree-words"
words = ["but"]

[short]
kind = "phrase-length"
min = 2
max = 5

[long]
kind = "phrase-length"
min = 11

[negative]
kind = "root-class"
classes = [0, "negative"]

[clash]
kind = "opposite-children"
"""


def test_a_slice_file_is_read_in_order_with_its_values(tmp_path):
    path = tmp_path / "slices.toml"
    path.write_text(GOOD_FILE, encoding="utf-8")
    slices = read_slice_file(path)
    assert slices == [
        SliceDefinition("negation", "phrase-words", words=("not", "never")),  # lower case, repeats dropped
        SliceDefinition("contrast", "tree-words", words=("but",)),
        SliceDefinition("short", "phrase-length", min_words=2, max_words=5),
        SliceDefinition("long", "phrase-length", min_words=11, max_words=None),
        SliceDefinition("negative", "root-class", classes=(0, "negative")),
        SliceDefinition("clash", "opposite-children"),
    ]


def test_the_demo_slice_file_is_valid():
    from demo_slices import DEMO

    names = [s.name for s in read_slice_file(DEMO / "garden_slices.toml")]
    assert {"negation", "contrast"} <= set(names)


BAD_FILES = [
    # (file text, expected location, words the message must hold)
    ("[negation]\nkind = \"phrase-words\"\nwords = [\"not\"\n", ":4:1:", "not valid TOML"),
    ("[a]\nkind = \"phrase-words\"\nwords = [\"x\"]\n[a]\nkind = \"tree-words\"\n", ":4:", "not valid TOML"),
    ("[negation]\nwords = [\"not\"]\n", ":1:", "missing key 'kind'"),
    ("[negation]\n\nkind = \"word\"\nwords = [\"not\"]\n", ":3:", "kind must be one of"),
    ("[negation]\nkind = \"phrase-words\"\nwords = [\"not\"]\nscope = \"trees\"\n", ":4:", "unknown key 'scope'"),
    ("[negation]\nkind = \"phrase-words\"\n", ":1:", "needs the key 'words'"),
    ("[negation]\nkind = \"phrase-words\"\nwords = \"not\"\n", ":3:", "words must be a list of strings"),
    ("[negation]\nkind = \"phrase-words\"\nwords = [\"not\", 3]\n", ":3:", "words must be a list of strings"),
    ("[negation]\nkind = \"phrase-words\"\nwords = []\n", ":3:", "at least one word"),
    ("[short]\nkind = \"phrase-length\"\nmin = 2\nmax = \"5\"\n", ":4:", "max must be a whole number"),
    ("[short]\nkind = \"phrase-length\"\nmin = 6\nmax = 5\n", ":4:", "below the shortest"),
    ("[short]\nkind = \"phrase-length\"\nmin = 0\n", ":3:", "at least 1"),
    ("[neg]\nkind = \"root-class\"\nclasses = []\n", ":3:", "non-empty list"),
    ("[neg]\nkind = \"root-class\"\nclasses = [true]\n", ":3:", "non-empty list"),
    ("[clash]\nkind = \"opposite-children\"\nwords = [\"x\"]\n", ":3:", "unknown key 'words'"),
    ("kind = \"phrase-words\"\n", ":1:", "is not a table"),
    ("# nothing here\n", ": ", "no slice defined"),
]


@pytest.mark.parametrize("text, location, words", BAD_FILES, ids=[b[2] + str(i) for i, b in enumerate(BAD_FILES)])
def test_bad_slice_files_give_one_located_line(tmp_path, text, location, words):
    path = tmp_path / "slices.toml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(SliceFileError) as caught:
        read_slice_file(path)
    message = str(caught.value)
    assert "\n" not in message
    assert message.startswith(str(path) + location), message
    assert words in message


def test_a_missing_or_undecodable_slice_file_is_reported(tmp_path):
    with pytest.raises(SliceFileError, match="cannot read the slice file"):
        read_slice_file(tmp_path / "absent.toml")
    path = tmp_path / "latin1.toml"
    path.write_bytes(b"[caf\xe9]\nkind = \"opposite-children\"\n")
    with pytest.raises(SliceFileError, match="not UTF-8"):
        read_slice_file(path)


@pytest.mark.parametrize("text, expected", [
    ("neg=phrase-words:not, Never", SliceDefinition("neg", "phrase-words", words=("not", "never"))),
    ("c=tree-words:but", SliceDefinition("c", "tree-words", words=("but",))),
    ("s=phrase-length:2-5", SliceDefinition("s", "phrase-length", min_words=2, max_words=5)),
    ("l=phrase-length:11-", SliceDefinition("l", "phrase-length", min_words=11, max_words=None)),
    ("one=phrase-length:1", SliceDefinition("one", "phrase-length", min_words=1, max_words=1)),
    ("r=root-class:0,negative", SliceDefinition("r", "root-class", classes=(0, "negative"))),
    ("x=opposite-children", SliceDefinition("x", "opposite-children")),
])
def test_slice_options(text, expected):
    assert slice_from_option(text) == expected


@pytest.mark.parametrize("text, words", [
    ("phrase-words:not", "NAME=KIND"), ("=phrase-words:not", "NAME=KIND"), ("a=words:not", "unknown kind"),
    ("a=phrase-words", "needs a value"), ("a=phrase-words:,", "at least one word"),
    ("a=phrase-length:5-2", "below the shortest"), ("a=phrase-length:0", "at least 1"),
    ("a=phrase-length:two", "a length N"), ("a=opposite-children:x", "takes no value"),
])
def test_bad_slice_options(text, words):
    with pytest.raises(ValueError, match=words):
        slice_from_option(text)


# --- per-slice numbers on a hand-made treebank ---------------------------------------------------

HAND_TREES = """\
(1 (2 not) (4 good))
(3 (1 (2 the) (1 dull)) (3 (2 but) (3 nice)))
(4 (2 garden) (4 good))
(0 (0 bad) (2 garden))
(3 (4 good) (1 dull))
"""
WORD_CLASS = {"not": 2, "good": 4, "the": 2, "dull": 1, "but": 2, "nice": 3, "garden": 2, "bad": 0}
BS = np.array([0.0, 0.0, 1.0, 0.5, 0.0])
NAMES = "very negative,negative,neutral,positive,very positive"


def _hand_checkpoint(tmp_path):
    path = tmp_path / "hand.trees"
    path.write_text(HAND_TREES, encoding="utf-8")
    vocabulary = build_vocabulary(read_trees(path, num_classes=5), min_count=1)
    params = init_parameters(ModelShape("rnn", len(vocabulary), 5, 5, "float64"), np.random.default_rng(0))
    params.W[:] = 0.0
    params.b[:] = 0.0
    params.Ws[:] = 10.0 * np.eye(5)
    params.bs[:] = BS
    params.L[:] = 0.0
    for word, c in WORD_CLASS.items():
        params.L[vocabulary.id_of(word), c] = 1.0
    config = TrainConfig(train_file="x", model="rnn", dim=5, num_classes=5, class_names=NAMES, dtype="float64")
    return Checkpoint(params, vocabulary, config), path


def _hand_model_file(tmp_path, slice_text):
    """(model file, treebank, slice file) of the hand-made case, the slice file holding ``slice_text``."""
    checkpoint, path = _hand_checkpoint(tmp_path)
    model = tmp_path / "hand.h5"
    save_checkpoint(model, checkpoint.params, checkpoint.vocabulary, checkpoint.config)
    slice_file = tmp_path / "slices.toml"
    slice_file.write_text(slice_text, encoding="utf-8")
    return model, path, slice_file


def _nll(scores, gold):
    """-log softmax(scores)[gold], written out."""
    return math.log(sum(math.exp(s) for s in scores)) - scores[gold]


LEAF = {c: 10.0 * np.eye(5)[c] + BS for c in range(5)}  # the scores of a leaf whose word has class c

HAND_SLICES = (
    SliceDefinition("negation", "phrase-words", words=("not",)),
    SliceDefinition("contrast-sentences", "tree-words", words=("but",)),
    SliceDefinition("two-words", "phrase-length", min_words=2, max_words=2),
    SliceDefinition("negative-roots", "root-class", classes=(0, "negative")),
    SliceDefinition("clash", "opposite-children"),
)
# Worked by hand from the trees and the predictions of the module docstring:
#   negation: "not" (gold 2, predicted 2) and the root of tree 1 (gold 1, predicted 2): fine 1/2, root 0/1;
#     binary: only the root counts (negative, predicted positive): 0/1; macro-F1 over classes {1, 2}:
#     class 2 P = 1/2, R = 1, F1 = 2/3; class 1 F1 = 0 -> 1/3.
#   contrast-sentences: all 7 nodes of tree 2, gold 2 1 1 2 3 3 3, predicted 2 1 2 2 3 2 2: fine 4/7, root 0/1;
#     binary over the 5 non-neutral: dull (neg, neg) right, "the dull" (neg, pos) wrong, nice, "but nice" and
#     the root (pos, pos) right: 4/5; root 1/1.
#   two-words: roots of trees 1, 3, 4, 5 and "the dull", "but nice" of tree 2 (gold 1 4 0 3 1 3; 5 trees),
#     all predicted 2:
#     fine 0/6, root 0/4; binary (all predicted positive): 3/6, roots 2/4.
#   negative-roots: trees 1 and 4 (root classes 1 and 0): gold 2 4 1 0 2 0, predicted 2 4 2 0 2 2: fine 4/6,
#     root 0/2; binary: good right, root 1 wrong, bad right, root 0 wrong: 2/4, roots 0/2.
#   clash: the roots of tree 2 (children gold 1 and 3) and tree 5 (children 4 and 1), gold 3 3, predicted 2:
#     fine 0/2, root 0/2, binary 2/2.
EXPECTED = {
    "negation": dict(fine_all=1 / 2, fine_root=0.0, binary_all=0.0, binary_root=0.0, macro_f1_all=1 / 3,
                     labelled_nodes=2, trees=1, loss=(_nll(LEAF[2], 2) + _nll(BS, 1)) / 2),
    "contrast-sentences": dict(fine_all=4 / 7, fine_root=0.0, binary_all=4 / 5, binary_root=1.0, labelled_nodes=7,
                               trees=1),
    "two-words": dict(fine_all=0.0, fine_root=0.0, binary_all=3 / 6, binary_root=2 / 4, labelled_nodes=6, trees=5,
                      loss=sum(_nll(BS, g) for g in (1, 4, 0, 3, 1, 3)) / 6),
    "negative-roots": dict(fine_all=4 / 6, fine_root=0.0, binary_all=2 / 4, binary_root=0.0, labelled_nodes=6,
                           trees=2),
    "clash": dict(fine_all=0.0, fine_root=0.0, binary_all=1.0, binary_root=1.0, labelled_nodes=2, trees=2),
}


def test_per_slice_scores_match_the_hand_computed_values(tmp_path):
    checkpoint, path = _hand_checkpoint(tmp_path)
    tally = score_treebank(checkpoint, str(path), LabelScheme.for_classes(5), slices=HAND_SLICES)
    for definition, scores in zip(HAND_SLICES, tally.slice_scores()):
        for key, value in EXPECTED[definition.name].items():
            assert scores[key] == pytest.approx(value, abs=1e-12), (definition.name, key)
    whole = tally.scores()
    assert (whole["labelled_nodes"], whole["trees"]) == (19, 5)


def test_slice_rows_follow_the_whole_treebank_row(tmp_path):
    checkpoint, path = _hand_checkpoint(tmp_path)
    model = tmp_path / "hand.h5"
    save_checkpoint(model, checkpoint.params, checkpoint.vocabulary, checkpoint.config)
    rows = evaluate_checkpoint(str(model), [str(path)], slices=HAND_SLICES)
    assert [r.slice for r in rows] == ["", *(s.name for s in HAND_SLICES)]
    assert rows[3].scores["fine_root"] == 0.0 and rows[3].scores["binary_root"] == 2 / 4
    # a slice naming a class the model does not have is an error row, not a crash
    bad = evaluate_checkpoint(str(model), [str(path)], slices=(SliceDefinition("r", "root-class", classes=("mixed",)),))
    assert len(bad) == 1 and "no class is named 'mixed'" in bad[0].error


def test_detail_gives_the_per_class_breakdown_of_each_slice(tmp_path):
    checkpoint, path = _hand_checkpoint(tmp_path)
    report = detail_report(checkpoint, str(path), slices=HAND_SLICES)
    negation = report["slices"][0]
    assert negation["slice"] == "negation"
    # gold [2, 1], predicted [2, 2]: row = gold, column = predicted
    expected = np.zeros((5, 5), dtype=int)
    expected[2, 2] = expected[1, 2] = 1
    assert negation["all_nodes"]["confusion"] == expected.tolist()
    assert negation["all_nodes"]["per_class"]["recall"][2] == 1.0
    assert report["class_names"][1] == "negative"


def test_evaluate_command_prints_and_writes_slice_rows(tmp_path):
    model, path, slice_file = _hand_model_file(tmp_path, "[negation]\nkind = \"phrase-words\"\nwords = [\"not\"]\n")
    out = tmp_path / "scores"
    result = CliRunner().invoke(app, ["evaluate", str(model), "-t", str(path), "--slices", str(slice_file),
                                      "--slice", "clash=opposite-children", "--out", str(out), "--jobs", "1",
                                      "--no-progress"])
    assert result.exit_code == 0, result.output
    lines = result.stdout.splitlines()
    assert "slice" in lines[0] and "macro-F1 all" in lines[0]
    assert "(all)" in lines[1].split() and "negation" in lines[2].split() and "clash" in lines[3].split()
    records = json.loads((tmp_path / "scores.json").read_text())
    assert [r["slice"] for r in records] == ["", "negation", "clash"]
    assert records[1]["fine_all"] == 0.5 and records[1]["macro_f1_all"] == pytest.approx(1 / 3)
    assert (tmp_path / "scores.csv").read_text().splitlines()[2].split(",")[2] == "negation"
    detail = CliRunner().invoke(app, ["evaluate", str(model), "-t", str(path), "--slice", "neg=phrase-words:not",
                                      "--detail", "--no-progress"])
    assert detail.exit_code == 0, detail.output
    assert "=== slice neg (phrase-words: not)" in detail.stdout
    assert "very negative" in detail.stdout  # classes by name


def test_evaluate_command_refuses_bad_slices(tmp_path):
    model, path, slice_file = _hand_model_file(tmp_path, "[negation]\nkind = \"phrase-words\"\nwords = \"not\"\n")
    from rntn_engine.cli.app import main

    assert main(["evaluate", str(model), "-t", str(path), "--slices", str(slice_file)]) == 1
    assert main(["evaluate", str(model), "-t", str(path), "--slice", "a=words:x"]) == 2
    assert main(["evaluate", str(model), "-t", str(path), "--slice", "a=opposite-children",
                 "--slice", "a=phrase-length:2"]) == 2
