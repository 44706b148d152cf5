"""Checkpoints that are busy, damaged all over, or crafted: refused by name, never trusted, never renamed wrongly.

Each crafted file is a real checkpoint edited with plain h5py (an external writer), with the
checksums made valid again where the case needs it, so only our structural and content
checks can catch it.
"""

import hashlib
import json
import os
import shutil
import subprocess
import sys
import time

import h5py
import numpy as np
import pytest

from demo_slices import write_demo_slices
from rntn_engine.cli.app import main
from rntn_engine.data.checkpoint_file import CheckpointError, CheckpointUnavailableError
from rntn_engine.run.checkpoints import load_checkpoint
from rntn_engine.run.run_directory import list_checkpoints


@pytest.fixture(scope="module")
def finished(tmp_path_factory):
    root = tmp_path_factory.mktemp("hostile")
    write_demo_slices(root, 40, 10)
    run_dir = root / "run"
    assert main(["train", "--train-file", str(root / "train.trees"), "--dev-file", str(root / "dev.trees"),
                 "--dim", "3", "--epochs", "2", "--batch-size", "10", "--keep-checkpoints", "50",
                 "--run-dir", str(run_dir), "--no-progress"]) == 0
    return run_dir


def copy_run(finished, tmp_path):
    run_dir = tmp_path / "run"
    shutil.copytree(finished, run_dir)
    (run_dir / "model.h5").unlink()
    return run_dir


def set_record(path, name, value):
    """Replace /records/NAME with ``value`` as JSON, with a matching checksum (valid to the file layer)."""
    text = json.dumps(value, sort_keys=True)
    with h5py.File(path, "a") as f:
        del f[f"records/{name}"]
        ds = f.create_dataset(f"records/{name}", data=text, dtype=h5py.string_dtype("utf-8"))
        ds.attrs["sha256"] = hashlib.sha256(text.encode()).hexdigest()
        ds.attrs["description"] = "edited"


def edit_config(key, value):
    def change(path):
        with h5py.File(path, "r") as f:
            config = json.loads(f["records/config"][()])
        config[key] = value
        set_record(path, "config", config)
    return change


def edit_state(value_of):
    def change(path):
        with h5py.File(path, "r") as f:
            state = json.loads(f["records/state"][()])
        set_record(path, "state", value_of(state))
    return change


def with_state(key, value):
    return edit_state(lambda state: {**state, key: value})


def huge_dataset(path):
    with h5py.File(path, "a") as f:
        del f["arrays/parameters/composition_bias"]
        f.create_dataset("arrays/parameters/composition_bias", shape=(200_000_000,), dtype="f4")  # no data written


def virtual_dataset_reading(source_path):
    def change(path):
        layout = h5py.VirtualLayout(shape=(3,), dtype="f4")
        layout[:] = h5py.VirtualSource(str(source_path), "data", shape=(3,))
        with h5py.File(path, "a") as f:
            del f["arrays/parameters/composition_bias"]
            f.create_virtual_dataset("arrays/parameters/composition_bias", layout)
    return change


def external_link(path):
    with h5py.File(path, "a") as f:
        del f["arrays/parameters/composition_bias"]
        f["arrays/parameters/composition_bias"] = h5py.ExternalLink("/etc/other.h5", "/data")


def external_storage(path):
    outside = path.parent / "outside.bin"
    outside.write_bytes(np.zeros(3, dtype=np.float32).tobytes())
    with h5py.File(path, "a") as f:
        del f["arrays/parameters/composition_bias"]
        f.create_dataset("arrays/parameters/composition_bias", shape=(3,), dtype="f4",
                         external=[(str(outside), 0, h5py.h5f.UNLIMITED)])


def unexpected_dataset(path):
    with h5py.File(path, "a") as f:
        f.create_dataset("arrays/parameters/extra_thing", data=np.zeros(2))


def missing_record(name):
    def change(path):
        with h5py.File(path, "a") as f:
            del f[f"records/{name}"]
    return change


HOSTILE = {
    # case: (edit, words expected in the one-line error)
    "200 million floats declared": (huge_dataset, "declares 800,000,000 bytes"),
    "external link": (external_link, "is a link to another file"),
    "external storage": (external_storage, "keeps its data in external files"),
    "unexpected dataset": (unexpected_dataset, "unexpected dataset /arrays/parameters/extra_thing"),
    "model gpt": (edit_config("model", "gpt"), "--model must be one of"),
    "dim -1": (edit_config("dim", -1), "--dim must be at least 0"),
    "state is a list": (edit_state(lambda state: [1, 2]), "run state must be a JSON object"),
    "step is text": (with_state("step", "ten"), "run state step must be a whole number"),
    "position -10": (with_state("position", -10), "run state position must be a whole number >= 0"),
    "negative step": (with_state("step", -4), "run state step must be a whole number >= 0"),
    "missing state": (missing_record("state"), "record 'state' is missing"),
}


@pytest.mark.parametrize("case", sorted(HOSTILE))
def test_a_crafted_checkpoint_is_refused_with_one_line(finished, tmp_path, case):
    edit, words = HOSTILE[case]
    path = tmp_path / "c.h5"
    shutil.copy(finished / "model.h5", path)
    edit(path)
    start = time.monotonic()
    with pytest.raises(CheckpointError) as caught:
        load_checkpoint(path)
    assert time.monotonic() - start < 5  # no data of the declared size was read
    assert words in str(caught.value) and "\n" not in str(caught.value)


