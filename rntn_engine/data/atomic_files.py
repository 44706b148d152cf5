"""The one way this program replaces a file: write a temporary file, then rename it into place.

    1. open  .<final name>.<pid>.rntn-tmp  in the target's own directory (O_EXCL, O_NOFOLLOW:
       never through a symbolic link, never over someone else's file)
    2. write, flush, fsync                        (``durable=False`` skips the fsyncs: for
                                                   heartbeats whose loss is harmless)
    3. rename over the final name                 the commit point: readers see the old file or
                                                   the new one, never a mix
    4. fsync the directory                        the rename itself survives a power cut

Any error before the rename removes the temporary file and leaves the final name as it
was; fsync is never retried (Linux reports a lost write only once). A final name that is
a symbolic link is refused: replacing it would follow a link somebody else planted.
The leftovers of a killed writer match :data:`TEMP_PATTERN` exactly, and
:func:`is_our_temp_file` is the only test the cleaner uses, so a user's own
``notes.h5.backup.tmp`` is never taken for ours.
"""

from __future__ import annotations

import errno
import os
import re
import stat
from contextlib import contextmanager
from pathlib import Path
from typing import BinaryIO, Callable, Iterator

TEMP_SUFFIX = ".rntn-tmp"
TEMP_PATTERN = re.compile(r"^\.(?P<final>[^/]+)\.(?P<pid>[0-9]+)\.rntn-tmp$")
WRITE_BLOCK = 1 << 24  # bytes per os.write call when writing a buffer

# Test-only fault injection (run/fault_injection.py): a callable(point_name) run at named points; None normally.
FaultHook = Callable[[str], None]


def temp_name_for(path: Path) -> Path:
    """The temporary name a write of ``path`` uses: hidden, same directory, our own suffix, our pid."""
    return path.with_name(f".{path.name}.{os.getpid()}{TEMP_SUFFIX}")


def is_our_temp_file(path: Path) -> bool:
    """True exactly for the leftovers of an interrupted write of ours (safe to delete)."""
    return TEMP_PATTERN.match(path.name) is not None


def fsync_directory(directory: Path) -> None:
    fd = os.open(directory, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def refuse_symlink(path: Path) -> None:
    """OSError(ELOOP) when ``path`` is a symbolic link (we never write through one)."""
    try:
        if stat.S_ISLNK(os.lstat(path).st_mode):
            raise OSError(errno.ELOOP, "is a symbolic link; refusing to write through it", str(path))
    except FileNotFoundError:
        pass


@contextmanager
def atomic_output(path: Path | str, durable: bool = True, fault: FaultHook | None = None) -> Iterator[BinaryIO]:
    """A binary file to write; on a clean exit it replaces ``path`` atomically (module docstring).

    Fault points (tests): before_open, before_fsync, before_rename, after_rename.
    """
    path = Path(path)
    hit = fault or (lambda point: None)
    refuse_symlink(path)
    tmp = temp_name_for(path)
    hit("before_open")
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_NOFOLLOW | getattr(os, "O_CLOEXEC", 0), 0o644)
    try:
        with os.fdopen(fd, "wb") as out:
            yield out
            out.flush()
            hit("before_fsync")
            if durable:
                os.fsync(out.fileno())  # an error here fails this write; never retried
        hit("before_rename")
        os.replace(tmp, path)
    except BaseException:
        try:
            tmp.unlink()
        except FileNotFoundError:
            pass
        raise
    hit("after_rename")
    if durable:
        fsync_directory(path.parent)


def write_atomically(path: Path | str, data: bytes | bytearray | memoryview, durable: bool = True,
                     fault: FaultHook | None = None) -> None:
    """Replace ``path`` with ``data`` atomically (see :func:`atomic_output`); also fault point mid_write."""
    view = memoryview(data).cast("B")
    hit = fault or (lambda point: None)
    with atomic_output(path, durable, fault) as out:
        for start in range(0, len(view), WRITE_BLOCK):
            out.write(view[start : start + WRITE_BLOCK])
            if start == 0:
                hit("mid_write")
