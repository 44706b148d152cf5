"""Refuse an output file that would destroy an input: the one check `rntn predict -o` and
`rntn export-vectors` make before they open their output for writing."""

from __future__ import annotations

import io
import os
import sys

HDF5_SIGNATURE = b"\x89HDF\r\n\x1a\n"


def output_conflict(output: str | os.PathLike, inputs: list[tuple[str, str | os.PathLike]],
                    reads_stdin: bool = False) -> str | None:
    """Why ``output`` must not be written, or None when it may be.

    ``inputs``: (what it is, path) of every file the command reads, e.g. ("the checkpoint being read",
    path). Files are compared by device and inode, so another spelling of the path, a symbolic link or
    a hard link is caught. ``reads_stdin``: the file standard input is redirected from counts as the
    input. Any existing HDF5 file (a checkpoint, or a model file of another run) is refused as well.
    """
    try:
        out = os.stat(output)
    except OSError:
        return None  # it does not exist yet (or cannot be reached: opening it reports that)
    for what, path in inputs:
        try:
            if os.path.samestat(out, os.stat(path)):
                return f"is {what}"
        except OSError:
            continue
    if reads_stdin:
        try:
            if os.path.samestat(out, os.fstat(sys.stdin.fileno())):
                return "is the input (standard input reads it)"
        except (OSError, ValueError, AttributeError, io.UnsupportedOperation):
            pass
    try:
        with open(output, "rb") as f:
            head = f.read(len(HDF5_SIGNATURE))
    except OSError:
        return None
    if head == HDF5_SIGNATURE:
        return "is an HDF5 file (a checkpoint or model file), which is never overwritten"
    return None
