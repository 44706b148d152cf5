"""Every field a checkpoint saves decides something later: change one field of a mid-run
checkpoint, resume, and an outcome of the resumed run OTHER than that field must change.

The run: 60 training and 40 dev trees (demo slices, words capitalised so that lowercasing
matters), RNTN d = 4, float64, 10-tree minibatches (6 steps per epoch), 10 epochs, patience 3,
best checkpoint by dev root accuracy, a checkpoint every 4 steps, 2 kept. A fault hook SIGTERM
stops it after step 28 (epoch 5, 40 trees in); every test copies that stopped run directory,
changes one field of its newest checkpoint (step 28) and resumes it. In the unchanged run
dev root accuracy is best after epoch 3 (step 18) and no later epoch beats it, so early
stopping ends the run after epoch 6 (test_the_reference_run_is_the_scenario_described checks it).
Every setting that changes the numbers is given on the command line, so a change of defaults
leaves the scenario as it is.

Outcomes compared (none of them is the changed field itself):
    train losses     train_loss (and train_l2) of the evaluation records written after the change
    schedule         (epoch, step) of the records written after the change: how far the run went
    kept files       the checkpoint files left in the run directory at the end
    metrics log      metrics.jsonl at the end, timing columns left out
    wall clock       whether the later records' wall_seconds include the saved training time
    resume exit      the exit code of `rntn resume`

Saved but deciding nothing (kept on purpose, and why):
    versions                       which library versions wrote the file: provenance for a person
                                   reading the checkpoint (`rntn inspect`), never read by training
    vocabulary_options.min_count   how the vocabulary was built; once its word list is saved the
                                   count decides nothing, it only describes the list
"""

from __future__ import annotations

import dataclasses
import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from demo_slices import write_demo_slices
from rntn_engine.cli.app import main
from rntn_engine.data.checkpoint_file import read_checkpoint
from rntn_engine.data.vocabulary import Vocabulary
from rntn_engine.run.checkpoints import load_checkpoint, save_checkpoint
from rntn_engine.run.run_directory import METRICS_FILE, checkpoint_name, list_checkpoints
from rntn_engine.run.run_state import RunState

TIMING = ("wall_seconds", "nodes_per_second")
STOP_STEP = 28  # epoch 5 (index 4), 40 of 60 trees done
FINAL_STEP = 36  # the reference run stops early after epoch 6


def train_args(root, run_dir):
    return ["train", "--train-file", str(root / "train.trees"), "--dev-file", str(root / "dev.trees"),
            "--dim", "4", "--dtype", "float64", "--lr", "0.05", "--epochs", "10", "--batch-size", "10",
            "--patience", "3", "--best-metric", "dev_fine_root", "--checkpoint-every-steps", "4",
            "--keep-checkpoints", "2", "--final-model", "last", "--l2-words", "1e-4", "--l2-compose", "1e-3", "--l2-tensor", "1e-3",
            "--l2-classifier", "1e-4", "--grad-chunks", "2", "--adagrad-eps", "1e-6", "--seed", "0",
            "--run-dir", str(run_dir), "--no-progress"]


@pytest.fixture(scope="module")
def data(tmp_path_factory):
    root = tmp_path_factory.mktemp("fields-data")
    write_demo_slices(root, 60, 40)
    for name in ("train.trees", "dev.trees"):  # capitalise every word: "(2 the)" -> "(2 The)"
        path = root / name
        path.write_text(re.sub(r" ([a-z])", lambda m: " " + m.group(1).upper(), path.read_text("utf-8")), "utf-8")
    return root


