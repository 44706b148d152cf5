"""What a run directory refuses or survives: damaged checkpoints, changed data, a second trainer,
a full disk, an edited configuration, a finished run, early stopping and the time limit."""

import json
import subprocess
import sys
import time

import numpy as np
import pytest

from demo_slices import write_demo_slices
from rntn_engine.cli.app import main
from rntn_engine.run.checkpoints import load_checkpoint
from rntn_engine.run.run_config import TrainConfig
from rntn_engine.run.run_directory import list_checkpoints, lock_is_held



@pytest.fixture
def treebanks(tmp_path):
    write_demo_slices(tmp_path, 80, 20)
    return tmp_path


def train_args(tb, run_dir, epochs=2, extra=()):
    return ["train", "--train-file", str(tb / "train.trees"), "--dev-file", str(tb / "dev.trees"), "--dim", "4",
            "--epochs", str(epochs), "--batch-size", "10", "--checkpoint-every-steps", "2",
            "--keep-checkpoints", "100", "--run-dir", str(run_dir), "--no-progress", *extra]


def snapshot(run_dir):
    return {p.name: (p.read_bytes(), p.stat().st_mtime_ns) for p in sorted(run_dir.iterdir())
            if p.name not in ("run.lock",)}


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_truncated_newest_checkpoint_is_detected_and_the_previous_used(treebanks, tmp_path, capsys, seed):
    run_dir = tmp_path / "run"
    assert main(train_args(treebanks, run_dir, epochs=1)) == 0
    reference = load_checkpoint(run_dir / "model.h5").params.flat
    newest = list_checkpoints(run_dir)[-1].path
    size = newest.stat().st_size
    cut = int(np.random.default_rng(seed).integers(0, size))  # a random byte offset
    with open(newest, "r+b") as fh:
        fh.truncate(cut)
    (run_dir / "model.h5").unlink()
    # more epochs, so the run has work left after falling back
    assert main(["resume", str(run_dir), "--no-progress", "--epochs", "2"]) == 0
    out = capsys.readouterr().out
    assert f"warning: {newest}" in out and "falling back to the previous checkpoint" in out
    assert (run_dir / (newest.name + ".damaged")).exists()
    # the fallback run must equal an uninterrupted two-epoch run
    other = tmp_path / "other"
    assert main(train_args(treebanks, other, epochs=2)) == 0
    assert np.array_equal(load_checkpoint(run_dir / "model.h5").params.flat,
                          load_checkpoint(other / "model.h5").params.flat)
    assert reference.shape == load_checkpoint(run_dir / "model.h5").params.flat.shape


def test_changed_data_is_refused_unless_allowed(treebanks, tmp_path, capsys):
    run_dir = tmp_path / "run"
    assert main(train_args(treebanks, run_dir, epochs=1)) == 0
    with open(treebanks / "dev.trees", "a", encoding="utf-8") as fh:
        fh.write("(3 (2 the) (3 ferns))\n")
    assert main(["resume", str(run_dir), "--epochs", "2", "--no-progress"]) == 1
    err = capsys.readouterr().err
    assert "dev_file changed" in err and "--allow-changed-data" in err
    assert main(["resume", str(run_dir), "--epochs", "2", "--allow-changed-data", "--no-progress"]) == 0


def test_edited_configuration_is_refused_with_the_differing_keys(treebanks, tmp_path, capsys):
    run_dir = tmp_path / "run"
    assert main(train_args(treebanks, run_dir, epochs=1)) == 0
    config = (run_dir / "config.toml").read_text()
    default_lr = f"lr = {TrainConfig().lr!r}"
    assert "dim = 4" in config and default_lr in config
    (run_dir / "config.toml").write_text(config.replace("dim = 4", "dim = 8").replace(default_lr, "lr = 0.5"))
    assert main(["resume", str(run_dir), "--epochs", "2", "--no-progress"]) == 1
    err = capsys.readouterr().err
    assert "differs from the checkpoint in lr, dim" in err or "differs from the checkpoint in dim, lr" in err


def test_finished_run_resumed_again_does_nothing_and_rewrites_nothing(treebanks, tmp_path, capsys):
    run_dir = tmp_path / "run"
    assert main(train_args(treebanks, run_dir, epochs=1)) == 0
    before = snapshot(run_dir)
    time.sleep(0.01)
    assert main(["resume", str(run_dir), "--no-progress"]) == 0
    assert "nothing to do" in capsys.readouterr().out
    assert snapshot(run_dir) == before


def test_new_run_refuses_a_used_directory(treebanks, tmp_path, capsys):
    run_dir = tmp_path / "run"
    assert main(train_args(treebanks, run_dir, epochs=1)) == 0
    assert main(train_args(treebanks, run_dir, epochs=1)) == 1
    assert "already holds a run; continue it with `rntn resume" in capsys.readouterr().err
    other = tmp_path / "notes"
    other.mkdir()
    (other / "todo.txt").write_text("water the ferns")
    assert main(train_args(treebanks, other, epochs=1)) == 1
    assert "not empty and is not a run of ours" in capsys.readouterr().err
    assert (other / "todo.txt").read_text() == "water the ferns"
    assert main(["resume", str(other)]) == 1


