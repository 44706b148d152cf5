"""Stopping a run cleanly: SIGTERM, SIGHUP, SIGINT and a wall-clock budget.

The handler only sets a flag; the training loop looks at it at every minibatch
boundary, writes a checkpoint and exits with EXIT_STOPPED_RESUMABLE. The handlers are
installed before the data is read and stay until the command ends, so a signal at any
moment of a training command ends in a clean stop. SIGHUP (the terminal was closed)
counts like SIGTERM. A second SIGINT (Ctrl-C twice) exits at once with status 130:
still safe, because every checkpoint write is atomic, but the work since the last
checkpoint is lost.

Signal handlers can only be installed from the main thread; elsewhere (training started
from a worker thread through the Python API) nothing is installed and the caller stops
the run with :meth:`StopRequest.request` instead.
"""

from __future__ import annotations

import os
import re
import signal
import threading
import time

EXIT_STOPPED_RESUMABLE = 75  # "stopped cleanly, resume with `rntn resume RUN_DIR`" (EX_TEMPFAIL)
STOP_SIGNALS = (signal.SIGTERM, signal.SIGHUP, signal.SIGINT)

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
        self.started = time.monotonic()
        self.deadline: float | None = None
        self.set_time_limit(time_limit_seconds)
        self._interrupts = 0
        self._previous: dict[int, object] = {}

    def set_time_limit(self, seconds: float) -> None:
        """Stop once ``seconds`` have passed since this request was made (0: no limit)."""
        self.deadline = self.started + seconds if seconds > 0 else None

    def install(self) -> "StopRequest":
        """Catch the stop signals (main thread only: elsewhere Python does not allow it)."""
        if threading.current_thread() is threading.main_thread():
            for sig in STOP_SIGNALS:
                self._previous[sig] = signal.signal(sig, self._handle)
        return self

    def uninstall(self) -> None:
        for sig, handler in self._previous.items():
            signal.signal(sig, handler)
        self._previous.clear()

    def __enter__(self) -> "StopRequest":
        return self.install()

    def __exit__(self, *exc) -> None:
        self.uninstall()

    def request(self, reason: str) -> None:
        """Ask for a clean stop (what a signal does; also callable from another thread)."""
        self.reason = self.reason or reason

    def _handle(self, signum, frame) -> None:
        if signum == signal.SIGINT:
            self._interrupts += 1
            if self._interrupts >= 2:
                os.write(2, b"rntn: second interrupt: exiting now; resume from the last checkpoint\n")
                os._exit(130)
        self.request(signal.Signals(signum).name)

    def should_stop(self) -> bool:
        if self.reason is None and self.deadline is not None and time.monotonic() >= self.deadline:
            self.reason = "time limit"
        return self.reason is not None
