"""The run directory: its files, its lock, its checkpoints and their retention.

    RUN_DIR/
      config.toml                     resolved configuration; marks the directory as a run of ours
      run.lock                        held (flock) by the living trainer; pid and host inside
      progress.json                   heartbeat of the living trainer (step, epoch, speed), every few seconds
      metrics.jsonl                   one JSON line per evaluation
      checkpoint-step000000112.h5     checkpoints, named by step (newest = largest step)
      best.h5                         the best checkpoint so far by the run's --best-metric
      model.h5                        the final model, written when the run finishes: the best
                                      checkpoint (--final-model best, the default) or the last
      .NAME.PID.rntn-tmp              leftovers of an interrupted write (cleaned on resume)

Exclusivity: an exclusive ``flock`` on run.lock. The kernel releases it when the
process dies in any way (SIGKILL and out-of-memory included), so a stale lock of
a dead trainer is simply taken over by the next one.
"""

from __future__ import annotations

import errno
import fcntl
import json
import os
import re
import socket
import time
from dataclasses import dataclass
from pathlib import Path

from rntn_engine.data.atomic_files import fsync_directory, is_our_temp_file, write_atomically
from rntn_engine.run.run_errors import RunDirectoryError

CONFIG_FILE = "config.toml"
LOCK_FILE = "run.lock"
PROGRESS_FILE = "progress.json"
METRICS_FILE = "metrics.jsonl"
MODEL_FILE = "model.h5"
BEST_FILE = "best.h5"  # the best checkpoint by the run's best_metric (the same file, hard-linked where possible)
CHECKPOINT_PATTERN = re.compile(r"^checkpoint-step(\d{9,})\.h5$")


def checkpoint_name(step: int) -> str:
    return f"checkpoint-step{step:09d}.h5"


@dataclass(frozen=True)
class CheckpointFile:
    step: int
    path: Path


def is_run_directory(path: Path) -> bool:
    """True when ``path`` holds a run of ours (its config.toml has a [train] table)."""
    config = path / CONFIG_FILE
    try:
        return config.is_file() and "[train]" in config.read_text(encoding="utf-8", errors="replace")
    except OSError:
        return False


def list_checkpoints(run_dir: Path) -> list[CheckpointFile]:
    """Checkpoint files of the run, oldest step first (by the step in the name, never by file time)."""
    found = []
    for entry in run_dir.iterdir() if run_dir.is_dir() else []:
        m = CHECKPOINT_PATTERN.match(entry.name)
        if m and entry.is_file():
            found.append(CheckpointFile(int(m.group(1)), entry))
    return sorted(found, key=lambda c: c.step)


def remove_leftover_temp_files(run_dir: Path) -> list[Path]:
    """Delete temporary files of our own naming pattern (interrupted writes); nothing else."""
    removed = []
    for entry in run_dir.iterdir():
        if is_our_temp_file(entry) and entry.is_file():
            entry.unlink()
            removed.append(entry)
    return removed


def prune_checkpoints(run_dir: Path, keep_last: int, protect: set[Path], fault=None) -> list[Path]:
    """Delete checkpoints beyond the newest ``keep_last`` except those in ``protect``.

    Called only after a new checkpoint is committed, so at least that one remains.
    """
    hit = fault or (lambda point: None)
    checkpoints = list_checkpoints(run_dir)
    keep = {c.path for c in checkpoints[-max(1, keep_last):]} | {p for p in protect}
    removed = []
    for c in checkpoints:
        if c.path not in keep:
            c.path.unlink()
            removed.append(c.path)
            hit("mid_prune")
    if removed:
        fsync_directory(run_dir)
    return removed


class RunLock:
    """Exclusive lock on a run directory for the life of this process (see module docstring)."""

    def __init__(self, run_dir: Path) -> None:
        self.path = run_dir / LOCK_FILE
        self._fd: int | None = None

    def acquire(self) -> "RunLock":
        try:  # never through a symbolic link: it could point at a file of someone else's
            fd = os.open(self.path, os.O_RDWR | os.O_CREAT | os.O_NOFOLLOW | getattr(os, "O_CLOEXEC", 0), 0o644)
        except OSError as exc:
            what = "is a symbolic link; remove it" if exc.errno == errno.ELOOP else (exc.strerror or str(exc))
            raise RunDirectoryError(f"{self.path}: cannot take the run's lock ({what})") from None
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            holder = _read_lock_holder(self.path)
            os.close(fd)
            raise RunDirectoryError(f"{self.path.parent}: another trainer is running in this run directory"
                                    f"{holder}; wait for it or stop it first") from None
        try:
            os.ftruncate(fd, 0)
            os.write(fd, json.dumps({"pid": os.getpid(), "host": socket.gethostname(),
                                     "since": time.time()}).encode())
        except OSError:
            pass  # the holder's name is a courtesy; the flock is the lock
        self._fd = fd
        return self

    def release(self) -> None:
        if self._fd is not None:
            fcntl.flock(self._fd, fcntl.LOCK_UN)
            os.close(self._fd)
            self._fd = None

    def __enter__(self) -> "RunLock":
        return self.acquire()

    def __exit__(self, *exc) -> None:
        self.release()


def _read_lock_holder(path: Path) -> str:
    try:
        info = json.loads(path.read_text() or "{}")
        return f" (pid {info['pid']} on {info['host']})"
    except (OSError, ValueError, KeyError):
        return ""


def lock_is_held(run_dir: Path) -> dict | None:
    """The lock holder's info if a living process holds the run's lock, else None."""
    path = run_dir / LOCK_FILE
    if not path.exists():
        return None
    fd = os.open(path, os.O_RDONLY)
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_SH | fcntl.LOCK_NB)
        except OSError:
            try:
                return json.loads(path.read_text() or "{}")
            except ValueError:
                return {}
        fcntl.flock(fd, fcntl.LOCK_UN)
        return None
    finally:
        os.close(fd)


def write_json_atomic(path: Path, value: object) -> None:
    """Small JSON files (progress heartbeat): atomic replace, no fsync (losing one is harmless)."""
    write_atomically(path, json.dumps(value).encode("utf-8"), durable=False)


def write_config_file(run_dir: Path, text: str) -> None:
    """config.toml, atomically and durably, and only when its content changes."""
    path = run_dir / CONFIG_FILE
    try:
        if path.read_text(encoding="utf-8") == text:
            return
    except (OSError, UnicodeDecodeError):
        pass
    write_atomically(path, text.encode("utf-8"), durable=True)


def rewrite_metrics_log(run_dir: Path, history: list[dict]) -> None:
    """Make metrics.jsonl exactly the checkpoint's history (drops lines of work lost in a crash)."""
    text = "".join(json.dumps(record) + "\n" for record in history)
    write_atomically(run_dir / METRICS_FILE, text.encode("utf-8"), durable=True)


def append_metrics(run_dir: Path, record: dict) -> None:
    with open(run_dir / METRICS_FILE, "a", encoding="utf-8") as fh:
        fh.write(json.dumps(record) + "\n")

