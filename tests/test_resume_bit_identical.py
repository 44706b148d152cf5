"""Interrupted runs resume bit-identically: SIGKILL at checkpoint-write points and at random
moments, SIGTERM, resumes from every checkpoint, other thread counts -- each ends with
parameters and AdaGrad sums array-equal to one uninterrupted run.

Tiny settings (120 demo trees, d = 4, 10-tree minibatches) keep every process short.
"""

import os
import shutil
import signal
import subprocess
import sys
import time
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
            "--keep-checkpoints", "2", "--run-dir", str(run_dir), "--no-progress", *extra]


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
    for _ in range(limit):
        done = run_cli(["resume", str(run_dir), "--no-progress"], env_extra)
        if done.returncode == 0:
            return
        assert done.returncode in (-signal.SIGKILL, 1), done.stderr
    raise AssertionError("run did not finish")


@pytest.mark.parametrize("point", ["before_open", "mid_write", "before_fsync", "before_rename", "after_rename",
                                   "mid_prune"])
def test_sigkill_at_each_checkpoint_write_point(treebanks, reference, tmp_path, point):
    fault = {"RNTN_FAULT_POINT": point, "RNTN_FAULT_AFTER": "4", "RNTN_FAULT_ACTION": "kill"}
    run_dir = tmp_path / "run"
    first = run_cli(train_args(treebanks, run_dir), fault)
    assert first.returncode == -signal.SIGKILL
    resume_until_done(run_dir, fault)  # the same fault strikes again in every process until the run ends
    assert_same_as_reference(run_dir, reference)


def test_sigterm_and_random_sigkills_then_resume(treebanks, reference, tmp_path):
    run_dir = tmp_path / "run"
    rng = np.random.default_rng(7)
    args = train_args(treebanks, run_dir)
    env = dict(os.environ)
    proc = subprocess.Popen([sys.executable, "-m", "rntn_engine.cli.app", *args], env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    # SIGTERM once the run has taken a few steps: clean stop with a checkpoint, exit 75
    deadline = time.time() + 60
    while time.time() < deadline and proc.poll() is None:
        if list_checkpoints(run_dir) and list_checkpoints(run_dir)[-1].step >= 3:
            break
        time.sleep(0.02)
    proc.send_signal(signal.SIGTERM)
    out, err = proc.communicate(timeout=60)
    assert proc.returncode in (EXIT_STOPPED, 0), err
    if proc.returncode == EXIT_STOPPED:
        assert "rntn resume" in out
    # then SIGKILL resumed processes at pseudo-random moments
    for _ in range(3):
        proc = subprocess.Popen([sys.executable, "-m", "rntn_engine.cli.app", "resume", str(run_dir),
                                 "--no-progress"], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        time.sleep(float(rng.uniform(1.0, 2.5)))
        proc.kill()
        proc.wait()
    resume_until_done(run_dir)
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


def test_sigterm_during_a_checkpoint_write_then_resume(treebanks, reference, tmp_path):
    # SIGTERM arrives while a checkpoint is being written: that write completes, the run stops with 75
    fault = {"RNTN_FAULT_POINT": "mid_write", "RNTN_FAULT_AFTER": "3", "RNTN_FAULT_ACTION": "term"}
    run_dir = tmp_path / "run"
    first = run_cli(train_args(treebanks, run_dir), fault)
    assert first.returncode == EXIT_STOPPED, first.stderr
    assert "stopped by SIGTERM" in first.stdout
    resume_until_done(run_dir)
    assert_same_as_reference(run_dir, reference)


def test_second_sigint_exits_at_once(treebanks, tmp_path):
    run_dir = tmp_path / "run"
    proc = subprocess.Popen([sys.executable, "-m", "rntn_engine.cli.app",
                             *train_args(treebanks, run_dir, epochs=100000)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    deadline = time.time() + 60
    while time.time() < deadline and len(list_checkpoints(run_dir)) < 2:
        time.sleep(0.02)
    proc.send_signal(signal.SIGINT)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode in (130, EXIT_STOPPED)  # 75 only if the first stop won the race
    if proc.returncode == 130:
        assert "second interrupt" in err
    for c in list_checkpoints(run_dir):
        read_checkpoint(c.path)
