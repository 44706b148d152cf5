"""A full disk during training: one line, exit 1, no temporary file left, every checkpoint intact.

The real thing where the machine allows it: a private mount namespace (`unshare -m`, as root)
with a tiny tmpfs that a filler file leaves almost full, so the next checkpoint write hits
ENOSPC inside the kernel. Elsewhere the same scenario runs under `ulimit -f` (EFBIG for any
file larger than the limit). Plus: every other run-directory write (config.toml,
metrics.jsonl, progress.json) failing with ENOSPC through the test-only fault hook.
"""

import os
import shlex
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from demo_slices import write_demo_slices
from rntn_engine.cli.app import main
from rntn_engine.data.atomic_files import is_our_temp_file
from rntn_engine.run.checkpoints import load_checkpoint

RNTN = f"{shlex.quote(sys.executable)} -m rntn_engine.cli.app"


def can_mount_tmpfs() -> bool:
    if not shutil.which("unshare"):
        return False
    probe = subprocess.run(["unshare", "-m", "sh", "-c", "mount -t tmpfs -o size=64k tmpfs /mnt"],
                           capture_output=True)
    return probe.returncode == 0


@pytest.fixture(scope="module")
def treebanks(tmp_path_factory):
    root = tmp_path_factory.mktemp("disk")
    write_demo_slices(root, 40, 10)
    return root


def train_command(tb: Path, run_dir: str, epochs: int) -> str:
    return (f"{RNTN} train --train-file {tb / 'train.trees'} --dev-file {tb / 'dev.trees'} --dim 3 "
            f"--epochs {epochs} --batch-size 10 --keep-checkpoints 50 --final-model last --run-dir {run_dir} "
            f"--no-progress")


def run_full_disk_scenario(tb: Path, out: Path) -> str:
    """Train 1 epoch, leave ~12 KB free, resume for 3 more epochs; copy the run out. Returns the mechanism."""
    out.mkdir()
    if can_mount_tmpfs():
        mnt = out / "mnt"
        mnt.mkdir()
        script = f"""
mount -t tmpfs -o size=2m tmpfs {mnt} || exit 99
{train_command(tb, f'{mnt}/run', 1)} > {out}/first.out 2>&1 || exit 98
cp -a {mnt}/run {out}/before
free=$(df --output=avail -B1 {mnt} | tail -1)
dd if=/dev/zero of={mnt}/filler bs=4096 count=$(( (free - 12288) / 4096 )) 2>/dev/null
{RNTN} resume {mnt}/run --epochs 4 --no-progress > {out}/stdout 2> {out}/stderr; echo $? > {out}/rc
ls -a {mnt}/run > {out}/listing
cp -a {mnt}/run {out}/after
"""
        done = subprocess.run(["unshare", "-m", "sh", "-c", script], capture_output=True, text=True)
        assert done.returncode == 0, done.stderr
        return "tmpfs"
    run_dir = out / "run"
    assert subprocess.run(train_command(tb, str(run_dir), 1), shell=True, capture_output=True).returncode == 0
    shutil.copytree(run_dir, out / "before")
    limit_kb = (run_dir / "model.h5").stat().st_size // 1024 - 1  # smaller than any checkpoint, larger than the rest
    script = (f"ulimit -f {limit_kb}; {RNTN} resume {run_dir} --epochs 4 --no-progress > {out}/stdout "
              f"2> {out}/stderr; echo $? > {out}/rc; ls -a {run_dir} > {out}/listing")
    subprocess.run(["bash", "-c", script], check=True)
    shutil.copytree(run_dir, out / "after")
    return "ulimit"


def test_a_full_disk_gives_one_line_and_keeps_every_checkpoint(treebanks, tmp_path):
    out = tmp_path / "out"
    mechanism = run_full_disk_scenario(treebanks, out)
    stderr = (out / "stderr").read_text()
    assert (out / "rc").read_text().strip() == "1", (mechanism, stderr)
    assert "Traceback" not in stderr and "HDF5" not in stderr
    lines = stderr.strip().splitlines()
    assert len(lines) == 1, stderr
    assert "could not write the checkpoint" in lines[0] and "is intact" in lines[0]
    assert ("No space left on device" if mechanism == "tmpfs" else "File too large") in lines[0]
    listing = (out / "listing").read_text().split()
    assert not [name for name in listing if is_our_temp_file(Path(name))], listing
    before, after = out / "before", out / "after"
    for checkpoint in before.glob("checkpoint-step*.h5"):
        assert (after / checkpoint.name).read_bytes() == checkpoint.read_bytes(), checkpoint.name
        load_checkpoint(after / checkpoint.name)  # verifies
    # with space again, the run continues from where it stood
    assert main(["resume", str(after), "--no-progress", "--epochs", "4"]) == 0
    assert load_checkpoint(after / "model.h5").state["epoch"] == 4


@pytest.mark.parametrize("name", ["config.toml", "metrics.jsonl", "progress.json"])
def test_a_failed_write_of_a_run_file_gives_one_line_and_keeps_the_checkpoint(treebanks, tmp_path, name):
    run_dir = tmp_path / "run"
    assert subprocess.run(train_command(treebanks, str(run_dir), 1), shell=True).returncode == 0
    kept = {p.name: p.read_bytes() for p in run_dir.glob("checkpoint-step*.h5")}
    env = dict(os.environ, RNTN_FAULT_POINT=f"run_file:{name}", RNTN_FAULT_ACTION="enospc")
    done = subprocess.run([sys.executable, "-m", "rntn_engine.cli.app", "resume", str(run_dir), "--epochs", "2",
                           "--no-progress"], env=env, capture_output=True, text=True)
    assert done.returncode == 1, done.stderr
    assert "Traceback" not in done.stderr and len(done.stderr.strip().splitlines()) == 1, done.stderr
    assert f"{run_dir / name}: could not write it (No space left on device)" in done.stderr
    assert "is intact" in done.stderr
    assert {p.name: p.read_bytes() for p in run_dir.glob("checkpoint-step*.h5") if p.name in kept} == kept
    assert not [p for p in run_dir.iterdir() if is_our_temp_file(p)]