@pytest.fixture(scope="module")
def stopped(data, tmp_path_factory):
    """A run directory exactly as left by a SIGTERM after step 28 (fault hook, exit 75)."""
    run_dir = tmp_path_factory.mktemp("fields-stopped") / "run"
    env = {k: v for k, v in os.environ.items() if not k.startswith("RNTN_FAULT_")}
    env.update(RNTN_FAULT_POINT="step", RNTN_FAULT_AFTER=str(STOP_STEP), RNTN_FAULT_ACTION="term")
    done = subprocess.run([sys.executable, "-m", "rntn_engine.cli.app", *train_args(data, run_dir)], env=env,
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 75, done.stderr
    assert list_checkpoints(run_dir)[-1].step == STOP_STEP
    return run_dir


def perturb_and_resume(source_dir: Path, tmp_path: Path, change, extra=()) -> tuple[int, Path]:
    """Copy ``source_dir``, apply ``change`` to its newest checkpoint, `rntn resume` it: (exit code, run dir)."""
    run_dir = tmp_path / "run"
    shutil.copytree(source_dir, run_dir)
    newest = list_checkpoints(run_dir)[-1].path
    c = load_checkpoint(newest)
    change(c)
    save_checkpoint(newest, c.params, c.vocabulary, c.config, c.adagrad_sums, c.state, c.metrics, c.data_hashes)
    return main(["resume", str(run_dir), "--no-progress", *extra]), run_dir


@pytest.fixture(scope="module")
def reference(stopped, tmp_path_factory):
    code, run_dir = perturb_and_resume(stopped, tmp_path_factory.mktemp("fields-reference"), lambda c: None)
    assert code == 0
    return run_dir


@pytest.fixture(scope="module")
def finished_reference(reference, tmp_path_factory):
    """The finished reference run, resumed unchanged with --epochs 12 (early stopping: nothing to do)."""
    code, run_dir = perturb_and_resume(reference, tmp_path_factory.mktemp("fields-finished"), lambda c: None,
                                       ("--epochs", "12"))
    assert code == 0
    return run_dir


# --- outcomes -----------------------------------------------------------------------------------------

def later_records(run_dir: Path, after_step: int) -> list[dict]:
    return [m for m in load_checkpoint(run_dir / "model.h5").metrics if m["step"] > after_step]


def train_losses(code, run_dir, after_step):
    return [m["train_loss"] for m in later_records(run_dir, after_step)]


def train_l2s(code, run_dir, after_step):
    return [m["train_l2"] for m in later_records(run_dir, after_step)]


def schedule(code, run_dir, after_step):
    return [(m["epoch"], m["step"]) for m in later_records(run_dir, after_step)]


def kept_files(code, run_dir, after_step):
    return [c.path.name for c in list_checkpoints(run_dir)]


def metrics_log(code, run_dir, after_step):
    lines = (run_dir / METRICS_FILE).read_text("utf-8").splitlines()
    return [{k: v for k, v in json.loads(line).items() if k not in TIMING} for line in lines]


def wall_clock(code, run_dir, after_step):
    return [m["wall_seconds"] >= 1000 for m in later_records(run_dir, after_step)]


def resume_exit(code, run_dir, after_step):
    return code


# --- perturbations: field -> (change, outcome that must differ, run to start from, resume options) ----

def set_state(key, value):
    def change(c):
        c.state[key] = value(c.state[key]) if callable(value) else value
    return change


def swap_two_words(c):
    words = list(c.vocabulary.words)
    words[1], words[2] = words[2], words[1]
    c.vocabulary = Vocabulary(tuple(words), c.vocabulary.lowercase, c.vocabulary.min_count)


def lowercase_lookups(c):
    c.vocabulary = Vocabulary(c.vocabulary.words, True, c.vocabulary.min_count)


def drop_patience(c):
    c.config = dataclasses.replace(c.config, patience=0)  # `patience` may differ from config.toml on resume


def corrupt_train_hash(c):
    c.data_hashes["train_file"] = "0" * 64


PERTURBATIONS = {
    "parameters": (lambda c: c.params.W.__setitem__((0, 0), c.params.W[0, 0] + 0.01), train_losses, "stopped", ()),
    "adagrad_sums": (lambda c: c.adagrad_sums.W.__imul__(2.0), train_losses, "stopped", ()),
    "vocabulary": (swap_two_words, train_losses, "stopped", ()),
    "vocabulary_options.lowercase": (lowercase_lookups, train_losses, "stopped", ()),
    "config": (drop_patience, schedule, "stopped", ()),
    "data_hashes": (corrupt_train_hash, resume_exit, "stopped", ()),
    # metrics decide no number of training; the run's log (and `rntn report`, `rntn status`) is
    # rebuilt from them on resume, dropping lines of work lost in a crash
    "metrics": (lambda c: c.metrics.pop(), metrics_log, "stopped", ()),
    "state.step": (set_state("step", lambda s: s + 1), schedule, "stopped", ()),
    "state.epoch": (set_state("epoch", lambda e: e + 1), schedule, "stopped", ()),
    "state.position": (set_state("position", lambda p: p + 10), train_losses, "stopped", ()),
    "state.epoch_loss": (set_state("epoch_loss", lambda x: x + 1.0), train_losses, "stopped", ()),
    "state.epoch_labelled_nodes": (set_state("epoch_labelled_nodes", lambda n: n + 7), train_losses, "stopped", ()),
    "state.epoch_l2": (set_state("epoch_l2", lambda x: x + 1.0), train_l2s, "stopped", ()),
    # 0.0: epoch 5's dev root accuracy (0.225) becomes an improvement, early stopping waits longer
    "state.best_value": (set_state("best_value", 0.0), schedule, "stopped", ()),
    # pruning keeps step 28 instead of the real best, step 18
    "state.best_checkpoint": (set_state("best_checkpoint", checkpoint_name(28)), kept_files, "stopped", ()),
    # one evaluation without improvement more: early stopping one epoch sooner
    "state.evaluations_without_improvement": (set_state("evaluations_without_improvement", lambda n: n + 1),
                                              schedule, "stopped", ()),
    # the run counts as finished: the resume trains nothing
    "state.finished": (set_state("finished", True), schedule, "stopped", ()),
    # on the finished run (early stopping): "all epochs done" lets --epochs 12 train on
    "state.finish_reason": (set_state("finish_reason", "all epochs done"), schedule, "finished", ("--epochs", "12")),
    # the resolved class weights (empty: all 1) are the resume's weights, not the setting
    "state.class_weights": (set_state("class_weights", [1.0, 3.0, 1.0, 1.0, 1.0]), train_losses, "stopped", ()),
    # decides no number of training; the later records' wall_seconds count from it
    "state.training_seconds": (set_state("training_seconds", lambda s: s + 1000.0), wall_clock, "stopped", ()),
}

DECIDES_NOTHING = ("versions", "vocabulary_options.min_count")  # see the module docstring


def test_every_saved_field_is_perturbed_or_documented(reference):
    covered = set(PERTURBATIONS) | set(DECIDES_NOTHING)
    assert {f"state.{f.name}" for f in dataclasses.fields(RunState)} <= covered
    content = read_checkpoint(reference / "model.h5")
    saved = {key for key in content.records if key not in ("state", "vocabulary_options")}
    saved |= {f"state.{key}" for key in content.records["state"]}
    saved |= {f"vocabulary_options.{key}" for key in content.records["vocabulary_options"]}
    saved |= {key.split("/")[0] for key in content.arrays} | set(content.words)
    assert saved == covered


def test_the_reference_run_is_the_scenario_described(stopped, reference):
    # If this fails (say after a change to the numerics), the perturbations below may no longer
    # hit: pick a new STOP_STEP / patience from the printed history and update the docstring.
    at_stop = load_checkpoint(stopped / checkpoint_name(STOP_STEP)).state
    assert (at_stop["epoch"], at_stop["position"], at_stop["evaluations_without_improvement"]) == (4, 40, 1)
    assert at_stop["best_checkpoint"] == checkpoint_name(18)
    model = load_checkpoint(reference / "model.h5")
    history = [(m["epoch"], m["step"], round(m["dev_fine_root"], 4)) for m in model.metrics]
    assert (model.state["finish_reason"], model.state["evaluations_without_improvement"]) == ("early stopping", 3), \
        history
    assert model.state["best_checkpoint"] == checkpoint_name(18), history
    assert [h[:2] for h in history] == [(e, 6 * e) for e in range(1, 7)], history
    assert history[4][2] > 0.0, history  # so best_value 0.0 makes epoch 5 an improvement
    assert kept_files(0, reference, STOP_STEP) == [checkpoint_name(s) for s in (18, 32, 36)]


def test_unperturbed_resume_equals_one_uninterrupted_run(data, reference, tmp_path):
    whole = tmp_path / "whole"
    assert main(train_args(data, whole)) == 0
    a, b = load_checkpoint(reference / "model.h5"), load_checkpoint(whole / "model.h5")
    assert np.array_equal(a.params.flat, b.params.flat) and np.array_equal(a.adagrad_sums.flat, b.adagrad_sums.flat)
    for outcome in (train_losses, schedule, kept_files, metrics_log, wall_clock):
        assert outcome(0, reference, STOP_STEP) == outcome(0, whole, STOP_STEP), outcome.__name__


@pytest.mark.parametrize("field", sorted(PERTURBATIONS))
def test_perturbed_field_changes_a_later_outcome(stopped, reference, finished_reference, tmp_path, field):
    change, outcome, source, extra = PERTURBATIONS[field]
    start, base, after = {"stopped": (stopped, reference, STOP_STEP),
                          "finished": (reference, finished_reference, FINAL_STEP)}[source]
    code, run_dir = perturb_and_resume(start, tmp_path, change, extra)
    assert outcome(code, run_dir, after) != outcome(0, base, after), field
