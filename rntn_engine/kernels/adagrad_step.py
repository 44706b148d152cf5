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


@njit(cache=True, nogil=True, parallel=False, fastmath=False, error_model="numpy")
def adagrad_step(theta, G, g, lr, eps):
    """theta (n,) updated in place; G (n,) squared-gradient sums, updated in place; g (n,) gradient."""
    for i in range(theta.shape[0]):
        gi = g[i]
        G[i] += gi * gi
        theta[i] -= lr * gi / (np.sqrt(G[i]) + eps)


@njit(cache=True, nogil=True, parallel=False, fastmath=False, error_model="numpy")
def sum_of_squares(x):
    """sum_i x_i^2 in float64 over x (n,), with eight running sums (independent chains the CPU
    overlaps) added in a fixed order: deterministic, and about eight times faster than one chain."""
    n = x.shape[0]
    s0 = s1 = s2 = s3 = s4 = s5 = s6 = s7 = 0.0
    top = n - n % 8
    for i in range(0, top, 8):
        s0 += np.float64(x[i]) * np.float64(x[i])
        s1 += np.float64(x[i + 1]) * np.float64(x[i + 1])
        s2 += np.float64(x[i + 2]) * np.float64(x[i + 2])
        s3 += np.float64(x[i + 3]) * np.float64(x[i + 3])
        s4 += np.float64(x[i + 4]) * np.float64(x[i + 4])
        s5 += np.float64(x[i + 5]) * np.float64(x[i + 5])
        s6 += np.float64(x[i + 6]) * np.float64(x[i + 6])
        s7 += np.float64(x[i + 7]) * np.float64(x[i + 7])
    for i in range(top, n):
        s0 += np.float64(x[i]) * np.float64(x[i])
    return ((s0 + s1) + (s2 + s3)) + ((s4 + s5) + (s6 + s7))


@njit(cache=True, nogil=True, parallel=False, fastmath=False, error_model="numpy")
def adagrad_l2_step(theta, G, g, lam, lr, eps, update, flush_below):
    """The L2 term, the AdaGrad update and the zeroing of the gradient, over one parameter group.

        gi     = g[i] + lam * theta[i]          (lam has theta's dtype: the same rounding as
                                                 adding lam * theta to the gradient first)
        G     += gi * gi
        theta -= lr * gi / (sqrt(G) + eps)      (skipped when update is False: a frozen group)
        theta  = 0 where |theta| < flush_below  (the caller passes sqrt(smallest normal number),
                                                 so no product of two parameters is subnormal)
        g[i]   = 0                              (the gradient buffer is ready for the next step)

    theta (n,), G (n,), g (n,) in place. Returns sum_i theta_i^2 before the update, in float64,
    for the penalty lam/2 ||theta||^2.
    """
    squares = sum_of_squares(theta)
    if update:
        for i in range(theta.shape[0]):
            gi = g[i] + lam * theta[i]
            G[i] += gi * gi
            t = theta[i] - lr * gi / (np.sqrt(G[i]) + eps)
            # flush near-subnormal numbers to zero: L2 walks unused rows towards 0, and subnormal
            # operands make every later multiply in the kernels many times slower (measured)
            theta[i] = t if abs(t) >= flush_below else 0.0
            g[i] = 0
    else:
        for i in range(theta.shape[0]):
            g[i] = 0
    return squares
