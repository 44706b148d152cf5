"""Test-only fault injection in the checkpoint writer and the trainer, driven by environment variables.

    RNTN_FAULT_POINT   checkpoint writes: before_open | mid_write | before_fsync | before_rename | after_rename
                       | mid_prune;  trainer: data_loaded (after the treebanks are read) | final_model (just
                       before the final model file is written) | run_file:NAME (before a write of the run
                       file NAME: config.toml, metrics.jsonl, progress.json)
    RNTN_FAULT_AFTER   act on the Nth time that point is reached in this process (default 1)
    RNTN_FAULT_ACTION  kill (SIGKILL this process) | term (SIGTERM this process, then carry on)
                       | enospc (raise "No space left on device")

Unset in normal use: then :func:`fault_from_environment` returns None and costs nothing.
"""

from __future__ import annotations

import errno
import os
import signal


def fault_from_environment():
    point = os.environ.get("RNTN_FAULT_POINT")
    if not point:
        return None
    after = int(os.environ.get("RNTN_FAULT_AFTER", "1"))
    action = os.environ.get("RNTN_FAULT_ACTION", "kill")
    seen = {"n": 0}

    def hit(where: str) -> None:
        if where != point:
            return
        seen["n"] += 1
        if seen["n"] != after:
            return
        if action == "kill":
            os.kill(os.getpid(), signal.SIGKILL)
        if action == "term":
            os.kill(os.getpid(), signal.SIGTERM)
            return
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    return hit
