"""Make a damaged numba on-disk cache a cache miss instead of a crash.

numba (``cache=True``) keeps compiled kernels in index (.nbi) and data (.nbc) files.
A file cut short -- a full disk, a process killed mid-write, a copied tree -- makes
numba's loader raise (an unpickling error) at the first call of the kernel, which
would stop every command. This wraps numba's ``Cache.load_overload`` and
``IndexDataCacheFile._load_index`` so that any error while *reading* the cache is
treated like "not cached": the kernel is compiled again and the cache rewritten. A read-only or missing cache directory needs nothing:
numba then compiles in memory. Installed once, when the kernels package is imported.
"""

from __future__ import annotations

import warnings

from numba.core import caching

_INSTALLED_FLAG = "_rntn_engine_guarded"


def _guard(owner: type, name: str, fallback) -> None:
    original = getattr(owner, name, None)
    if original is None or getattr(original, _INSTALLED_FLAG, False):
        return

    def guarded(self, *args):
        try:
            return original(self, *args)
        except Exception as exc:  # any damage in the cache files: behave as if nothing were cached
            warnings.warn(f"numba cache unreadable ({type(exc).__name__}: {exc}); compiling the kernel again",
                          RuntimeWarning, stacklevel=2)
            return fallback()

    setattr(guarded, _INSTALLED_FLAG, True)
    setattr(owner, name, guarded)


def install() -> None:
    """Guard numba's cache readers (no-op for numba versions without these internals)."""
    if hasattr(caching, "Cache"):
        _guard(caching.Cache, "load_overload", lambda: None)
    if hasattr(caching, "IndexDataCacheFile"):
        _guard(caching.IndexDataCacheFile, "_load_index", dict)
