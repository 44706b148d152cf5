"""Stopping a run cleanly: SIGTERM / SIGINT and a wall-clock budget.

The handler only sets a flag; the training loop looks at it at every minibatch
boundary, writes a checkpoint and exits with EXIT_STOPPED_RESUMABLE. A second
SIGINT (Ctrl-C twice) exits at once with status 130: still safe, because every
checkpoint write is atomic, but the work since the last checkpoint is lost.
"""

from __future__ import annotations

import os
import re
import signal
import time

EXIT_STOPPED_RESUMABLE = 75  # "stopped cleanly, resume with `rntn resume RUN_DIR`" (EX_TEMPFAIL)

_DURATION = re.compile(r"^\s*(?:(\d+(?:\.\d+)?)d)?\s*(?:(\d+(?:\.\d+)?)h)?\s*(?:(\d+(?:\.\d+)?)m)?\s*(?:(\d+(?:\.\d+)?)s?)?\s*$")


def parse_duration(text: str) -> float:
    """Seconds in '23h', '90m', '1h30m', '45s', '3600' or '2d'; ValueError otherwise."""
    m = _DURATION.match(text or "")
    if not m or not any(m.groups()):
        raise ValueError(f"not a duration: {text!r} (examples: 23h, 90m, 1h30m, 3600s)")
    d, h, mi, s = (float(g) if g else 0.0 for g in m.groups())
    return d * 86400 + h * 3600 + mi * 60 + s


class StopRequest:
    """Collects reasons to stop at the next minibatch boundary."""

    def __init__(self, time_limit_seconds: float = 0.0) -> None:
        self.reason: str | None = None
        self.deadline = time.monotonic() + time_limit_seconds if time_limit_seconds > 0 else None
        self._interrupts = 0
        self._previous: dict[int, object] = {}

    def install(self) -> "StopRequest":
        for sig in (signal.SIGTERM, signal.SIGINT):
            self._previous[sig] = signal.signal(sig, self._handle)
        return self

    def uninstall(self) -> None:
        for sig, handler in self._previous.items():
            signal.signal(sig, handler)
        self._previous.clear()

    def _handle(self, signum, frame) -> None:
        if signum == signal.SIGINT:
            self._interrupts += 1
            if self._interrupts >= 2:
                os.write(2, b"rntn: second interrupt: exiting now; resume from the last checkpoint\n")
                os._exit(130)
        self.reason = self.reason or signal.Signals(signum).name

    def should_stop(self) -> bool:
        if self.reason is None and self.deadline is not None and time.monotonic() >= self.deadline:
            self.reason = "time limit"
        return self.reason is not None
