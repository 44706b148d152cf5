"""The processes that run one command together: one process alone, or the ranks of an MPI job.

A command runs under MPI only when asked to (``--mpi``; never guessed from the
environment). Every rank then holds the whole model and takes every step; rank 0 alone
writes files and prints. What the ranks exchange, always from all ranks to all ranks,
through MPI's buffer interface (raw bytes and numbers: nothing is pickled):

    allgather_bytes   each rank's bytes, in rank order (scores, hashes); allgather_views, the same
                      as views of one reused buffer, valid until the next exchange (the chunk
                      gradients of a step: no copy)
    largest           the largest of the ranks' numbers: one combined status per step (go on,
                      stop, or rank 0 failed to write), so every rank leaves the loop together
    broadcast_text    rank 0's text (a JSON value) to every rank
    same_on_all       one value every rank must agree on (the data files' hashes); names a rank
                      that differs

Exchanging in rank order and combining in a fixed order (chunk order) keeps every rank's
arithmetic the same as one process's. If a rank dies, the MPI launcher ends the job;
checkpoints are only ever replaced atomically, so the newest one survives and a resume
(with any number of ranks) continues from it.
"""

from __future__ import annotations

import json
from typing import Any, Callable, TypeVar

import numpy as np

T = TypeVar("T")


class ProcessGroupError(RuntimeError):
    """The group cannot run (MPI asked for but not installed, or the ranks disagree); one line."""


class PeerStopped(RuntimeError):
    """Raised on the other ranks when rank 0 met an error it reports itself: exit with ``code``, print nothing."""

    def __init__(self, code: int = 1) -> None:
        super().__init__(f"rank 0 stopped the job (exit code {code})")
        self.code = code


class SingleProcess:
    """The group of one process: every collective is the identity."""

    rank = 0
    size = 1
    is_mpi = False

    @property
    def is_root(self) -> bool:
        return self.rank == 0

    def allgather_bytes(self, data: bytes) -> list[bytes]:
        return [bytes(v) for v in self.allgather_views(data)]

    def allgather_views(self, data) -> list[memoryview]:
        return [memoryview(bytes(data))]

    def largest(self, value: int) -> int:
        return int(value)

    def any_true(self, flag: bool) -> bool:
        return self.largest(1 if flag else 0) > 0

    def broadcast_text(self, text: str | None) -> str:
        return text or ""

    def same_on_all(self, value: Any, what: str) -> None:
        texts = [t.decode("utf-8") for t in self.allgather_bytes(json.dumps(value, sort_keys=True).encode("utf-8"))]
        for rank, text in enumerate(texts):
            if text != texts[0]:
                if not self.is_root:
                    raise PeerStopped(1)  # rank 0 says it, once
                raise ProcessGroupError(f"rank {rank} sees a different {what} than rank 0 ({json.loads(text)} "
                                        f"against {json.loads(texts[0])}): every rank needs the same files")

    def all_now(self, action: Callable[[], T]) -> T:
        """Run ``action`` on every rank; if it fails on any rank, every rank raises (a failing rank its own
        error, the others :class:`PeerStopped`), so no rank is left waiting in a later exchange (a data
        file missing on one node, say)."""
        error: BaseException | None = None
        result = None
        try:
            result = action()
        except Exception as exc:  # re-raised below, after every rank knows
            error = exc
        if self.any_true(error is not None):
            if error is not None:
                raise error
            raise PeerStopped(1)
        return result

    def root_now(self, action: Callable[[], T]) -> T | None:
        """Run ``action`` on rank 0 only, now; if it fails, every rank raises (rank 0 its own error)."""
        return self.all_now(action if self.is_root else lambda: None)


class MpiRanks(SingleProcess):
    """The ranks of MPI_COMM_WORLD (mpi4py, buffer interface only)."""

    is_mpi = True

    def __init__(self) -> None:
        try:
            from mpi4py import MPI
        except ImportError:
            raise ProcessGroupError("--mpi needs mpi4py and an MPI library: python3 -m pip install "
                                    "'rntn_engine[mpi]' (or mpi4py with your cluster's MPI), then run the "
                                    "command under mpiexec or your scheduler's launcher") from None
        self._mpi = MPI
        self._comm = MPI.COMM_WORLD
        self.rank = self._comm.Get_rank()
        self.size = self._comm.Get_size()
        self._received = np.empty(0, dtype=np.uint8)  # allgather_views' buffer, reused

    def allgather_views(self, data) -> list[memoryview]:
        mine = np.frombuffer(data, dtype=np.uint8)  # bytes or a uint8 array: no copy
        sizes = np.zeros(self.size, dtype=np.int64)
        self._comm.Allgather(np.array([mine.size], dtype=np.int64), sizes)
        total = int(sizes.sum())
        if self._received.size < total:  # grows once: no fresh pages every step
            self._received = np.empty(total, dtype=np.uint8)
        self._comm.Allgatherv(mine, [self._received[:total], sizes, np.concatenate([[0], np.cumsum(sizes)[:-1]]),
                                     self._mpi.BYTE])
        starts = np.concatenate([[0], np.cumsum(sizes)])
        whole = memoryview(self._received)
        return [whole[starts[r] : starts[r + 1]] for r in range(self.size)]

    def largest(self, value: int) -> int:
        out = np.zeros(1, dtype=np.int64)
        self._comm.Allreduce(np.array([int(value)], dtype=np.int64), out, op=self._mpi.MAX)
        return int(out[0])

    def broadcast_text(self, text: str | None) -> str:
        data = np.frombuffer((text or "").encode("utf-8"), dtype=np.uint8) if self.is_root else None
        size = np.array([data.size if data is not None else 0], dtype=np.int64)
        self._comm.Bcast(size, root=0)
        buffer = data.copy() if data is not None else np.empty(int(size[0]), dtype=np.uint8)
        self._comm.Bcast(buffer, root=0)
        return buffer.tobytes().decode("utf-8")

    def abort(self, code: int) -> None:
        self._comm.Abort(code)


def process_group(use_mpi: bool) -> SingleProcess:
    """The group this command runs in: MPI ranks when asked for, else one process."""
    return MpiRanks() if use_mpi else SingleProcess()
