"""`rntn evaluate` when a worker fails: its checkpoint's row gets the error, the rest is still scored and written.

Faults are placed with run/fault_injection.py (``evaluate:NAME``: when a task starts scoring the
checkpoint file NAME, in whichever worker process runs it), never by timing.
"""

import json
import os
import signal
import subprocess
import sys
import time
import uuid
from pathlib import Path

import pytest

from demo_slices import write_demo_slices
from rntn_engine.cli.app import main
from rntn_engine.run.run_directory import list_checkpoints

RNTN = [sys.executable, "-m", "rntn_engine.cli.app"]


@pytest.fixture(scope="module")
def small_run(tmp_path_factory):
    root = tmp_path_factory.mktemp("evaluate-faults")
    write_demo_slices(root, 60, 20)
    run_dir = root / "run"
    assert main(["train", "--train-file", str(root / "train.trees"), "--dim", "4", "--epochs", "2",
                 "--keep-checkpoints", "100", "--run-dir", str(run_dir), "--no-progress"]) == 0
    checkpoints = [c.path for c in list_checkpoints(run_dir)]
    assert len(checkpoints) == 3  # step 0 and two epoch ends
    return root, run_dir, checkpoints


def evaluate_args(root, run_dir, out, jobs="2"):
    return ["evaluate", str(run_dir), "-t", str(root / "dev.trees"), "-j", jobs, "--json", "--no-progress",
            "--out", str(out)]


def fault_env(point, action, **extra):
    env = {k: v for k, v in os.environ.items() if not k.startswith("RNTN_FAULT_")}
    env.update({"RNTN_FAULT_POINT": point, "RNTN_FAULT_ACTION": action, **extra})
    return env


@pytest.fixture(scope="module")
def reference_rows(small_run, tmp_path_factory):
    root, run_dir, _ = small_run
    out = tmp_path_factory.mktemp("reference") / "scores"
    done = subprocess.run(RNTN + evaluate_args(root, run_dir, out, jobs="1"), capture_output=True, text=True,
                          env=fault_env("", "kill"))
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout)


@pytest.mark.parametrize("action, jobs, said", [
    ("error", "2", "RuntimeError: injected fault at evaluate:"),  # an exception in a worker process
    ("kill", "2", "killed by SIGKILL"),  # a worker killed by a signal
    ("exit", "2", "exit code 3"),  # a worker that ends itself with os._exit
    ("error", "1", "RuntimeError: injected fault at evaluate:"),  # an exception with no worker process (-j 1)
])
def test_a_failing_worker_becomes_its_rows_error_and_the_rest_is_written(small_run, reference_rows, tmp_path,
                                                                         action, jobs, said):
    root, run_dir, checkpoints = small_run
    victim = checkpoints[1]
    out = tmp_path / "scores"
    done = subprocess.run(RNTN + evaluate_args(root, run_dir, out, jobs), capture_output=True, text=True,
                          env=fault_env(f"evaluate:{victim.name}", action), timeout=300)
    assert done.returncode == 0, done.stderr
    rows = json.loads(done.stdout)
    assert [r["checkpoint"] for r in rows] == [r["checkpoint"] for r in reference_rows]
    for row, reference in zip(rows, reference_rows):
        if row["checkpoint"] == str(victim):
            assert row["error"].startswith("worker process failed: ") and said in row["error"], row["error"]
            assert "fine_all" not in row  # no scores
        else:
            assert row == reference  # the others are scored as without the fault
    written = json.loads((tmp_path / "scores.json").read_text())
    assert written == rows
    assert (tmp_path / "scores.csv").read_text().count("\n") == len(rows) + 1
    assert f"could not score {victim}" in done.stderr and "Traceback" not in done.stderr


def test_the_table_says_error_not_damaged_for_a_failed_worker(small_run, tmp_path):
    root, run_dir, checkpoints = small_run
    done = subprocess.run(RNTN + ["evaluate", str(run_dir), "-t", str(root / "dev.trees"), "-j", "2",
                                  "--no-progress"], capture_output=True, text=True, timeout=300,
                          env=fault_env(f"evaluate:{checkpoints[0].name}", "kill"))
    assert done.returncode == 0, done.stderr
    victim_line = next(line for line in done.stdout.splitlines() if str(checkpoints[0]) in line)
    assert "error" in victim_line and "damaged" not in victim_line


def processes_with(marker: str) -> list[int]:
    """Processes whose environment holds ``marker`` (the evaluate command and anything it started)."""
    found = []
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                if marker.encode() in (entry / "environ").read_bytes():
                    found.append(int(entry.name))
            except OSError:  # gone, or not ours to read
                continue
    return found


def test_sigterm_to_evaluate_ends_its_workers_and_exits_75(small_run, tmp_path):
    root, run_dir, checkpoints = small_run
    marker = f"RNTN_TEST_MARK={uuid.uuid4().hex}"
    # the first checkpoint's worker hangs (it would never end by itself); the second one's worker sends
    # SIGTERM to the evaluate command, as a user would
    env = fault_env(f"evaluate:{checkpoints[0].name},evaluate:{checkpoints[1].name}", "hang,term_parent")
    env["RNTN_TEST_MARK"] = marker.split("=", 1)[1]
    out = tmp_path / "scores"
    command = subprocess.Popen(RNTN + evaluate_args(root, run_dir, out), env=env, stdout=subprocess.PIPE,
                               stderr=subprocess.PIPE, text=True)
    try:
        stdout, stderr = command.communicate(timeout=120)
        assert command.returncode == 75, stderr
        assert "rntn: evaluate stopped by SIGTERM" in stderr and "Traceback" not in stderr
        assert stdout == "" and not (tmp_path / "scores.json").exists()
        deadline = time.monotonic() + 10  # a moment for the kernel to reap what ended; no worker may remain
        while processes_with(marker) and time.monotonic() < deadline:
            time.sleep(0.1)
        assert processes_with(marker) == []
    finally:  # a failed run leaves nothing behind either
        for pid in processes_with(marker):
            os.kill(pid, signal.SIGKILL)


def test_sigterm_to_evaluate_without_workers_exits_75_and_writes_nothing(small_run, tmp_path):
    root, run_dir, checkpoints = small_run
    out = tmp_path / "scores"
    # -j 1 scores in the command's own process: the signal arrives as it starts the second checkpoint
    done = subprocess.run(RNTN + evaluate_args(root, run_dir, out, jobs="1"), capture_output=True, text=True,
                          env=fault_env(f"evaluate:{checkpoints[1].name}", "term"), timeout=300)
    assert done.returncode == 75, done.stderr
    assert "rntn: evaluate stopped by SIGTERM" in done.stderr and "Traceback" not in done.stderr
    assert done.stdout == "" and not (tmp_path / "scores.json").exists()
