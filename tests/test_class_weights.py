"""Class weights of the training cross-entropy: the setting, the balanced formula, and that a run
stores the resolved weights and trains with them. (The weighted gradients are proved in
tests/test_gradients_independent.py and tests/test_kernels_match_reference.py.)"""

import json

import numpy as np
import pytest
from sklearn.utils.class_weight import compute_class_weight

from demo_slices import DEMO, write_demo_slices
from rntn_engine.cli.app import main
from rntn_engine.data.treebank_reader import read_trees
from rntn_engine.run.checkpoints import load_checkpoint
from rntn_engine.run.class_weights import resolve_class_weights
from rntn_engine.run.run_config import ConfigError, TrainConfig


def test_balanced_weights_match_scikit_learn_on_the_demo_training_nodes():
    labels = np.concatenate([t.label for t in read_trees(DEMO / "garden_train.trees", num_classes=5)])
    ours = resolve_class_weights("balanced", labels, 5)
    # scikit-learn reference: compute_class_weight("balanced") = n_samples / (n_classes * bincount(y))
    expected = compute_class_weight("balanced", classes=np.arange(5), y=labels)
    np.testing.assert_allclose(ours, expected, rtol=1e-14)
    assert np.average(ours, weights=np.bincount(labels)) == pytest.approx(1.0)  # mean weight over the nodes


def test_balanced_weights_leave_out_unlabelled_nodes_and_give_an_absent_class_one():
    labels = np.array([-1, -1, 0, 0, 0, 1, -1, 3])  # 5 labelled: class 0 three times, 1 and 3 once, 2 and 4 never
    np.testing.assert_allclose(resolve_class_weights("balanced", labels, 5),
                               [5 / (5 * 3), 5 / (5 * 1), 1.0, 5 / (5 * 1), 1.0])
    np.testing.assert_array_equal(resolve_class_weights("none", labels, 5), np.ones(5))
    np.testing.assert_array_equal(resolve_class_weights("2,1,0.5,1,2", labels, 5), [2, 1, 0.5, 1, 2])


@pytest.mark.parametrize("value, words", [
    ("heavy", "none, balanced or 5 numbers"), ("1,2,3", "3 weights for 5 classes"), ("1,1,-1,1,1", ">= 0"),
    ("0,0,0,0,0", "not all zero"), ("1,1,nan,1,1", "finite"),
])
def test_bad_class_weight_settings_are_refused(value, words):
    with pytest.raises(ConfigError, match=words):
        TrainConfig(train_file="x", class_weights=value).validate()


def test_a_run_stores_its_resolved_weights_and_trains_with_them(tmp_path):
    write_demo_slices(tmp_path, 40, 10)

    def train(run_dir, *extra):
        return main(["train", "--train-file", str(tmp_path / "train.trees"), "--dev-file", str(tmp_path / "dev.trees"),
                     "--dim", "4", "--dtype", "float64", "--epochs", "1", "--batch-size", "10", "--run-dir",
                     str(tmp_path / run_dir), "--no-progress", *extra])

    assert train("plain") == 0 and train("balanced", "--class-weights", "balanced") == 0
    assert train("given", "--class-weights", "1,1,1,1,1") == 0
    model = load_checkpoint(tmp_path / "balanced" / "model.h5")
    labels = np.concatenate([t.label for t in read_trees(tmp_path / "train.trees", num_classes=5)])
    assert model.config.class_weights == "balanced"
    assert model.state["class_weights"] == resolve_class_weights("balanced", labels, 5).tolist()
    assert load_checkpoint(tmp_path / "plain" / "model.h5").state["class_weights"] == []

    def first(run_dir):
        return json.loads((tmp_path / run_dir / "metrics.jsonl").read_text().splitlines()[0])

    assert first("balanced")["train_loss"] != first("plain")["train_loss"]
    # weights of 1 are the plain cross-entropy, bit for bit; the dev scores are never weighted
    assert first("given")["train_loss"] == first("plain")["train_loss"]
    assert first("given")["dev_loss"] == first("plain")["dev_loss"]
