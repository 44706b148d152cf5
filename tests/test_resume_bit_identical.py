"""Interrupted runs resume bit-identically: SIGKILL at every checkpoint-write point and after a
given training step, SIGTERM / SIGINT after a given step and during a write, a second SIGINT
during the stop checkpoint, resumes from every checkpoint, other thread counts -- each ends
with parameters and AdaGrad sums array-equal to one uninterrupted run.

Every fault is placed deterministically through the test-only fault hook
(run/fault_injection.py: RNTN_FAULT_POINT / _AFTER / _ACTION), and every test expects one
exit code: no timing, no "either outcome".

Tiny settings (120 demo trees, d = 4, 10-tree minibatches) keep every process short.
"""

import os
import shutil
import signal
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from demo_slices import write_demo_slices
from rntn_engine.cli.app import main
from rntn_engine.data.atomic_files import is_our_temp_file
from rntn_engine.data.checkpoint_file import read_checkpoint
from rntn_engine.run.checkpoints import load_checkpoint
from rntn_engine.run.run_directory import list_checkpoints

EXIT_STOPPED = 75


@pytest.fixture(scope="module")
def treebanks(tmp_path_factory):
    root = tmp_path_factory.mktemp("resume-data")
    write_demo_slices(root, 120, 30)
    return root


def train_args(treebanks, run_dir, epochs=4, extra=()):
    return ["train", "--train-file", str(treebanks / "train.trees"), "--dev-file", str(treebanks / "dev.trees"),
            "--dim", "4", "--epochs", str(epochs), "--batch-size", "10", "--checkpoint-every-steps", "3",
            "--keep-checkpoints", "2", "--final-model", "last", "--run-dir", str(run_dir), "--no-progress", *extra]


def run_cli(args, env_extra=None, **kw):
    env = dict(os.environ, **(env_extra or {}))
    for key in ("RNTN_FAULT_POINT", "RNTN_FAULT_AFTER", "RNTN_FAULT_ACTION"):
        if not env_extra or key not in env_extra:
            env.pop(key, None)
    return subprocess.run([sys.executable, "-m", "rntn_engine.cli.app", *args], env=env, capture_output=True,
                          text=True, **kw)


def final_arrays(run_dir):
    ckpt = load_checkpoint(Path(run_dir) / "model.h5")
    return ckpt.params.flat, ckpt.adagrad_sums.flat, ckpt.metrics


@pytest.fixture(scope="module")
def reference(treebanks, tmp_path_factory):
    run_dir = tmp_path_factory.mktemp("reference") / "run"
    assert main(train_args(treebanks, run_dir)) == 0
    return final_arrays(run_dir)


def assert_same_as_reference(run_dir, reference):
    params, sums, metrics = final_arrays(run_dir)
    assert np.array_equal(params, reference[0])
    assert np.array_equal(sums, reference[1])
    strip = lambda ms: [{k: v for k, v in m.items() if k not in ("wall_seconds", "nodes_per_second")} for m in ms]
    assert strip(metrics) == strip(reference[2])
    for c in list_checkpoints(run_dir):
        read_checkpoint(c.path)  # every committed file verifies
    assert not [p for p in Path(run_dir).iterdir() if is_our_temp_file(p)]


def resume_until_done(run_dir, env_extra=None, limit=25):
    """Resume until exit 0; only a SIGKILL (the injected fault) may end a process otherwise."""
    for _ in range(limit):
        done = run_cli(["resume", str(run_dir), "--no-progress"], env_extra)
        if done.returncode == 0:
            return
        assert done.returncode == -signal.SIGKILL, (done.returncode, done.stderr)
    raise AssertionError("run did not finish")


def newest_step(run_dir):
    return list_checkpoints(run_dir)[-1].step


@pytest.mark.parametrize("point", ["before_open", "mid_write", "before_fsync", "before_rename", "after_rename",
                                   "mid_prune"])
def test_sigkill_at_each_checkpoint_write_point(treebanks, reference, tmp_path, point):
    fault = {"RNTN_FAULT_POINT": point, "RNTN_FAULT_AFTER": "4", "RNTN_FAULT_ACTION": "kill"}
    run_dir = tmp_path / "run"
    first = run_cli(train_args(treebanks, run_dir), fault)
    assert first.returncode == -signal.SIGKILL
    resume_until_done(run_dir, fault)  # the same fault strikes again in every process until the run ends
    assert_same_as_reference(run_dir, reference)


