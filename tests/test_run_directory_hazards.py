"""Run directories under unlucky or hostile conditions, and every stop signal.

Symbolic links planted as run files, an unreadable config.toml, a resume from another
working directory, a moved data file, a read-only run directory, a start that fails before
its first checkpoint; SIGHUP, SIGTERM while data loads and while the final model is written.
"""

import os
import shutil
import signal
import subprocess
import sys

import pytest

from demo_slices import write_demo_slices
from rntn_engine.cli.app import main
from rntn_engine.run.checkpoints import load_checkpoint


@pytest.fixture
def treebanks(tmp_path):
    write_demo_slices(tmp_path, 40, 10)
    return tmp_path


def train_args(tb, run_dir, *extra, epochs=1):
    return ["train", "--train-file", str(tb / "train.trees"), "--dev-file", str(tb / "dev.trees"), "--dim", "3",
            "--epochs", str(epochs), "--batch-size", "10", "--run-dir", str(run_dir), "--no-progress", *extra]


def run_cli(*args, env=None, cwd=None):
    return subprocess.run([sys.executable, "-m", "rntn_engine.cli.app", *args], capture_output=True, text=True,
                          env=env, cwd=cwd)


@pytest.mark.parametrize("name", ["config.toml", "run.lock"])
def test_a_symlinked_run_file_is_refused_and_its_target_untouched(treebanks, tmp_path, capsys, name):
    run_dir = tmp_path / "run"
    assert main(train_args(treebanks, run_dir, "--time-limit", "0.001s")) == 75
    target = tmp_path / "precious.txt"
    target.write_text("someone else's file\n")
    (run_dir / name).unlink()
    (run_dir / name).symlink_to(target)
    if name == "config.toml":  # the stored configuration is taken from the checkpoint; the link is not followed
        code = main(["resume", str(run_dir), "--no-progress", "--epochs", "2"])
    else:
        code = main(["resume", str(run_dir), "--no-progress"])
    err = capsys.readouterr().err
    assert code == 1 and "symbolic link" in err and len(err.strip().splitlines()) == 1, err
    assert target.read_text() == "someone else's file\n"


def test_an_unreadable_config_falls_back_to_the_checkpoint(treebanks, tmp_path, capsys):
    run_dir = tmp_path / "run"
    assert main(train_args(treebanks, run_dir, "--time-limit", "0.001s")) == 75
    (run_dir / "config.toml").write_bytes(b"[train\x00\xff garbage")
    assert main(["resume", str(run_dir), "--no-progress", "--time-limit", "0"]) == 0
    assert "[train]" in (run_dir / "config.toml").read_text()  # rewritten from the checkpoint's configuration
    assert load_checkpoint(run_dir / "model.h5").state["finished"]


def test_config_is_rewritten_only_when_it_changes(treebanks, tmp_path):
    run_dir = tmp_path / "run"
    assert main(train_args(treebanks, run_dir, "--time-limit", "0.001s")) == 75
    config = run_dir / "config.toml"
    before = config.stat().st_ino, config.stat().st_mtime_ns
    assert main(["resume", str(run_dir), "--no-progress", "--time-limit", "0.001s"]) == 75  # same settings
    assert (config.stat().st_ino, config.stat().st_mtime_ns) == before


def test_resume_from_another_working_directory_and_a_moved_data_file(treebanks, tmp_path):
    data = tmp_path / "data"
    data.mkdir()
    for name in ("train.trees", "dev.trees"):
        shutil.copy(treebanks / name, data / name)
    # started with relative paths from tmp_path
    args = ["train", "--train-file", "data/train.trees", "--dev-file", "data/dev.trees", "--dim", "3", "--epochs",
            "1", "--batch-size", "10", "--run-dir", "run", "--no-progress", "--time-limit", "0.001s"]
    assert run_cli(*args, cwd=tmp_path).returncode == 75
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    (data / "train.trees").rename(data / "moved.trees")
    done = run_cli("resume", str(tmp_path / "run"), "--no-progress", cwd=elsewhere)
    assert done.returncode == 1 and "Traceback" not in done.stderr, done.stderr
    assert "train.trees" in done.stderr and len(done.stderr.strip().splitlines()) == 1


def test_a_read_only_run_directory_gives_one_line(treebanks, tmp_path):
    if not shutil.which("unshare"):
        pytest.skip("needs unshare for a read-only bind mount (root bypasses file permissions)")
    run_dir = tmp_path / "run"
    assert main(train_args(treebanks, run_dir, "--time-limit", "0.001s")) == 75
    script = (f"mount --bind {run_dir} {run_dir} && mount -o remount,ro,bind {run_dir} || exit 99\n"
              f"{sys.executable} -m rntn_engine.cli.app resume {run_dir} --no-progress")
    done = subprocess.run(["unshare", "-m", "sh", "-c", script], capture_output=True, text=True)
    if done.returncode == 99:
        pytest.skip("bind mounts are not permitted here")
    assert done.returncode == 1 and "Traceback" not in done.stderr, done.stderr
    assert "Read-only file system" in done.stderr and len(done.stderr.strip().splitlines()) == 1


