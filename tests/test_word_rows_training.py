"""Pretrained vectors survive training: words training never sees keep their vectors bit for bit.

Through the command line, as a user runs it: `rntn train --vectors F --extend-vocabulary N`.
Also: the starting vectors that `--l2-words-toward start` pulls toward are run state, saved in
every checkpoint, and they decide the future (a perturbed copy changes the trained parameters).
"""

import shutil
from pathlib import Path

import numpy as np
import pytest

from demo_slices import write_demo_slices
from rntn_engine.cli.app import main
from rntn_engine.data.batches import encode_treebank
from rntn_engine.data.treebank_reader import read_trees
from rntn_engine.run.checkpoints import load_checkpoint, save_checkpoint
from rntn_engine.run.run_directory import list_checkpoints

DEMO = Path(__file__).resolve().parents[1] / "data_demo"
VECTORS = DEMO / "garden_vectors_25d.glove.txt"


def train(tmp, run_dir, *extra):
    return main(["train", "--train-file", str(tmp / "train.trees"), "--vectors", str(VECTORS),
                 "--extend-vocabulary", "863", "--run-dir", str(run_dir), "--no-progress", "--batch-size", "10",
                 "--epochs", "2", "--keep-checkpoints", "100", "--checkpoint-every-steps", "5", *extra])


@pytest.fixture(scope="module")
def small(tmp_path_factory):
    root = tmp_path_factory.mktemp("words")
    write_demo_slices(root, 60)
    return root


@pytest.mark.parametrize("toward", ["zero", "start"])
def test_rows_absent_from_training_keep_their_initial_value_and_present_rows_change(small, tmp_path, toward):
    run_dir = tmp_path / "run"
    assert train(small, run_dir, "--l2-words-toward", toward) == 0
    start = load_checkpoint(run_dir / "checkpoint-step000000000.h5")  # written before the first step
    model = load_checkpoint(run_dir / "model.h5")
    assert model.state["step"] > 0 and len(model.vocabulary) == 864
    bank = encode_treebank(read_trees(small / "train.trees"), model.vocabulary)
    present = np.unique(bank.word[bank.left < 0])
    absent = np.setdiff1d(np.arange(len(model.vocabulary)), present)
    assert absent.size > 600  # most extended words never occur in 60 training trees (611 here)
    assert np.array_equal(model.params.L[absent], start.params.L[absent])  # bit for bit
    assert not model.adagrad_sums.L[absent].any()
    changed = np.any(model.params.L[present] != start.params.L[present], axis=1)
    assert changed.all()  # every row a minibatch touched has moved


def test_starting_vectors_are_saved_and_decide_the_future(small, tmp_path):
    finished = tmp_path / "finished"
    assert train(small, finished, "--l2-words-toward", "start", "--l2-words", "0.05") == 0
    model = load_checkpoint(finished / "model.h5")
    initial = load_checkpoint(finished / "checkpoint-step000000000.h5")
    assert np.array_equal(model.anchors["L"], initial.params.L)  # the anchor is the starting L, unchanged

    def resume_from_middle(change):
        source = next(c.path for c in list_checkpoints(finished) if c.step == 5)
        run_dir = tmp_path / f"copy-{len(list(tmp_path.iterdir()))}"
        run_dir.mkdir()
        shutil.copy(finished / "config.toml", run_dir / "config.toml")
        c = load_checkpoint(source)
        change(c)
        save_checkpoint(run_dir / source.name, c.params, c.vocabulary, c.config, c.adagrad_sums, c.state, c.metrics,
                        c.data_hashes, anchors=c.anchors)
        assert main(["resume", str(run_dir), "--no-progress"]) == 0
        return load_checkpoint(run_dir / "model.h5").params.L

    same = resume_from_middle(lambda c: None)
    assert np.array_equal(same, model.params.L)  # resumed from the middle: bit-identical
    moved = resume_from_middle(lambda c: c.anchors["L"].__iadd__(np.float32(0.05)))
    assert not np.array_equal(moved, model.params.L)  # the saved anchor is what later steps pull toward


def test_a_checkpoint_without_its_starting_vectors_is_refused(small, tmp_path):
    run_dir = tmp_path / "run"
    assert train(small, run_dir, "--l2-words-toward", "start", "--epochs", "0") == 0
    c = load_checkpoint(run_dir / "model.h5")
    broken = tmp_path / "broken.h5"
    save_checkpoint(broken, c.params, c.vocabulary, c.config, c.adagrad_sums, c.state, c.metrics, c.data_hashes)
    from rntn_engine.data.checkpoint_file import CheckpointError

    with pytest.raises(CheckpointError, match="starting_values/word_vectors is missing"):
        load_checkpoint(broken)
