"""The best model is kept and model.h5 means what the README says.

best.h5 holds the best checkpoint by --best-metric (dev_loss: the lowest); model.h5 holds the
best checkpoint by default (--final-model best), the last parameters with --final-model last
or without a dev file. Scores picked against values recomputed here from the metrics log.
"""

import json

import numpy as np
import pytest

from demo_slices import write_demo_slices
from rntn_engine.cli.app import main
from rntn_engine.run.checkpoints import load_checkpoint
from rntn_engine.run.run_config import BEST_METRICS, LOWER_IS_BETTER


@pytest.fixture(scope="module")
def treebanks(tmp_path_factory):
    root = tmp_path_factory.mktemp("best")
    write_demo_slices(root, 60, 30)
    return root


def train(tb, run_dir, *extra):
    return main(["train", "--train-file", str(tb / "train.trees"), "--dev-file", str(tb / "dev.trees"), "--dim", "4",
                 "--dtype", "float64", "--lr", "0.05", "--epochs", "8", "--batch-size", "10", "--keep-checkpoints",
                 "1", "--run-dir", str(run_dir), "--no-progress", *extra])


def records(run_dir):
    return [json.loads(line) for line in (run_dir / "metrics.jsonl").read_text().splitlines()]


def best_step(rows, metric):
    values = [r[metric] for r in rows]
    pick = int(np.argmin(values)) if metric in LOWER_IS_BETTER else int(np.argmax(values))  # first on ties
    return rows[pick]["step"]


@pytest.mark.parametrize("metric", ["dev_fine_root", "dev_loss", "dev_macro_f1_all", "dev_binary_root"])
def test_best_file_and_model_file_hold_the_best_checkpoint(treebanks, tmp_path, metric):
    run_dir = tmp_path / "run"
    assert train(treebanks, run_dir, "--best-metric", metric) == 0
    rows = records(run_dir)
    expected = best_step(rows, metric)
    best, model = load_checkpoint(run_dir / "best.h5"), load_checkpoint(run_dir / "model.h5")
    assert best.state["step"] == expected and model.state["step"] == expected
    assert np.array_equal(best.params.flat, model.params.flat)
    last = load_checkpoint(run_dir / f"checkpoint-step{rows[-1]['step']:09d}.h5")
    assert last.state["finished"] and (expected == last.state["step"]) == np.array_equal(last.params.flat,
                                                                                       model.params.flat)


def test_early_stopping_leaves_the_best_model_as_model_h5(treebanks, tmp_path):
    run_dir = tmp_path / "run"
    assert train(treebanks, run_dir, "--patience", "2", "--epochs", "30") == 0
    final = load_checkpoint(run_dir / f"checkpoint-step{records(run_dir)[-1]['step']:09d}.h5")
    assert final.state["finish_reason"] == "early stopping"
    expected = best_step(records(run_dir), "dev_fine_root")
    assert expected < final.state["step"]  # the run went on past its best before stopping
    assert load_checkpoint(run_dir / "model.h5").state["step"] == expected


def test_final_model_last_keeps_the_last_parameters(treebanks, tmp_path):
    run_dir = tmp_path / "run"
    assert train(treebanks, run_dir, "--final-model", "last") == 0
    model = load_checkpoint(run_dir / "model.h5")
    assert model.state["step"] == records(run_dir)[-1]["step"] and model.state["finished"]


def test_without_a_dev_file_model_h5_is_the_last(treebanks, tmp_path):
    run_dir = tmp_path / "run"
    assert main(["train", "--train-file", str(treebanks / "train.trees"), "--dim", "3", "--epochs", "2",
                 "--batch-size", "10", "--run-dir", str(run_dir), "--no-progress"]) == 0
    assert not (run_dir / "best.h5").exists()
    assert load_checkpoint(run_dir / "model.h5").state["finished"]


def test_every_best_metric_is_recorded_with_one_loss_unit(treebanks, tmp_path):
    run_dir = tmp_path / "run"
    assert train(treebanks, run_dir, "--epochs", "1") == 0
    (row,) = records(run_dir)
    assert set(BEST_METRICS) <= set(row)
    # train_loss and dev_loss: mean cross-entropy per labelled node; the L2 term apart
    assert 0 < row["train_loss"] < 3 and 0 < row["dev_loss"] < 3 and row["train_l2"] > 0


def test_status_and_inspect_say_which_file_is_which(treebanks, tmp_path, capsys):
    run_dir = tmp_path / "run"
    assert train(treebanks, run_dir, "--epochs", "3") == 0
    capsys.readouterr()
    assert main(["status", str(run_dir), "--json"]) == 0
    files = json.loads(capsys.readouterr().out)["files"]
    best = load_checkpoint(run_dir / "best.h5").state["best_checkpoint"]
    assert files == {"best.h5": f"the best checkpoint so far ({best})",
                     "model.h5": "the final model: the best checkpoint (--final-model best)"}
    assert main(["inspect", str(run_dir / "model.h5"), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["role"] == "a run's final model: its best checkpoint"
    assert main(["inspect", str(run_dir / best), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["role"] == "a checkpoint, the best of its run when written"
