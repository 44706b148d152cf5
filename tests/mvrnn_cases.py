"""MV-RNN engine cases whose word matrices are far from the identity, for the MV-RNN tests.

At initialisation LM[w] = I + U(-0.01, 0.01): nearly symmetric and nearly the same for
every word, so a kernel that used A^T for A, or one child's matrix for the other's,
would differ only in the second decimal. Tests therefore redraw LM as
I + U(-0.6, 0.6): non-symmetric, different for every word, still well conditioned.
"""

from __future__ import annotations

import numpy as np

from random_trees import engine_case


def mvrnn_case(dtype: str = "float64", dim: int = 3, seed: int = 0, grad_chunks: int = 2, param_scale: float = 2.0):
    """engine_case("mvrnn", ...) with LM redrawn from ``seed`` as I + U(-0.6, 0.6)."""
    params, bank, chunks, full, vocabulary = engine_case("mvrnn", dtype, dim=dim, seed=seed,
                                                         grad_chunks=grad_chunks, param_scale=param_scale)
    noise = np.random.default_rng(seed + 400).uniform(-0.6, 0.6, size=params.LM.shape)
    params.LM[:] = np.eye(dim) + noise
    return params, bank, chunks, full, vocabulary
