"""Data-parallel training over MPI ranks (``--mpi``): bitwise the same as one process.

Runs the real launcher, ``mpiexec -n 2``, from the [mpi] extra (mpi4py with an MPI library from
PyPI). Every comparison is against one-process training of the same settings.
"""

import os
import shutil
import signal
import subprocess
import sys
import time

import numpy as np
import pytest

from demo_slices import DEMO, write_demo_slices
from rntn_engine.model.model_registry import MODELS
from rntn_engine.cli.app import main
from rntn_engine.run.checkpoints import load_checkpoint
from rntn_engine.run.run_directory import list_checkpoints

pytest.importorskip("mpi4py")
MPIEXEC = shutil.which("mpiexec")
pytestmark = pytest.mark.skipif(MPIEXEC is None, reason="needs mpiexec (the [mpi] extra)")
RNTN = [sys.executable, "-m", "rntn_engine.cli.app"]


@pytest.fixture(scope="module")
def data(tmp_path_factory):
    root = tmp_path_factory.mktemp("mpi")
    write_demo_slices(root, 40, 10)
    return root


def train_args(data, run_dir, model="rntn", dtype="float64", epochs=2, extra=()):
    return ["train", "--train-file", str(data / "train.trees"), "--dev-file", str(data / "dev.trees"), "--dim", "3",
            "--model", model, "--dtype", dtype, "--epochs", str(epochs), "--batch-size", "8", "--grad-chunks", "3",
            "--checkpoint-every-steps", "2", "--final-model", "last", "--run-dir", str(run_dir), "--no-progress",
            *extra]


def train_here(args):
    """One-process training in this process (no interpreter start): the reference."""
    assert main(args) == 0


def run(args, ranks=1, env_extra=None, **kw):
    env = {k: v for k, v in os.environ.items() if not k.startswith("RNTN_FAULT_")}
    env.update(env_extra or {})
    command = RNTN + args if ranks == 1 else [MPIEXEC, "-n", str(ranks), *RNTN, *args, "--mpi"]
    return subprocess.run(command, capture_output=True, text=True, env=env, timeout=600, **kw)


def final(run_dir):
    c = load_checkpoint(run_dir / "model.h5")
    return c.params.flat, c.adagrad_sums.flat


SETTINGS = [(m, t) for m in MODELS for t in ("float32", "float64")]
ALL_COMMANDS_ON_TWO_RANKS = """
import contextlib, os, sys
from mpi4py import MPI
from rntn_engine.cli.app import main
for args, stdout_path in {commands!r}:
    target = (stdout_path if MPI.COMM_WORLD.Get_rank() == 0 else os.devnull) if stdout_path else None
    with open(target, "w", encoding="utf-8") if target else contextlib.nullcontext(sys.stdout) as out:
        with contextlib.redirect_stdout(out):
            code = main(args + ["--mpi"])
    if code:
        sys.exit(code)
"""


def evaluate_cases(data, root):
    """(name, evaluate arguments), with the demo's slices: several checkpoints on two treebanks (divided by
    checkpoint), and one checkpoint of each dtype on a treebank of 3000 trees (two pieces of whole
    prediction batches, 2048 and 952 trees, divided over the ranks)."""
    big = DEMO / "garden_train.trees"  # 3000 trees
    slices = ["--slices", str(DEMO / "garden_slices.toml")]
    several = ["evaluate", str(root / "two-rntn-float64"), "-t", str(data / "dev.trees"), "-t",
               str(data / "train.trees"), "--no-progress", *slices]
    cases = [("several", several)]
    for model, dtype in (("rntn", "float64"), ("mvrnn", "float32")):
        cases.append((f"one-{model}-{dtype}", ["evaluate", str(root / f"two-{model}-{dtype}" / "model.h5"), "-t", str(big),
                                               "-t", str(data / "dev.trees"), "--no-progress", *slices]))
    return cases


