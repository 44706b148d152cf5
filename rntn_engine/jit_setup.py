"""Every numba setting of the package, in one place: the flags of our compiled functions, and
what happens when numba's on-disk cache is damaged.

Three kinds of compiled function:

- ``numeric_kernel``: the arithmetic kernels (kernels/). ``parallel=False``: parallelism comes
  from running independent chunks of a minibatch (and fixed element ranges of a group) on
  threads, each with its own buffers, summed in a fixed order, so results never depend on the
  thread count; ``nogil=True`` lets those threads run at once; ``fastmath=False`` keeps IEEE
  arithmetic (bit-reproducible results, NaN and inf propagate); ``error_model="numpy"``: a division
  by zero gives inf or NaN, as in NumPy, instead of a Python exception check in every loop.
  ``inline_kernel``: the same flags, for a small helper inlined into the kernels that call it.
- ``threaded_kernel``: the same flags with ``parallel=True``, for the few kernels whose ``prange``
  loop hands those fixed parts to numba's threads (see "numba's threads" below).
- ``byte_scanner``: the treebank scanners, batch builders and slice masks (data/, run/), integer
  code over bytes, offsets and flags, keeping numba's Python error model (an index or a division error raises);
  ``inline=True`` for the tiny helpers called in their inner loops.

All keep compiled code on disk (``cache=True``): a new process loads instead of compiling.

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

import importlib
import io
import os
import pickletools
import warnings
from functools import cache
from pathlib import Path

from numba import config, njit, set_num_threads

NUMERIC_FLAGS = {"cache": True, "nogil": True, "parallel": False, "fastmath": False, "error_model": "numpy"}
THREADED_FLAGS = dict(NUMERIC_FLAGS, parallel=True)
SCANNER_FLAGS = {"cache": True, "nogil": True}


def numeric_kernel(function):
    """Compile an arithmetic kernel with :data:`NUMERIC_FLAGS`."""
    return njit(**NUMERIC_FLAGS)(function)


def inline_kernel(function):
    """A helper of arithmetic kernels, inlined into them (numba IR inlining): :data:`NUMERIC_FLAGS`."""
    return njit(inline="always", **NUMERIC_FLAGS)(function)


def threaded_kernel(function):
    """Compile a kernel whose ``prange`` loop runs fixed, independent parts (a minibatch's chunks, a
    group's element ranges) on numba's threads: :data:`NUMERIC_FLAGS` with ``parallel=True``. Each
    part runs the serial kernels into elements of its own, so the bits never depend on the thread
    count. Called only through :func:`compiled_threads` (which picks a threading layer) and
    :func:`use_threads`."""
    return njit(**THREADED_FLAGS)(function)


# --- numba's threads ------------------------------------------------------------------------------
# A step hands work to its threads several times (the chunks, then element ranges of the reduction and
# of AdaGrad), each a few hundred microseconds long. Waking a sleeping thread costs about 0.1 ms on the
# virtual machines we measured (a Python thread pool, and numba's own "workqueue" layer: 105-170 us per
# hand-over), which ate most of a second core's gain. The OpenMP and TBB layers keep their threads
# spinning briefly after each parallel loop: 2-7 us per hand-over (ad-hoc timing of an empty 2-part
# prange after 0-1,000 us of serial work, medians of 1,000 calls, 2026-12-02, this project's 2-core
# machine, GNU OpenMP). So the threaded kernels are used only with one of those layers; without them
# the model layer runs the same serial kernels on its Python worker threads (model/part_threads.py).

_SPINNING_LAYERS = (("omp", "numba.np.ufunc.omppool"), ("tbb", "numba.np.ufunc.tbbpool"))


@cache
def compiled_threads() -> str | None:
    """The spinning threading layer the threaded kernels run on ("omp" or "tbb"), or None when neither
    loads, or NUMBA_THREADING_LAYER names another one (the user's choice is kept). Chosen once per
    process, before numba starts its threads."""
    requested = os.environ.get("NUMBA_THREADING_LAYER", "").strip().lower()
    for layer, module in _SPINNING_LAYERS:
        if requested not in ("", "default", layer):
            continue
        try:
            importlib.import_module(module)
        except Exception:  # the layer's library is missing (libgomp, libtbb): try the next
            continue
        config.THREADING_LAYER = layer
        return layer
    return None


def use_threads(threads: int) -> int:
    """Let the calling thread's next threaded kernel use ``threads`` threads (at most numba's pool:
    NUMBA_NUM_THREADS, the machine's cores unless set); returns the number set."""
    threads = max(1, min(int(threads), config.NUMBA_NUM_THREADS))
    set_num_threads(threads)
    return threads


def byte_scanner(function=None, *, inline: bool = False):
    """Compile a scanner with :data:`SCANNER_FLAGS` (``inline=True``: inlined into its callers)."""
    flags = dict(SCANNER_FLAGS, inline="always") if inline else SCANNER_FLAGS
    if function is None:
        return lambda f: njit(**flags)(f)
    return njit(**flags)(function)


# --- a damaged on-disk cache is a cache miss ------------------------------------------------------

_PICKLES_IN = {".nbi": 2, ".nbc": 1}  # complete pickles in a sound index / data file
_DECORATORS = ("@numeric_kernel", "@inline_kernel", "@threaded_kernel", "@byte_scanner")


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
