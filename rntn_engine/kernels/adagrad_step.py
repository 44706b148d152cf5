"""AdaGrad update (AdaGrad, 2011, diagonal form), in place on one parameter group.

Legend: n elements of a dense group (any shape, flattened); for a word array (L, LM),
|V| rows of width w, of which the minibatch touched the r rows ``rows``.

    G     += g * g
    theta -= lr * g / (sqrt(G) + eps)

``g`` is the full gradient of the minibatch objective, L2 term included. Dense groups
(W, b, V, WM, Ws, bs) take lambda * theta on every element. Word arrays take it only in
the rows the minibatch touched, lambda * (theta[w] - anchor[w]) with the anchor 0 or the
row's starting value (model/objective.py states the objective this is the gradient of):
a row no minibatch touches keeps its value and its G bit for bit.
"""

from __future__ import annotations

import numpy as np
from numba import prange

from rntn_engine.jit_setup import inline_kernel, numeric_kernel, threaded_kernel
from rntn_engine.kernels.cache_hints import ROWS_AHEAD, prefetch_row


SQUARE_LANES = 16  # running sums of sum_of_squares: lane t sums x[t], x[t + 16], x[t + 32], ...


@numeric_kernel
def sum_of_squares(x):
    """sum_i x_i^2 in float64 over x (n,), in SQUARE_LANES running sums added in lane order, then the
    last n mod SQUARE_LANES terms: a fixed order for a given n (deterministic, any thread count). The
    loop over a row of lanes has no dependency between its iterations, so LLVM vectorises it (the
    lanes' sums held in SIMD registers): 26 -> 11 us for 62,500 float32 numbers (V at d = 25), against
    eight scalar chains before (ad-hoc timing, medians of 300 calls)."""
    zero = x.dtype.type(0.0)
    return _squares_then_update(x, x, x, zero, zero, zero, zero, False)


@inline_kernel
def _squares_then_update(theta, G, g, lam, lr, eps, flush_below, update):
    """sum_of_squares of theta, and with ``update`` adagrad_l2_step's update of every element in the
    same pass, each element squared before it is updated (inlined into both kernels: ``update`` is a
    constant there and its branch goes away)."""
    n = theta.shape[0]
    acc = np.zeros(SQUARE_LANES)
    # a trip count the compiler cannot fold to a constant: a constant 16 gets the loop unrolled into
    # scalar code (numba leaves LLVM's SLP vectorizer off), a run-time one gets it vectorised
    lanes = max(1, min(SQUARE_LANES, n))
    rows = n // lanes
    for r in range(rows):
        base = r * lanes
        for t in range(lanes):
            i = base + t
            v = np.float64(theta[i])
            acc[t] += v * v
            if update:
                _adagrad_element(theta, G, g, i, lam, lr, eps, flush_below)
    total = 0.0
    for t in range(lanes):
        total += acc[t]
    for i in range(rows * lanes, n):
        v = np.float64(theta[i])
        total += v * v
        if update:
            _adagrad_element(theta, G, g, i, lam, lr, eps, flush_below)
    return total


@inline_kernel
def _adagrad_element(theta, G, g, i, lam, lr, eps, flush_below):
    """One element of adagrad_l2_step's update (inlined into its loops)."""
    gi = g[i] + lam * theta[i]
    G[i] += gi * gi
    t = theta[i] - lr * gi / (np.sqrt(G[i]) + eps)
    # flush near-subnormal numbers to zero: L2 walks unused rows towards 0, and subnormal
    # operands make every later multiply in the kernels many times slower (measured)
    theta[i] = 0.0 if abs(t) < flush_below else t  # (NaN stays NaN: the trainer must see it)
    g[i] = 0


@numeric_kernel
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
    if not update:
        for i in range(theta.shape[0]):
            g[i] = 0
        return sum_of_squares(theta)
    # the sum of squares of theta before the update, in the update's own pass over theta with
    # sum_of_squares's lanes and order: the same bits, one read of theta fewer
    return _squares_then_update(theta, G, g, lam, lr, eps, flush_below, True)


@numeric_kernel
def word_rows_l2(values, theta, rows, anchor, lam):
    """The word-row L2 term of one minibatch, added to its gradient rows.

        values[j] += lam * (theta[rows[j]] - anchor[rows[j]])      (anchor 0 when it has no rows)

    values (r, w) in place; theta (|V|, w); rows (r,) int64; anchor (|V|, w) or (0, w); lam has
    theta's dtype. Returns sum over the rows of ||theta[row] - anchor[row]||^2 in float64, row by
    row (the same order as adagrad_l2_rows_step, so both give the same penalty).
    """
    anchored = anchor.shape[0] > 0
    squares = 0.0
    for j in range(rows.shape[0]):
        r = rows[j]
        for c in range(theta.shape[1]):
            diff = theta[r, c] - anchor[r, c] if anchored else theta[r, c]
            squares += np.float64(diff) * np.float64(diff)
            values[j, c] += lam * diff
    return squares


@numeric_kernel
def adagrad_l2_rows_step(theta, G, rows, values, anchor, lam, lr, eps, update, flush_below):
    """The word-row L2 term, the AdaGrad update and the zeroing of the gradient rows, in one pass.

        gi     = values[j, c] + lam * (theta[r, c] - anchor[r, c])     r = rows[j]; anchor 0 if empty
        G[r]  += gi * gi
        theta[r, c] -= lr * gi / (sqrt(G[r, c]) + eps)                (skipped when update is False)
        theta[r, c]  = 0 where |theta[r, c]| < flush_below             (as in adagrad_l2_step)
        values[j, c] = 0

    theta (|V|, w), G (|V|, w) in place, only at ``rows``; rows (r,) int64 ascending, distinct;
    values (r, w) the data term's gradient of those rows; anchor (|V|, w) or (0, w).
    Returns sum over the rows of ||theta[row] - anchor[row]||^2 before the update, in float64.
    """
    anchored = anchor.shape[0] > 0
    squares = 0.0
    n = rows.shape[0]
    for j in range(n):
        if j + ROWS_AHEAD < n:  # scattered rows: ask for a later one now (kernels/cache_hints.py)
            prefetch_row(theta, rows[j + ROWS_AHEAD])
            prefetch_row(G, rows[j + ROWS_AHEAD])
        r = rows[j]
        for c in range(theta.shape[1]):
            t = theta[r, c]
            diff = t - anchor[r, c] if anchored else t
            squares += np.float64(diff) * np.float64(diff)
            if update:
                gi = values[j, c] + lam * diff
                G[r, c] += gi * gi
                t = t - lr * gi / (np.sqrt(G[r, c]) + eps)
                theta[r, c] = 0.0 if abs(t) < flush_below else t
            values[j, c] = 0
    return squares


@threaded_kernel
def adagrad_l2_step_parts(theta, G, g, lam, lr, eps, update, flush_below, cuts, squares):
    """adagrad_l2_step over each fixed element range cuts[p]..cuts[p+1]-1 of one dense group, the ranges
    on numba's threads; squares (parts,) float64 out: each range's sum of squares (the caller adds them in
    range order). Each element's update depends on that element only: any thread count, the same bits."""
    for p in prange(cuts.shape[0] - 1):
        a = cuts[p]
        z = cuts[p + 1]
        squares[p] = adagrad_l2_step(theta[a:z], G[a:z], g[a:z], lam, lr, eps, update, flush_below)