def test_a_failed_start_leaves_nothing_the_same_command_would_refuse(treebanks, tmp_path, capsys):
    bad = tmp_path / "bad.vec"
    bad.write_text("3 4\nfern 0.1 0.2\n")  # header says 4 values, the row has 2
    run_dir = tmp_path / "run"
    args = train_args(treebanks, run_dir, "--vectors", str(bad), "--epochs", "1")
    assert main([a for a in args if a not in ("--dim", "3")]) == 1
    assert "bad.vec" in capsys.readouterr().err
    assert not run_dir.exists()
    bad.write_text("2 3\nfern 0.1 0.2 0.3\nmoss 0.3 0.2 0.1\n")  # fixed: the same command now runs
    assert main([a for a in args if a not in ("--dim", "3")]) == 0


def start_and_signal(args, sig, wait_for, env=None):
    proc = subprocess.Popen([sys.executable, "-m", "rntn_engine.cli.app", *args], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=env)
    for line in proc.stdout:
        if wait_for in line:
            proc.send_signal(sig)
            break
    out, err = proc.communicate(timeout=120)
    return proc.returncode, out, err


def test_sighup_stops_like_sigterm_with_a_checkpoint(treebanks, tmp_path):
    run_dir = tmp_path / "run"
    code, out, err = start_and_signal(train_args(treebanks, run_dir, epochs=200), signal.SIGHUP, "epoch   1")
    assert code == 75, err
    assert "stopped by SIGHUP" in out
    assert main(["resume", str(run_dir), "--no-progress", "--epochs", "2"]) == 0


def test_sigterm_while_the_data_is_read_stops_cleanly(treebanks, tmp_path):
    run_dir = tmp_path / "run"
    env = dict(os.environ, RNTN_FAULT_POINT="data_loaded", RNTN_FAULT_ACTION="term")  # SIGTERM right then
    done = subprocess.run([sys.executable, "-m", "rntn_engine.cli.app", *train_args(treebanks, run_dir)],
                          capture_output=True, text=True, env=env)
    assert done.returncode == 75, done.stderr
    assert "stopped by SIGTERM at step 0" in done.stdout
    assert main(["resume", str(run_dir), "--no-progress"]) == 0


def test_sigterm_while_the_final_model_is_written_finishes_the_run(treebanks, tmp_path):
    run_dir = tmp_path / "run"
    env = dict(os.environ, RNTN_FAULT_POINT="final_model", RNTN_FAULT_ACTION="term")
    done = subprocess.run([sys.executable, "-m", "rntn_engine.cli.app", *train_args(treebanks, run_dir)],
                          capture_output=True, text=True, env=env)
    assert done.returncode == 0, done.stderr  # the run is complete: its model file is written
    assert load_checkpoint(run_dir / "model.h5").state["finished"]


def test_a_moved_data_file_with_the_same_content_is_accepted_and_another_refused(treebanks, tmp_path, capsys):
    data = tmp_path / "data"
    data.mkdir()
    shutil.copy(treebanks / "train.trees", data / "train.trees")
    run_dir = tmp_path / "run"
    assert main(["train", "--train-file", str(data / "train.trees"), "--dim", "3", "--epochs", "2",
                 "--batch-size", "10", "--run-dir", str(run_dir), "--no-progress", "--time-limit", "0.001s"]) == 75
    (data / "train.trees").rename(tmp_path / "moved.trees")
    assert main(["resume", str(run_dir), "--no-progress"]) == 1
    err = capsys.readouterr().err
    assert "train.trees" in err and f"rntn resume {run_dir} --train-file NEW_PATH" in err
    other = tmp_path / "other.trees"
    other.write_text((tmp_path / "moved.trees").read_text() + "(3 (2 the) (3 ferns))\n")
    assert main(["resume", str(run_dir), "--no-progress", "--train-file", str(other)]) == 1
    assert "is not the file the run was trained on" in capsys.readouterr().err
    assert main(["resume", str(run_dir), "--no-progress", "--time-limit", "0",
                 "--train-file", str(tmp_path / "moved.trees")]) == 0
    assert load_checkpoint(run_dir / "model.h5").config.train_file == str(tmp_path / "moved.trees")


def test_data_paths_are_stored_absolute(treebanks, tmp_path):
    run = run_cli("train", "--train-file", "train.trees", "--dim", "3", "--epochs", "0", "--run-dir",
                  str(tmp_path / "run"), "--no-progress", cwd=treebanks)
    assert run.returncode == 0, run.stderr
    assert load_checkpoint(tmp_path / "run" / "model.h5").config.train_file == str(treebanks / "train.trees")
