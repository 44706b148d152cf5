"""The processes that run one command together: one process alone, or the ranks of an MPI job.

A command runs under MPI only when asked to (``--mpi``; never guessed from the
environment). Every rank then holds the whole model and takes every step; rank 0 alone
writes files and prints. What the ranks exchange, always from all ranks to all ranks:

    allgather_bytes   each rank's bytes, in rank order (chunk results of a step, scores)
    any_true          one combined flag (stop now?), so every rank leaves the loop at the same step
    same_on_all       one value every rank must agree on (the data files' hashes); names a rank that differs

Exchanging in rank order and combining in a fixed order (chunk order) keeps every rank's
arithmetic the same as one process's. If a rank dies, the MPI launcher ends the job;
checkpoints are only ever replaced atomically, so the newest one survives and a resume
(with any number of ranks) continues from it.
"""

from __future__ import annotations

import os
from typing import Any


class ProcessGroupError(RuntimeError):
    """The group cannot run (MPI asked for but not installed, or the ranks disagree); one line."""


class SingleProcess:
    """The group of one process: every collective is the identity."""

    rank = 0
    size = 1
    is_mpi = False

    @property
    def is_root(self) -> bool:
        return self.rank == 0

    def allgather_bytes(self, data: bytes) -> list[bytes]:
        return [data]

    def any_true(self, flag: bool) -> bool:
        return bool(flag)

    def same_on_all(self, value: Any, what: str) -> None:
        return None

    def broadcast(self, value: Any) -> Any:
        return value

    def abort(self, code: int) -> None:
        os._exit(code)


class MpiRanks(SingleProcess):
    """The ranks of MPI_COMM_WORLD (mpi4py)."""

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

    def allgather_bytes(self, data: bytes) -> list[bytes]:
        return self._comm.allgather(bytes(data))

    def any_true(self, flag: bool) -> bool:
        return bool(self._comm.allreduce(1 if flag else 0, op=self._mpi.MAX))

    def same_on_all(self, value: Any, what: str) -> None:
        values = self._comm.allgather(value)
        for rank, other in enumerate(values):
            if other != values[0]:
                raise ProcessGroupError(f"rank {rank} sees a different {what} than rank 0 "
                                        f"({other!r} against {values[0]!r}): every rank needs the same files")

    def broadcast(self, value: Any) -> Any:
        return self._comm.bcast(value, root=0)

    def abort(self, code: int) -> None:
        self._comm.Abort(code)


def process_group(use_mpi: bool) -> SingleProcess:
    """The group this command runs in: MPI ranks when asked for, else one process."""
    return MpiRanks() if use_mpi else SingleProcess()