@pytest.mark.parametrize("action, name", [("term", "SIGTERM"), ("int", "SIGINT")])
def test_signal_at_step_4_stops_with_75_and_a_checkpoint_of_step_4(treebanks, reference, tmp_path, action, name):
    # the signal lands right after step 4's update (checkpoints every 3 steps: 0 and 3 exist);
    # the loop stops at the next minibatch boundary and saves step 4 before exiting 75
    fault = {"RNTN_FAULT_POINT": "step", "RNTN_FAULT_AFTER": "4", "RNTN_FAULT_ACTION": action}
    run_dir = tmp_path / "run"
    first = run_cli(train_args(treebanks, run_dir), fault)
    assert first.returncode == EXIT_STOPPED, first.stderr
    assert f"stopped by {name} at step 4 with a checkpoint" in first.stdout
    assert [c.step for c in list_checkpoints(run_dir)] == [3, 4]  # --keep-checkpoints 2
    assert load_checkpoint(list_checkpoints(run_dir)[-1].path).state["position"] == 40
    second = run_cli(["resume", str(run_dir), "--no-progress"])
    assert second.returncode == 0, second.stderr
    assert "from step 4 (epoch 1, tree 40 of 120)" in second.stdout
    assert_same_as_reference(run_dir, reference)


def test_sigkill_at_step_11_of_every_process_then_resume(treebanks, reference, tmp_path):
    # 120 trees / 10 per step = 12 steps per epoch, 48 in all; checkpoints every 3 steps and at
    # each epoch end. Every process is killed right after its 11th update, before that step's
    # checkpoint: it loses the steps after its newest checkpoint, and the next process resumes
    # there. Expected kills: steps 11, 20, 29, 38, 47 (newest checkpoints 9, 18, 27, 36, 45);
    # the sixth process, from 45, has only 3 steps left and finishes.
    fault = {"RNTN_FAULT_POINT": "step", "RNTN_FAULT_AFTER": "11", "RNTN_FAULT_ACTION": "kill"}
    run_dir = tmp_path / "run"
    done = run_cli(train_args(treebanks, run_dir), fault)
    newest = []
    while done.returncode == -signal.SIGKILL and len(newest) < 10:
        newest.append(newest_step(run_dir))
        done = run_cli(["resume", str(run_dir), "--no-progress"], fault)
    assert done.returncode == 0, done.stderr
    assert newest == [9, 18, 27, 36, 45]
    assert_same_as_reference(run_dir, reference)


def test_sigterm_during_a_checkpoint_write_then_resume(treebanks, reference, tmp_path):
    # SIGTERM arrives in the middle of the 3rd checkpoint write (steps 0, 3, 6): that write
    # completes, the loop stops at the next boundary with nothing new to save, exit 75
    fault = {"RNTN_FAULT_POINT": "mid_write", "RNTN_FAULT_AFTER": "3", "RNTN_FAULT_ACTION": "term"}
    run_dir = tmp_path / "run"
    first = run_cli(train_args(treebanks, run_dir), fault)
    assert first.returncode == EXIT_STOPPED, first.stderr
    assert "stopped by SIGTERM at step 6 with a checkpoint" in first.stdout
    assert [c.step for c in list_checkpoints(run_dir)] == [3, 6]
    second = run_cli(["resume", str(run_dir), "--no-progress"])
    assert second.returncode == 0, second.stderr
    assert_same_as_reference(run_dir, reference)


def test_second_sigint_during_the_stop_save_exits_130_and_keeps_the_last_checkpoint(treebanks, reference, tmp_path):
    # 1st SIGINT right after step 4's update: the loop starts the stop checkpoint of step 4, which is
    # the 3rd write (steps 0, 3, then 4); the 2nd SIGINT lands in the middle of that write -> exit 130
    # at once: the half-written file stays a temporary, the committed checkpoints are untouched
    fault = {"RNTN_FAULT_POINT": "step,mid_write", "RNTN_FAULT_AFTER": "4,3", "RNTN_FAULT_ACTION": "int"}
    run_dir = tmp_path / "run"
    first = run_cli(train_args(treebanks, run_dir), fault)
    assert first.returncode == 130, (first.returncode, first.stderr)
    assert "second interrupt" in first.stderr
    assert [c.step for c in list_checkpoints(run_dir)] == [0, 3]
    leftovers = [p.name for p in Path(run_dir).iterdir() if is_our_temp_file(p)]
    assert len(leftovers) == 1 and "checkpoint-step000000004.h5" in leftovers[0]
    for c in list_checkpoints(run_dir):
        read_checkpoint(c.path)
    second = run_cli(["resume", str(run_dir), "--no-progress"])
    assert second.returncode == 0, second.stderr
    assert "removed the leftover of an interrupted write" in second.stdout
    assert_same_as_reference(run_dir, reference)


def test_resume_from_every_checkpoint_and_with_other_thread_counts(treebanks, reference, tmp_path):
    full = tmp_path / "full"
    assert main(train_args(treebanks, full, extra=("--keep-checkpoints", "1000"))) == 0
    checkpoints = list_checkpoints(full)
    assert len(checkpoints) > 10
    for i, c in enumerate(checkpoints[:-1]):
        run_dir = tmp_path / f"from-{c.step}"
        run_dir.mkdir()
        shutil.copy(full / "config.toml", run_dir / "config.toml")
        shutil.copy(c.path, run_dir / c.path.name)
        threads = ["--threads", "2"] if i % 2 else []
        assert main(["resume", str(run_dir), "--no-progress", *threads]) == 0
        params, sums, _ = final_arrays(run_dir)
        assert np.array_equal(params, reference[0]) and np.array_equal(sums, reference[1]), c.step


