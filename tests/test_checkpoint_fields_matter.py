"""Every saved field decides the future (RELIABILITY.md, point 12): perturb one field of a
mid-run checkpoint, resume, and the finished run must differ from the unperturbed one.
(training_seconds is the one field that only feeds wall-time reporting.)"""

import shutil

import pytest

from demo_slices import write_demo_slices
from rntn_engine.cli.app import main
from rntn_engine.data.vocabulary import Vocabulary
from rntn_engine.run.checkpoints import load_checkpoint, save_checkpoint
from rntn_engine.run.run_directory import list_checkpoints

TIMING = ("wall_seconds", "nodes_per_second")


@pytest.fixture(scope="module")
def finished_run(tmp_path_factory):
    root = tmp_path_factory.mktemp("fields")
    write_demo_slices(root, 60, 20)
    run_dir = root / "run"
    assert main(["train", "--train-file", str(root / "train.trees"), "--dev-file", str(root / "dev.trees"),
                 "--dim", "4", "--epochs", "3", "--batch-size", "10", "--checkpoint-every-steps", "4",
                 "--keep-checkpoints", "100", "--run-dir", str(run_dir), "--no-progress"]) == 0
    return run_dir


def outcome(run_dir):
    c = load_checkpoint(run_dir / "model.h5")
    state = {k: v for k, v in c.state.items() if k != "training_seconds"}
    metrics = [{k: v for k, v in m.items() if k not in TIMING} for m in c.metrics]
    return c.params.flat.tobytes(), c.adagrad_sums.flat.tobytes(), metrics, state


def perturb_and_resume(finished_run, tmp_path, change):
    # a checkpoint in the middle of epoch 2 (step 8: epoch 2 starts at step 6)
    source = next(c.path for c in list_checkpoints(finished_run) if c.step == 8)
    run_dir = tmp_path / "run"
    run_dir.mkdir()
    shutil.copy(finished_run / "config.toml", run_dir / "config.toml")
    ckpt = load_checkpoint(source)
    change(ckpt)
    save_checkpoint(run_dir / source.name, ckpt.params, ckpt.vocabulary, ckpt.config, ckpt.adagrad_sums,
                    ckpt.state, ckpt.metrics, ckpt.data_hashes)
    assert main(["resume", str(run_dir), "--no-progress"]) == 0
    return outcome(run_dir)


def set_state(key, value):
    def change(c):
        c.state[key] = value(c.state[key]) if callable(value) else value
    return change


def swap_two_words(c):
    words = list(c.vocabulary.words)
    words[1], words[2] = words[2], words[1]
    c.vocabulary = Vocabulary(tuple(words), c.vocabulary.lowercase, c.vocabulary.min_count)


PERTURBATIONS = {
    "parameters": lambda c: c.params.W.__setitem__((0, 0), c.params.W[0, 0] + 0.01),
    "adagrad_sums": lambda c: c.adagrad_sums.W.__imul__(2.0),
    "vocabulary": swap_two_words,
    "metrics": lambda c: c.metrics.pop(),
    "step": set_state("step", lambda s: s + 1),
    "epoch": set_state("epoch", lambda e: e + 1),
    "position": set_state("position", lambda p: p + 10),
    "epoch_loss": set_state("epoch_loss", lambda x: x + 1.0),
    "best_value": set_state("best_value", 0.99),
    "best_step": set_state("best_step", 1),
    "best_checkpoint": set_state("best_checkpoint", "checkpoint-step000000004.h5"),
    "evaluations_without_improvement": set_state("evaluations_without_improvement", lambda n: n + 1),
}


def test_unperturbed_resume_reproduces_the_run(finished_run, tmp_path):
    assert perturb_and_resume(finished_run, tmp_path, lambda c: None) == outcome(finished_run)


@pytest.mark.parametrize("field", sorted(PERTURBATIONS))
def test_perturbed_field_changes_the_result(finished_run, tmp_path, field):
    assert perturb_and_resume(finished_run, tmp_path, PERTURBATIONS[field]) != outcome(finished_run)
