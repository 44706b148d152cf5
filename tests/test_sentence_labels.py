"""Sentence-labelled corpora (LABEL<TAB>sentence, LABEL<TAB>(tree)) become root-labelled trees that train."""

import numpy as np
import pytest

from rntn_engine.cli.app import main
from rntn_engine.data.errors import TreebankError
from rntn_engine.data.sentence_labels import read_sentence_labels
from rntn_engine.data.treebank_reader import read_trees
from rntn_engine.run.checkpoints import load_checkpoint

GOOD = ("3\tThe palm house was lovely, but the café wasn't.\n"
        "# a comment line\n\n"
        "1\t(S (NP (DT the) (NN queue)) (VP (VBD was) (ADJP (RB far) (RB too) (JJ long))))\n")


def test_lines_become_root_labelled_trees(tmp_path):
    path = tmp_path / "labels.tsv"
    path.write_text(GOOD, encoding="utf-8")
    first, second = read_sentence_labels(path, 5)
    assert first.words == ("The", "palm", "house", "was", "lovely", ",", "but", "the", "café", "was", "n't", ".")
    assert first.root_label == 3 and (first.label[:-1] == -1).all()
    assert second.words == ("the", "queue", "was", "far", "too", "long") and second.root_label == 1
    assert (second.label[:-1] == -1).all() and second.n_nodes == 11  # binarised: 6 words, 5 internal nodes
    assert second.source.endswith("labels.tsv:4")


@pytest.mark.parametrize("line, where, words", [
    ("7\thello\n", ":1:1:", "expected a class label 0..4 before the tab, found '7'"),
    ("two\thello\n", ":1:1:", "found 'two'"),
    ("2 hello\n", ":1:1:", "no tab on this line"),
    ("2\t   \n", ":1:3:", "found nothing"),
    ("2\t(S (NP a) b\n", ":1:13:", "expected '(' or ')'"),
])
def test_bad_lines_are_named_with_file_line_and_column(tmp_path, line, where, words):
    path = tmp_path / "bad.tsv"
    path.write_text(line, encoding="utf-8")
    with pytest.raises(TreebankError) as caught:
        list(read_sentence_labels(path, 5))
    assert f"{path}{where}" in str(caught.value) and words in str(caught.value)


def test_the_command_writes_a_treebank_that_trains_and_scores_its_roots(tmp_path, capsys):
    rng = np.random.default_rng(0)
    lines = []
    for _ in range(80):  # an invented sentence-labelled corpus: the label follows the polar words
        good, bad = int(rng.integers(0, 3)), int(rng.integers(0, 3))
        words = ["the", "glasshouse"] + ["lovely"] * good + ["dull"] * bad + ["."]
        lines.append(f"{2 + (good > bad) - (bad > good)}\t{' '.join(words)}")
    (tmp_path / "corpus.tsv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    out = tmp_path / "corpus.trees"
    assert main(["convert-labelled-sentences", str(tmp_path / "corpus.tsv"), str(out)]) == 0
    assert "wrote 80 root-labelled trees" in capsys.readouterr().out
    trees = read_trees(out, num_classes=5)  # the standard reader takes them
    assert all((t.label[:-1] == -1).all() and t.root_label in (1, 2, 3) for t in trees)
    run = tmp_path / "run"
    assert main(["train", "--train-file", str(out), "--dev-file", str(out), "--dim", "4", "--epochs", "3",
                 "--batch-size", "10", "--run-dir", str(run), "--no-progress"]) == 0
    record = load_checkpoint(run / "model.h5").metrics[-1]
    assert 0 <= record["dev_fine_root"] <= 1 and record["dev_fine_all"] == record["dev_fine_root"]


def test_the_command_refuses_to_overwrite_its_input(tmp_path, capsys):
    path = tmp_path / "c.tsv"
    path.write_text(GOOD, encoding="utf-8")
    assert main(["convert-labelled-sentences", str(path), str(path)]) == 1
    assert "is the input file" in capsys.readouterr().err and path.read_text(encoding="utf-8") == GOOD
