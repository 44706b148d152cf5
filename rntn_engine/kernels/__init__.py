"""Kernels: pure numba functions on flat arrays (forward beside backward), and their NumPy twins.

Every kernel states ``cache=True`` and ``parallel=False``: parallelism comes from
running independent chunks of a minibatch on separate threads (model layer),
each chunk with its own buffers, summed in a fixed order.
"""

from rntn_engine.kernels import jit_cache_guard as _jit_cache_guard

_jit_cache_guard.install()
