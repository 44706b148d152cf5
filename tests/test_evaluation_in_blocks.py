"""Scoring a treebank read in blocks and scored in pieces gives the scores of one whole pass.

The reference: the whole treebank encoded at once, one predict_treebank call, and the
score functions of run/scores.py (themselves checked against scikit-learn in
tests/test_scores_against_sklearn.py).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from rntn_engine.data import treebank_bulk
from rntn_engine.data.batches import encode_treebank, phrase_lengths
from rntn_engine.data.treebank_reader import read_trees
from rntn_engine.data.treebank_stats import PHRASE_LENGTH_BUCKETS, phrase_length_bucket_index
from rntn_engine.data.vocabulary import build_vocabulary
from rntn_engine.model.objective import TreeModelObjective
from rntn_engine.model.parameters import ModelShape, init_parameters
from rntn_engine.run import checkpoint_evaluation
from rntn_engine.run.checkpoint_evaluation import detail_report, score_treebank
from rntn_engine.run.checkpoints import Checkpoint
from rntn_engine.run.evaluation import predict_treebank
from rntn_engine.run.run_config import TrainConfig
from rntn_engine.run.scores import LabelScheme, accuracy, binary_accuracy, confusion_matrix

DEMO = Path(__file__).resolve().parents[1] / "data_demo"


@pytest.fixture(scope="module")
def checkpoint():
    trees = read_trees(DEMO / "garden_train.trees", num_classes=5)
    vocabulary = build_vocabulary(trees, 2)
    params = init_parameters(ModelShape("rntn", len(vocabulary), 4, 5, "float64"), np.random.default_rng(7))
    params.flat *= 3.0  # away from the uniform prediction, so classes differ
    return Checkpoint(params, vocabulary, TrainConfig(train_file="x", dim=4, num_classes=5))


def _whole_pass(checkpoint, path):
    bank = encode_treebank(read_trees(path, num_classes=5), checkpoint.vocabulary)
    objective = TreeModelObjective(checkpoint.params)
    try:
        pred = predict_treebank(objective, checkpoint.params, bank, keep_probabilities=True)
    finally:
        objective.close()
    return bank, pred


def test_macro_f1_of_evaluate_and_of_training_match_scikit_learn(checkpoint):
    from sklearn.metrics import f1_score

    from rntn_engine.run.trainer import dev_scores

    path = DEMO / "garden_dev.trees"
    scores = score_treebank(checkpoint, str(path), LabelScheme.for_classes(5)).scores()
    _, pred = _whole_pass(checkpoint, path)
    trained = dev_scores(pred, 5)
    for scope, mask in (("all", pred.gold >= 0), ("root", pred.is_root & (pred.gold >= 0))):
        # scikit-learn reference: macro-averaged F1 over the labels present in gold or predictions
        expected = f1_score(pred.gold[mask], pred.predicted[mask], average="macro", zero_division=0)
        assert scores[f"macro_f1_{scope}"] == pytest.approx(expected, abs=1e-12)
        assert trained[f"macro_f1_{scope}"] == pytest.approx(expected, abs=1e-12)


@pytest.mark.parametrize("block_bytes, batch_trees", [(2048, 7), (1 << 20, 1024), (300, 1)])
def test_scores_in_pieces_equal_one_whole_pass(checkpoint, block_bytes, batch_trees, monkeypatch):
    path = DEMO / "garden_dev.trees"
    monkeypatch.setattr(treebank_bulk, "BLOCK_BYTES", block_bytes)
    monkeypatch.setattr(checkpoint_evaluation, "PREDICT_BATCH_TREES", batch_trees)
    scheme = LabelScheme.for_classes(5)
    seen = []
    tally = score_treebank(checkpoint, str(path), scheme, progress=seen.append)
    bank, pred = _whole_pass(checkpoint, path)
    root = pred.is_root
    scores = tally.scores()
    assert scores["fine_all"] == accuracy(pred.gold, pred.predicted)
    assert scores["fine_root"] == accuracy(pred.gold[root], pred.predicted[root])
    assert scores["binary_all"] == binary_accuracy(pred.gold, pred.probabilities, scheme)
    assert scores["binary_root"] == binary_accuracy(pred.gold[root], pred.probabilities[root], scheme)
    assert scores["trees"] == bank.n_trees == sum(seen)
    if batch_trees == 1024:  # the same batches as the whole pass: the same loss to the last bit
        assert scores["loss"] == pred.mean_loss()
    else:
        assert scores["loss"] == pytest.approx(pred.mean_loss(), rel=1e-12)
    assert len(seen) > 1 or block_bytes > 4096
    assert 0 < scores["fine_all"] < 1


def test_the_detail_in_pieces_equals_one_whole_pass(checkpoint, monkeypatch):
    path = DEMO / "garden_dev.trees"
    monkeypatch.setattr(treebank_bulk, "BLOCK_BYTES", 1024)
    monkeypatch.setattr(checkpoint_evaluation, "PREDICT_BATCH_TREES", 16)
    report = detail_report(checkpoint, str(path))
    bank, pred = _whole_pass(checkpoint, path)
    scheme = LabelScheme.for_classes(5)
    np.testing.assert_array_equal(report["all_nodes"]["confusion"], confusion_matrix(pred.gold, pred.predicted, 5))
    root = pred.is_root
    np.testing.assert_array_equal(report["roots"]["confusion"], confusion_matrix(pred.gold[root], pred.predicted[root], 5))
    bucket_of = phrase_length_bucket_index(phrase_lengths(bank))
    for index, row in enumerate(report["by_phrase_length"]):
        assert row["words"] == PHRASE_LENGTH_BUCKETS[index][0]
        mask = (bucket_of == index) & (pred.gold >= 0)
        assert row["nodes"] == int(mask.sum())
        if mask.any():
            assert row["fine"] == accuracy(pred.gold[mask], pred.predicted[mask])
            assert row["binary"] == binary_accuracy(pred.gold[mask], pred.probabilities[mask], scheme)


def test_memory_while_scoring_is_bounded_by_a_piece_not_the_treebank(checkpoint, tmp_path, monkeypatch):
    import tracemalloc

    monkeypatch.setattr(treebank_bulk, "BLOCK_BYTES", 8192)
    monkeypatch.setattr(checkpoint_evaluation, "PREDICT_BATCH_TREES", 32)
    text = (DEMO / "garden_dev.trees").read_bytes()
    peaks = []
    for copies in (1, 4):
        path = tmp_path / f"dev-x{copies}.trees"
        path.write_bytes(text * copies)
        score_treebank(checkpoint, str(path), LabelScheme.for_classes(5))  # warm: kernels, workspaces
        tracemalloc.start()
        try:
            tally = score_treebank(checkpoint, str(path), LabelScheme.for_classes(5))
            peaks.append(tracemalloc.get_traced_memory()[1])
        finally:
            tracemalloc.stop()
        assert tally.trees == 400 * copies
    assert peaks[1] < 1.25 * peaks[0], peaks  # four times the treebank, the same memory
