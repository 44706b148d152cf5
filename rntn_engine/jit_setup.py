"""Every numba setting of the package, in one place: the flags of our compiled functions, and
what happens when numba's on-disk cache is damaged.

Two kinds of compiled function:

- ``numeric_kernel``: the arithmetic kernels (kernels/). ``parallel=False``: parallelism comes
  from running independent chunks of a minibatch on our own threads, each with its own buffers,
  summed in a fixed order, so results never depend on the thread count; ``nogil=True`` lets those
  threads run at once; ``fastmath=False`` keeps IEEE arithmetic (bit-reproducible results, NaN
  and inf propagate); ``error_model="numpy"``: a division by zero gives inf or NaN, as in NumPy,
  instead of a Python exception check in every loop.
- ``byte_scanner``: the treebank scanners, batch builders and slice masks (data/, run/), integer
  code over bytes, offsets and flags, keeping numba's Python error model (an index or a division error raises);
  ``inline=True`` for the tiny helpers called in their inner loops.

Both keep compiled code on disk (``cache=True``): a new process loads instead of compiling.

A damaged cache file -- cut short by a full disk or a copy, or overwritten -- makes numba's
loader raise at the first call of the function (numba issue 10434, open as of numba 0.68),
which would stop every command. So on import this module checks the cache files of our
compiled functions, using only what numba documents about them: one index file (.nbi) per
function and one data file (.nbc) per compiled signature, "serialized with pickle", kept in
``__pycache__`` beside the source, under ``NUMBA_CACHE_DIR`` when that is set, or in the
user-wide cache directory when the source directory is not writable; and numba "can
tolerate missing cache files". A file that is not complete pickles (an index holds two, a
data file one) is removed, with a RuntimeWarning, and numba compiles the function again
and rewrites it. The check walks pickle opcodes (pickletools) without loading anything:
about 20 ms for the 170 files of a full cache. No numba internals are touched.
"""

from __future__ import annotations

import io
import os
import pickletools
import warnings
from pathlib import Path

from numba import config, njit

NUMERIC_FLAGS = {"cache": True, "nogil": True, "parallel": False, "fastmath": False, "error_model": "numpy"}
SCANNER_FLAGS = {"cache": True, "nogil": True}


def numeric_kernel(function):
    """Compile an arithmetic kernel with :data:`NUMERIC_FLAGS`."""
    return njit(**NUMERIC_FLAGS)(function)


def byte_scanner(function=None, *, inline: bool = False):
    """Compile a scanner with :data:`SCANNER_FLAGS` (``inline=True``: inlined into its callers)."""
    flags = dict(SCANNER_FLAGS, inline="always") if inline else SCANNER_FLAGS
    if function is None:
        return lambda f: njit(**flags)(f)
    return njit(**flags)(function)


# --- a damaged on-disk cache is a cache miss ------------------------------------------------------

_PICKLES_IN = {".nbi": 2, ".nbc": 1}  # complete pickles in a sound index / data file
_DECORATORS = ("@numeric_kernel", "@byte_scanner")


def complete_pickles(data: bytes) -> int:
    """How many complete pickles ``data`` holds end to end; -1 if it ends inside one (or is not pickle)."""
    stream, count = io.BytesIO(data), 0
    try:
        while stream.tell() < len(data):
            for _ in pickletools.genops(stream):  # stops after the STOP opcode
                pass
            count += 1
    except Exception:  # truncated, overwritten or not a pickle at all
        return -1
    return count


def cache_directories(package: Path) -> list[Path]:
    """Where numba may keep the cache files of the package's compiled functions (module docstring)."""
    sources = sorted({p.parent for p in package.rglob("*.py")
                      if any(d in p.read_text(encoding="utf-8") for d in _DECORATORS) and p.name != "jit_setup.py"})
    found = [s / "__pycache__" for s in sources]
    roots = [Path(config.CACHE_DIR)] if config.CACHE_DIR else []
    roots.append(Path(os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache") / "numba")
    for root in roots:  # there numba names a source directory's cache "<its name>_<a hash of its path>"
        if root.is_dir():
            found += [d for s in sources for d in root.glob(f"{s.name}_*") if d.is_dir()]
    return [d for d in found if d.is_dir()]


def drop_damaged_cache_files(package: Path | None = None) -> list[Path]:
    """Remove the package's numba cache files that are not complete pickles; returns what was removed."""
    removed = []
    for directory in cache_directories(package or Path(__file__).parent):
        for path in directory.iterdir():
            want = _PICKLES_IN.get(path.suffix)
            if want is None:
                continue
            try:
                if complete_pickles(path.read_bytes()) == want:
                    continue
                path.unlink()
            except OSError:  # unreadable or not removable (read-only cache): numba reports it itself
                continue
            removed.append(path)
            warnings.warn(f"numba cache file {path} was damaged and is removed; compiling the kernel again",
                          RuntimeWarning, stacklevel=2)
    return removed


DAMAGED_CACHE_FILES_REMOVED = drop_damaged_cache_files()