@pytest.fixture(scope="module")
def two_rank_job(data, tmp_path_factory):
    """One MPI job (one launch keeps the suite fast): the six trainings, then evaluate on their checkpoints."""
    root = tmp_path_factory.mktemp("two-ranks")
    commands = [(train_args(data, root / f"two-{m}-{t}", m, t), None) for m, t in SETTINGS]
    commands += [(args + ["--out", str(root / f"{name}-mpi")], str(root / f"{name}-mpi.txt"))
                 for name, args in evaluate_cases(data, root)]
    done = subprocess.run([MPIEXEC, "-n", "2", sys.executable, "-c", ALL_COMMANDS_ON_TWO_RANKS.format(
        commands=commands)], capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr
    return root, done


def test_two_ranks_train_bitwise_like_one_process(data, two_rank_job, tmp_path):
    # rnn, rntn and mvrnn, float32 and float64
    root, done = two_rank_job
    assert done.stdout.count("saved") == len(SETTINGS)  # rank 0 alone prints
    for model, dtype in SETTINGS:
        one, two = tmp_path / f"one-{model}-{dtype}", root / f"two-{model}-{dtype}"
        train_here(train_args(data, one, model, dtype))
        for a, b in zip(final(one), final(two)):
            assert np.array_equal(a, b), (model, dtype)
        assert [c.step for c in list_checkpoints(one)] == [c.step for c in list_checkpoints(two)]


def test_two_ranks_evaluate_prints_and_writes_the_one_process_table(data, two_rank_job, capsys):
    root, _ = two_rank_job
    assert len(list_checkpoints(root / "two-rntn-float64")) > 2  # "several" divides checkpoints over the ranks
    for name, args in evaluate_cases(data, root):
        capsys.readouterr()
        assert main(args + ["--out", str(root / f"{name}-one")]) == 0
        table = capsys.readouterr().out
        assert "fine all" in table and "error" not in table and "damaged" not in table
        assert (root / f"{name}-mpi.txt").read_text(encoding="utf-8") == table, name
        for suffix in (".csv", ".json"):
            assert (root / f"{name}-mpi{suffix}").read_bytes() == (root / f"{name}-one{suffix}").read_bytes(), name


def test_sigterm_to_the_launcher_stops_once_and_a_one_process_resume_finishes_the_same(data, tmp_path):
    reference = tmp_path / "reference"
    train_here(train_args(data, reference, epochs=8))
    run_dir = tmp_path / "run"
    launcher = subprocess.Popen([MPIEXEC, "-n", "2", *RNTN, *train_args(data, run_dir, epochs=8), "--mpi"],
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    for line in launcher.stdout:
        if line.startswith("epoch   2"):
            launcher.send_signal(signal.SIGTERM)
            break
    out, err = launcher.communicate(timeout=300)
    assert launcher.returncode == 75, err
    assert out.count("stopped by SIGTERM") == 1
    assert run(["resume", str(run_dir), "--no-progress"]).returncode == 0
    for a, b in zip(final(reference), final(run_dir)):
        assert np.array_equal(a, b)


def test_resume_with_any_number_of_ranks_one_two_one(data, tmp_path):
    reference = tmp_path / "reference"
    train_here(train_args(data, reference, epochs=6))
    run_dir = tmp_path / "run"
    stop_at = {"RNTN_FAULT_POINT": "step", "RNTN_FAULT_ACTION": "term", "RNTN_FAULT_AFTER": "5"}
    assert run(train_args(data, run_dir, epochs=6), env_extra=stop_at).returncode == 75
    assert list_checkpoints(run_dir)[-1].step == 5
    done = run(["resume", str(run_dir), "--no-progress"], ranks=2, env_extra=stop_at)  # 5 more steps, on 2 ranks
    assert done.returncode == 75, done.stderr
    assert list_checkpoints(run_dir)[-1].step == 10
    assert run(["resume", str(run_dir), "--no-progress"]).returncode == 0
    for a, b in zip(final(reference), final(run_dir)):
        assert np.array_equal(a, b)


def test_a_killed_rank_ends_the_job_and_leaves_a_resumable_run(data, tmp_path):
    reference = tmp_path / "reference"
    train_here(train_args(data, reference, epochs=8))
    run_dir = tmp_path / "run"
    launcher = subprocess.Popen([MPIEXEC, "-n", "2", *RNTN, *train_args(data, run_dir, epochs=8), "--mpi"],
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    for line in launcher.stdout:
        if line.startswith("epoch   2"):
            break
    ranks = subprocess.run(["pgrep", "-f", "-P", str(launcher.pid)], capture_output=True, text=True).stdout.split()
    ranks = ranks or subprocess.run(["pgrep", "-f", str(run_dir)], capture_output=True, text=True).stdout.split()
    victim = max(int(p) for p in ranks if int(p) != launcher.pid)  # a rank, not rank 0's launcher
    os.kill(victim, signal.SIGKILL)
    launcher.communicate(timeout=120)
    assert launcher.returncode != 0
    time.sleep(0.5)
    for c in list_checkpoints(run_dir):
        load_checkpoint(c.path)  # every checkpoint verifies
    assert run(["resume", str(run_dir), "--no-progress"]).returncode == 0
    for a, b in zip(final(reference), final(run_dir)):
        assert np.array_equal(a, b)


def test_a_rank_that_reads_other_data_stops_the_job_naming_it(data, tmp_path):
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    for name in ("train.trees", "dev.trees"):
        shutil.copy(data / name, tmp_path / name)
        shutil.copy(data / name, elsewhere / name)
    with open(elsewhere / "train.trees", "a", encoding="utf-8") as fh:
        fh.write("(3 (2 the) (3 ferns))\n")
    args = ["train", "--train-file", "train.trees", "--dim", "3", "--epochs", "1", "--run-dir", str(tmp_path / "run"),
            "--no-progress", "--mpi"]
    # two ranks started in two working directories: the same relative path, different files
    done = subprocess.run([MPIEXEC, "-n", "1", "-wdir", str(tmp_path), *RNTN, *args, ":",
                           "-n", "1", "-wdir", str(elsewhere), *RNTN, *args], capture_output=True, text=True,
                          timeout=300)
    assert done.returncode == 1, done.stderr
    assert "rank 1 sees a different content of the data files" in done.stderr
    assert done.stderr.count("rntn: error") == 1


def test_a_data_file_missing_on_one_rank_stops_the_job_with_its_error(data, tmp_path):
    elsewhere = tmp_path / "elsewhere"  # this rank's working directory has no train.trees
    elsewhere.mkdir()
    shutil.copy(data / "train.trees", tmp_path / "train.trees")
    args = ["train", "--train-file", "train.trees", "--dim", "3", "--epochs", "1", "--run-dir", str(tmp_path / "run"),
            "--no-progress", "--mpi"]
    done = subprocess.run([MPIEXEC, "-n", "1", "-wdir", str(tmp_path), *RNTN, *args, ":",
                           "-n", "1", "-wdir", str(elsewhere), *RNTN, *args], capture_output=True, text=True,
                          timeout=120)  # before the fix the ranks waited for each other until killed
    assert done.returncode == 1, done.stderr
    assert f"{elsewhere / 'train.trees'}: cannot read the run's data file" in done.stderr
    assert "Traceback" not in done.stderr and not (tmp_path / "run").exists()  # the failed start is cleaned up
