"""Kernels: pure numba functions on flat arrays (forward beside backward), and their NumPy twins.

Every kernel is compiled by rntn_engine/jit_setup.py's ``numeric_kernel`` (the flags, and why,
are said there once): parallelism comes from running independent chunks of a minibatch on
separate threads (model layer), each chunk with its own buffers, summed in a fixed order.
"""