def test_disk_full_keeps_the_previous_checkpoint(treebanks, tmp_path, capsys, monkeypatch):
    run_dir = tmp_path / "run"
    monkeypatch.setenv("RNTN_FAULT_POINT", "mid_write")
    monkeypatch.setenv("RNTN_FAULT_AFTER", "3")
    monkeypatch.setenv("RNTN_FAULT_ACTION", "enospc")
    assert main(train_args(treebanks, run_dir, epochs=1)) == 1
    err = capsys.readouterr().err
    assert "No space left on device" in err and "is intact" in err and "rntn resume" in err
    kept = list_checkpoints(run_dir)
    assert [c.step for c in kept] == [0, 2]
    for c in kept:
        load_checkpoint(c.path)
    assert not [p for p in run_dir.iterdir() if p.name.endswith(".tmp")]
    monkeypatch.delenv("RNTN_FAULT_POINT")
    assert main(["resume", str(run_dir), "--no-progress"]) == 0


def test_second_trainer_refused_while_first_lives_and_lock_taken_over_after_kill(treebanks, tmp_path, capsys):
    run_dir = tmp_path / "run"
    args = train_args(treebanks, run_dir, epochs=200)
    proc = subprocess.Popen([sys.executable, "-m", "rntn_engine.cli.app", *args],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        deadline = time.time() + 60
        while time.time() < deadline and not list_checkpoints(run_dir):
            time.sleep(0.02)
        holder = lock_is_held(run_dir)
        assert holder is not None and holder["pid"] == proc.pid
        assert main(["resume", str(run_dir), "--no-progress"]) == 1
        assert f"another trainer is running in this run directory (pid {proc.pid}" in capsys.readouterr().err
    finally:
        proc.kill()
        proc.wait()
    assert lock_is_held(run_dir) is None  # the kernel released the dead process's lock
    assert main(["resume", str(run_dir), "--epochs", "1", "--no-progress"]) == 0


def test_time_limit_stops_cleanly_and_resume_finishes(treebanks, tmp_path, capsys):
    run_dir = tmp_path / "run"
    assert main(train_args(treebanks, run_dir, epochs=2, extra=("--time-limit", "0.001s"))) == 75
    out = capsys.readouterr().out
    assert "stopped by time limit" in out and "rntn resume" in out
    # the stored budget applies again to every resumed session ...
    assert main(["resume", str(run_dir), "--no-progress"]) == 75
    # ... until a resume sets another one (0: none)
    assert main(["resume", str(run_dir), "--no-progress", "--time-limit", "0"]) == 0
    other = tmp_path / "other"
    assert main(train_args(treebanks, other, epochs=2)) == 0
    assert np.array_equal(load_checkpoint(run_dir / "model.h5").params.flat,
                          load_checkpoint(other / "model.h5").params.flat)


def test_early_stopping_is_recorded_and_survives_resume(treebanks, tmp_path, capsys):
    run_dir = tmp_path / "run"
    # lr so small that dev scores cannot improve after the first evaluation
    code = main(train_args(treebanks, run_dir, epochs=50, extra=("--patience", "2", "--lr", "1e-9")))
    assert code == 0
    state = load_checkpoint(list_checkpoints(run_dir)[-1].path).state
    assert state["finish_reason"] == "early stopping" and state["epoch"] == 3
    assert state["evaluations_without_improvement"] == 2
    assert main(["resume", str(run_dir), "--epochs", "60", "--no-progress"]) == 0
    assert "nothing to do" in capsys.readouterr().out


def test_killed_before_first_checkpoint_starts_from_the_beginning(treebanks, tmp_path, capsys):
    run_dir = tmp_path / "run"
    run_dir.mkdir()
    assert main(train_args(treebanks, run_dir, epochs=1, extra=("--print-config",))) == 0
    (run_dir / "config.toml").write_text(capsys.readouterr().out)
    assert main(["resume", str(run_dir), "--no-progress"]) == 0
    assert "starting the run from the beginning" in capsys.readouterr().out
    other = tmp_path / "other"
    assert main(train_args(treebanks, other, epochs=1)) == 0
    assert np.array_equal(load_checkpoint(run_dir / "model.h5").params.flat,
                          load_checkpoint(other / "model.h5").params.flat)


def test_metrics_log_has_one_line_per_evaluation_after_interruptions(treebanks, tmp_path):
    run_dir = tmp_path / "run"
    assert main(train_args(treebanks, run_dir, epochs=3, extra=("--time-limit", "0.001s"))) == 75
    # the time limit counts from the start of each command, data loading included
    for _ in range(40):
        if main(["resume", str(run_dir), "--no-progress", "--time-limit", "0.3s"]) == 0:
            break
    lines = [json.loads(x) for x in (run_dir / "metrics.jsonl").read_text().splitlines()]
    assert [r["epoch"] for r in lines] == [1, 2, 3]
    assert {"step", "epoch", "train_loss", "dev_fine_all", "dev_fine_root", "wall_seconds",
            "nodes_per_second"} <= set(lines[0])
