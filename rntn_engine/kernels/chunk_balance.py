"""Cut a minibatch into contiguous chunks of similar work: the cuts behind model/objective.py's split_into_chunks.

Legend: B trees of the minibatch, in the minibatch's order; K chunks asked for.

A chunk's work is modelled as

    work(chunk) = NODE_WORK * (internal nodes of its trees)  +  LEVEL_WORK * levels(chunk)

where levels(chunk) is the height of its tallest tree: the kernels compose a chunk level by
level, and each level pays a fixed cost (one pass over the tensor in the level's product,
the level's loop and call overheads) besides its per-node cost. The cuts minimise the
largest chunk's work over all ways to cut the trees, in order, into at most K pieces
(bisection on that largest work, each candidate checked greedily: a chunk takes trees
while its work stays within it). Everything here is a function of the trees only, never
of the thread count, so results stay bitwise independent of the threads that run the chunks.
"""

from __future__ import annotations

import numpy as np
from rntn_engine.jit_setup import numeric_kernel

# Work of an internal node and of a level, in integers (half a node's work per level). Measured with
# `python scripts/bench_tensor_term.py levels` (training step of one chunk, 1 thread, least squares over
# 300 chunks of 2..19 random trees; 2026-12-02, this project's 2-core machine, shared): a level cost
# 0.5, 0.5, 4.2 and 0.6 internal nodes at d = 25 float32, 25 float64, 50 float32, 50 float64 (per node
# 3.8, 6.0, 21.4, 48.0 us; per level 2.0, 2.9, 89.8, 27.6 us; the d = 50 float32 fit was the noisiest).
NODE_WORK = 2
LEVEL_WORK = 1


@numeric_kernel
def tree_shapes(left, right, start, tree_ids):
    """(internal (B,) int64, height (B,) int64) of the trees ``tree_ids`` of an encoded treebank.

    left/right (total_nodes,) child index local to the tree, -1 at leaves; start (T+1,) int64.
    """
    B = tree_ids.shape[0]
    internal = np.zeros(B, dtype=np.int64)
    height = np.zeros(B, dtype=np.int64)
    widest = 0
    for t in range(B):
        widest = max(widest, start[tree_ids[t] + 1] - start[tree_ids[t]])
    h = np.zeros(widest, dtype=np.int64)  # heights of one tree's nodes, post-order
    for t in range(B):
        a = start[tree_ids[t]]
        n = start[tree_ids[t] + 1] - a
        top = 0
        for i in range(n):
            lc = left[a + i]
            if lc >= 0:
                rc = right[a + i]
                h[i] = 1 + max(h[lc], h[rc])
                internal[t] += 1
            else:
                h[i] = 0
            top = max(top, h[i])
        height[t] = top
    return internal, height


@numeric_kernel
def _chunks_needed(internal, height, limit, node_work, level_work):
    """Chunks the greedy cut needs when no chunk may exceed ``limit`` work."""
    count = 1
    nodes = 0
    tallest = 0
    for t in range(internal.shape[0]):
        n2 = nodes + internal[t]
        t2 = max(tallest, height[t])
        if nodes + tallest > 0 and node_work * n2 + level_work * t2 > limit:  # tree t opens a new chunk
            count += 1
            n2 = internal[t]
            t2 = height[t]
        nodes = n2
        tallest = t2
    return count


@numeric_kernel
def balanced_cuts(internal, height, chunks, node_work, level_work):
    """(k+1,) int64 bounds, k <= chunks: chunk c holds trees bounds[c]..bounds[c+1]-1 (module docstring).

    internal, height (B,) int64 per tree, B >= 1; node_work, level_work: the work of an internal
    node and the fixed work of a level.
    """
    B = internal.shape[0]
    lo = 0  # no chunk can do with less than its largest tree
    hi = 0
    tallest = 0
    for t in range(B):
        lo = max(lo, node_work * internal[t] + level_work * height[t])
        hi += node_work * internal[t]
        tallest = max(tallest, height[t])
    hi += level_work * tallest  # one chunk holding every tree
    while lo < hi:  # smallest largest-work the greedy cut achieves with at most `chunks` chunks
        mid = (lo + hi) // 2
        if _chunks_needed(internal, height, mid, node_work, level_work) <= chunks:
            hi = mid
        else:
            lo = mid + 1
    bounds = np.empty(B + 1, dtype=np.int64)
    bounds[0] = 0
    k = 0
    nodes = 0
    top = 0
    for t in range(B):
        n2 = nodes + internal[t]
        t2 = max(top, height[t])
        if nodes + top > 0 and node_work * n2 + level_work * t2 > lo:
            k += 1
            bounds[k] = t
            n2 = internal[t]
            t2 = height[t]
        nodes = n2
        top = t2
    k += 1
    bounds[k] = B
    return bounds[: k + 1]
