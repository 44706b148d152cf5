"""AdaGrad update (Duchi, Hazan & Singer 2011, diagonal form), in place on one parameter group.

Legend: n elements of the group (any shape, flattened).

    G     += g * g
    theta -= lr * g / (sqrt(G) + eps)

``g`` is the full gradient of the minibatch objective, L2 term included (the
objective adds lambda * theta for every element of a regularised group, so rows
of L that the minibatch did not touch still decay, every step: see model/objective.py).
"""

from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True, nogil=True, parallel=False, fastmath=False)
def adagrad_step(theta, G, g, lr, eps):
    """theta (n,) updated in place; G (n,) squared-gradient sums, updated in place; g (n,) gradient."""
    for i in range(theta.shape[0]):
        gi = g[i]
        G[i] += gi * gi
        theta[i] -= lr * gi / (np.sqrt(G[i]) + eps)
