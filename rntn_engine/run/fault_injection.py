"""Test-only fault injection in the training loop, the checkpoint writer and evaluate's workers, driven by
environment variables.

    RNTN_FAULT_POINT   where: step (a training step's update is done, before any checkpoint of
                       that step) | data_loaded (after the treebanks are read) | final_model (just
                       before the final model file is written) | run_file:NAME (before a write of
                       the run file NAME: config.toml, metrics.jsonl, progress.json) | checkpoint
                       writes: before_open | mid_write | before_fsync | before_rename | after_rename
                       | mid_prune | evaluate:NAME (an evaluate task starts scoring the checkpoint file
                       named NAME, in whichever worker runs it); several points separated by commas
    RNTN_FAULT_AFTER   act on the Nth time that point is reached in this process (default 1);
                       one number for every point, or one per point, separated by commas
    RNTN_FAULT_ACTION  kill (SIGKILL this process) | term (SIGTERM this process, then carry on)
                       | int (SIGINT this process, then carry on) | enospc (raise "No space left
                       on device") | error (raise RuntimeError) | exit (os._exit(3): the process ends
                       without cleaning up) | hang (sleep until killed) | term_parent (SIGTERM the
                       parent process, then carry on); one for every point, or one per point, separated by commas

Each point counts its own hits. Example: ``RNTN_FAULT_POINT=step,mid_write``,
``RNTN_FAULT_AFTER=4,3``, ``RNTN_FAULT_ACTION=int`` sends SIGINT after the 4th step and again
in the middle of the 3rd checkpoint write (the one that first SIGINT asked for, when two
were written before).

Unset in normal use: then :func:`fault_from_environment` returns None and costs nothing.
"""

from __future__ import annotations

import errno
import os
import signal
import time

POINTS = ("step", "data_loaded", "final_model", "before_open", "mid_write", "before_fsync", "before_rename",
          "after_rename", "mid_prune")
RUN_FILE_POINT = "run_file:"  # followed by the run file's name: run_file:config.toml
EVALUATE_POINT = "evaluate:"  # followed by a checkpoint file's name: evaluate:checkpoint-step000004.h5
ACTIONS = ("kill", "term", "int", "enospc", "error", "exit", "hang", "term_parent")


def _per_point(text: str, n: int, name: str) -> list[str]:
    values = [v.strip() for v in text.split(",")]
    if len(values) == 1:
        return values * n
    if len(values) != n:
        raise ValueError(f"{name} has {len(values)} values for {n} fault points")
    return values


def fault_from_environment():
    spec = os.environ.get("RNTN_FAULT_POINT")
    if not spec:
        return None
    points = [p.strip() for p in spec.split(",")]
    afters = [int(a) for a in _per_point(os.environ.get("RNTN_FAULT_AFTER", "1"), len(points), "RNTN_FAULT_AFTER")]
    actions = _per_point(os.environ.get("RNTN_FAULT_ACTION", "kill"), len(points), "RNTN_FAULT_ACTION")
    for point, action in zip(points, actions):
        if (point not in POINTS and not point.startswith((RUN_FILE_POINT, EVALUATE_POINT))) or action not in ACTIONS:
            raise ValueError(f"unknown fault point {point!r} or action {action!r}")
    plan = {point: (after, action) for point, after, action in zip(points, afters, actions)}
    seen = {point: 0 for point in plan}

    def hit(where: str) -> None:
        if where not in plan:
            return
        seen[where] += 1
        after, action = plan[where]
        if seen[where] != after:
            return
        if action == "kill":
            os.kill(os.getpid(), signal.SIGKILL)
        if action in ("term", "int"):
            os.kill(os.getpid(), signal.SIGTERM if action == "term" else signal.SIGINT)
            return
        if action == "exit":
            os._exit(3)
        if action == "hang":
            while True:
                time.sleep(3600)
        if action == "term_parent":
            os.kill(os.getppid(), signal.SIGTERM)
            return
        if action == "error":
            raise RuntimeError(f"injected fault at {where}")
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    return hit
