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

A damaged cache file -- cut short by a full disk, a process killed mid-write, a copied tree --
makes numba's loader raise at the first call of the function, which would stop every command.
On import, this module wraps numba's two cache readers (``Cache.load_overload`` and
``IndexDataCacheFile._load_index``) so that any error while reading the cache is treated as "not
cached": the function is compiled again and the cache rewritten, with a RuntimeWarning. A
read-only or missing cache directory needs nothing: numba then compiles in memory. If a numba
release renames those readers, :data:`CACHE_GUARD_INSTALLED` is False and
tests/test_jit_cache_damage.py fails, so the loss cannot go unnoticed.
"""

from __future__ import annotations

import warnings

from numba import njit
from numba.core import caching

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

_GUARD_MARK = "_rntn_engine_guarded"


def _guard(owner: type, name: str, fallback) -> bool:
    original = getattr(owner, name, None)
    if original is None:
        return False
    if getattr(original, _GUARD_MARK, False):
        return True

    def guarded(self, *args):
        try:
            return original(self, *args)
        except Exception as exc:  # any damage in the cache files: behave as if nothing were cached
            warnings.warn(f"numba cache unreadable ({type(exc).__name__}: {exc}); compiling the kernel again",
                          RuntimeWarning, stacklevel=2)
            return fallback()

    setattr(guarded, _GUARD_MARK, True)
    setattr(owner, name, guarded)
    return True


CACHE_GUARD_INSTALLED = (_guard(getattr(caching, "Cache", object), "load_overload", lambda: None)
                         and _guard(getattr(caching, "IndexDataCacheFile", object), "_load_index", dict))
