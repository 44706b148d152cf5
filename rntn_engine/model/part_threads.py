"""Worker threads that run independent parts of a step: a minibatch's chunks, a group's element ranges.

``PartThreads(threads).run(work, parts)`` returns ``[work(part) for part in parts]``. With more than
one thread the calling thread takes the first part itself and the pool the others, then it waits
for them: one hand-over fewer than giving every part to the pool (before a 2-thread step at
d = 25 started its first chunk, 0.15 ms went by with the pool taking both, 0.12 ms with this;
measured with per-step timers, DEVELOPERS.md). Results come back in part order whatever thread ran
a part, so callers that sum them in that order get the same bits for any number of threads.

``kernel_threads``: when numba has a spinning threading layer (jit_setup.py, "numba's threads"),
the step's own parts -- a minibatch's chunks of the vector models, the tensor layout's and AdaGrad's
element ranges -- go to threaded kernels instead, whose hand-over costs microseconds where a Python
pool's costs about 0.1 ms; this is the thread count for them (0: not used, run the parts here).
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from typing import Callable

from rntn_engine.jit_setup import compiled_threads


class PartThreads:
    """``threads`` - 1 pool threads plus the calling thread; no pool with one thread."""

    def __init__(self, threads: int) -> None:
        self.threads = max(1, int(threads))
        self.kernel_threads = self.threads if self.threads > 1 and compiled_threads() is not None else 0
        self._pool = ThreadPoolExecutor(self.threads - 1) if self.threads > 1 else None

    def run(self, work: Callable[[object], object], parts: list) -> list:
        """[work(part) for part in parts], the parts at once on the threads."""
        if self._pool is None or len(parts) < 2:
            return [work(part) for part in parts]
        others = [self._pool.submit(work, part) for part in parts[1:]]
        try:
            first = work(parts[0])
        finally:  # never return, or raise, while a part still runs on shared buffers
            for future in others:
                future.exception()
        return [first] + [future.result() for future in others]

    def close(self) -> None:
        """Stop the pool threads (``run`` still works afterwards, on the calling thread)."""
        if self._pool is not None:
            self._pool.shutdown()
            self._pool = None
