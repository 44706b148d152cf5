"""`rntn status` on a living, a stopped and a finished run; `rntn inspect` on good and damaged files."""

import json
import subprocess
import sys
import time

from demo_slices import write_demo_slices
from rntn_engine.cli.app import main
from rntn_engine.run.run_directory import list_checkpoints



def make_treebanks(tmp_path):
    write_demo_slices(tmp_path, 60, 20)


def args(tmp_path, run_dir, epochs):
    return ["train", "--train-file", str(tmp_path / "train.trees"), "--dev-file", str(tmp_path / "dev.trees"),
            "--dim", "4", "--epochs", str(epochs), "--batch-size", "10", "--run-dir", str(run_dir), "--no-progress"]


def test_status_of_living_then_killed_run(tmp_path, capsys):
    make_treebanks(tmp_path)
    run_dir = tmp_path / "run"
    proc = subprocess.Popen([sys.executable, "-m", "rntn_engine.cli.app", *args(tmp_path, run_dir, 100000)],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        deadline = time.time() + 60
        info = {}
        while time.time() < deadline and not (info.get("latest_evaluation") and info.get("step", 0) >= 6):
            time.sleep(0.1)
            if (run_dir / "progress.json").exists():
                assert main(["status", str(run_dir), "--json"]) == 0
                info = json.loads(capsys.readouterr().out)
        assert info["condition"] == "running" and info["pid"] == proc.pid
        assert info["step"] >= 6 and info["total_steps"] == 6 * 100000 and info["eta_seconds"] > 0
        assert info["latest_evaluation"]["epoch"] >= 1 and info["best_checkpoint"]
    finally:
        proc.kill()
        proc.wait()
    assert main(["status", str(run_dir)]) == 0
    out = capsys.readouterr().out
    assert "stopped; resumable with `rntn resume`" in out and "best" in out and "latest dev" in out


def test_status_of_finished_run_and_inspect(tmp_path, capsys):
    make_treebanks(tmp_path)
    run_dir = tmp_path / "run"
    assert main(args(tmp_path, run_dir, 2)) == 0
    capsys.readouterr()
    assert main(["status", str(run_dir)]) == 0
    out = capsys.readouterr().out
    assert "finished (all epochs done)" in out and "step 12 of 12 (100.0%)" in out
    last = run_dir / "checkpoint-step000000012.h5"
    assert main(["inspect", str(last)]) == 0
    out = capsys.readouterr().out
    assert "all 19 datasets verified" in out and "rntn, d=4, C=5" in out and "finished at step 12" in out
    assert "train_file" in out and "epoch  step  train loss" in out
    assert main(["inspect", str(last), "--json"]) == 0
    info = json.loads(capsys.readouterr().out)
    assert info["state"]["step"] == 12 and len(info["metrics"]) == 2 and info["has_optimiser_state"]
    assert main(["inspect", str(run_dir / "model.h5"), "--json"]) == 0  # the best checkpoint (the default)
    assert json.loads(capsys.readouterr().out)["role"] == "a run's final model: its best checkpoint"


def test_inspect_reports_damage_and_exits_1(tmp_path, capsys):
    make_treebanks(tmp_path)
    run_dir = tmp_path / "run"
    assert main(args(tmp_path, run_dir, 1)) == 0
    newest = list_checkpoints(run_dir)[-1].path
    data = bytearray(newest.read_bytes())
    with open(newest, "r+b") as fh:
        fh.truncate(len(data) // 2)
    capsys.readouterr()
    assert main(["inspect", str(newest)]) == 1
    err = capsys.readouterr().err.strip()
    assert err.startswith(str(newest)) and len(err.splitlines()) == 1
    assert main(["status", str(run_dir)]) == 0
    assert "damaged" in capsys.readouterr().out
    assert main(["status", str(tmp_path)]) == 1