def test_a_virtual_dataset_over_a_fifo_is_refused_without_hanging(finished, tmp_path):
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    path = tmp_path / "c.h5"
    shutil.copy(finished / "model.h5", path)
    virtual_dataset_reading(fifo)(path)
    code = ("import sys\nfrom rntn_engine.run.checkpoints import load_checkpoint\n"
            "try:\n    load_checkpoint(sys.argv[1])\nexcept Exception as e:\n    print(e)\n")
    done = subprocess.run([sys.executable, "-c", code, str(path)], capture_output=True, text=True, timeout=60)
    assert "is a virtual dataset (it would read other files)" in done.stdout
    inspected = subprocess.run([sys.executable, "-m", "rntn_engine.cli.app", "inspect", str(path)],
                               capture_output=True, text=True, timeout=60)
    assert inspected.returncode == 1 and "virtual dataset" in inspected.stderr


def test_a_virtual_dataset_reading_another_file_by_absolute_path_is_refused(finished, tmp_path):
    source = tmp_path / "source.h5"
    with h5py.File(source, "w") as f:
        f["data"] = np.ones(3, dtype=np.float32)
    path = tmp_path / "c.h5"
    shutil.copy(finished / "model.h5", path)
    virtual_dataset_reading(source.resolve())(path)
    with pytest.raises(CheckpointError, match="virtual dataset"):
        load_checkpoint(path)


def test_a_resume_never_restarts_from_step_zero_with_trained_weights(finished, tmp_path, capsys):
    run_dir = copy_run(finished, tmp_path)
    for c in list_checkpoints(run_dir):
        missing_record("state")(c.path)
    metrics = (run_dir / "metrics.jsonl").read_bytes()
    assert main(["resume", str(run_dir), "--no-progress"]) == 1
    err = capsys.readouterr().err
    assert "none of its" in err and "verifies" in err and "nothing was renamed" in err
    assert not list(run_dir.glob("*.damaged"))
    assert (run_dir / "metrics.jsonl").read_bytes() == metrics


def hold_open(path):
    """Another process holding ``path`` open with h5py in mode 'a' (HDF5 locks it) until killed."""
    code = ("import sys, time, h5py\nf = h5py.File(sys.argv[1], 'a')\nprint('held', flush=True)\n"
            "time.sleep(600)\n")
    proc = subprocess.Popen([sys.executable, "-c", code, str(path)], stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "held"
    return proc


@pytest.mark.parametrize("which", ["newest", "all"])
def test_a_busy_checkpoint_stops_the_resume_and_is_not_called_damaged(finished, tmp_path, capsys, which):
    run_dir = copy_run(finished, tmp_path)
    checkpoints = list_checkpoints(run_dir)
    targets = checkpoints[-1:] if which == "newest" else checkpoints
    holders = [hold_open(c.path) for c in targets]
    try:
        before = {p.name: p.read_bytes() for p in run_dir.iterdir() if p.name != "run.lock"}
        assert main(["resume", str(run_dir), "--no-progress"]) == 1
        after = {p.name: p.read_bytes() for p in run_dir.iterdir() if p.name != "run.lock"}
    finally:
        for proc in holders:
            proc.kill()
            proc.wait()
    err = capsys.readouterr().err
    assert "another process holds it open for writing" in err and len(err.strip().splitlines()) == 1
    assert not list(run_dir.glob("*.damaged"))
    assert after == before  # nothing renamed, no metrics log emptied, nothing restarted
    for c in targets:  # once the other process is gone, the files read as they were
        load_checkpoint(c.path)


def test_a_checkpoint_held_open_for_writing_is_unavailable_not_damaged(finished, tmp_path):
    path = tmp_path / "c.h5"
    shutil.copy(finished / "model.h5", path)
    holder = hold_open(path)
    try:
        with pytest.raises(CheckpointUnavailableError, match="another process holds it open for writing"):
            load_checkpoint(path)
    finally:
        holder.kill()
        holder.wait()
    assert load_checkpoint(path).state["step"] > 0  # a killed writer leaves it readable


def test_truncated_checkpoint_message_has_no_locking_hint(finished, tmp_path):
    path = tmp_path / "c.h5"
    shutil.copy(finished / "model.h5", path)
    with open(path, "r+b") as fh:
        fh.truncate(path.stat().st_size // 2)
    with pytest.raises(CheckpointError) as caught:
        load_checkpoint(path)
    assert "HDF5_USE_FILE_LOCKING" not in str(caught.value)


def test_evaluate_reports_each_hostile_checkpoint_in_its_row_and_scores_the_rest(finished, tmp_path, capsys):
    paths = [finished / "model.h5"]
    for i, case in enumerate(sorted(HOSTILE)):
        path = tmp_path / f"hostile-{i:02d}.h5"
        shutil.copy(finished / "model.h5", path)
        HOSTILE[case][0](path)
        paths.append(path)
    out = tmp_path / "scores"
    code = main(["evaluate", *map(str, paths), "-t", str(finished.parent / "dev.trees"), "--out", str(out),
                 "-j", "2", "--no-progress", "--json"])
    assert code == 0
    rows = json.loads(out.with_suffix(".json").read_text())
    by_file = {r["checkpoint"]: r for r in rows}
    assert not by_file[str(paths[0])]["error"] and by_file[str(paths[0])]["fine_all"] > 0
    for path, case in zip(paths[1:], sorted(HOSTILE)):
        assert HOSTILE[case][1] in by_file[str(path)]["error"], case
    assert out.with_suffix(".csv").exists()
