"""Chunks of similar work (kernels/chunk_balance.py, model/objective.py split_into_chunks).

The cut is checked against brute force over every way to cut the trees, in order, into at most
K pieces; the tree shapes against the batch builder's own heights (data/batches.py).
"""

import itertools

import numpy as np
import pytest

from random_trees import engine_case

from rntn_engine.data.batches import make_batch
from rntn_engine.kernels.chunk_balance import LEVEL_WORK, NODE_WORK, balanced_cuts, tree_shapes
from rntn_engine.model.objective import split_into_chunks


def work(internal, height, a, z):
    return NODE_WORK * int(internal[a:z].sum()) + LEVEL_WORK * int(height[a:z].max())


def brute_force_best(internal, height, chunks):
    B = len(internal)
    best = None
    for k in range(1, min(chunks, B) + 1):
        for cuts in itertools.combinations(range(1, B), k - 1):
            bounds = (0, *cuts, B)
            worst = max(work(internal, height, a, z) for a, z in zip(bounds[:-1], bounds[1:]))
            best = worst if best is None else min(best, worst)
    return best


@pytest.mark.parametrize("seed", range(6))
@pytest.mark.parametrize("chunks", [1, 2, 3])
def test_cut_minimises_the_largest_chunk(seed, chunks):
    rng = np.random.default_rng(seed)
    B = int(rng.integers(1, 9))
    internal = rng.integers(0, 60, size=B).astype(np.int64)
    height = np.minimum(internal, rng.integers(1, 30, size=B)).astype(np.int64)
    bounds = balanced_cuts(internal, height, chunks, NODE_WORK, LEVEL_WORK)
    assert bounds[0] == 0 and bounds[-1] == B and np.all(np.diff(bounds) > 0) and len(bounds) - 1 <= chunks
    worst = max(work(internal, height, a, z) for a, z in zip(bounds[:-1], bounds[1:]))
    assert worst == brute_force_best(internal, height, chunks)


def test_tree_shapes_match_the_batch_heights():
    _, bank, _, _, _ = engine_case("rntn", seed=3)
    ids = np.arange(bank.n_trees)[::-1].copy()
    internal, height = tree_shapes(bank.left, bank.right, bank.start, ids)
    for t, tree in enumerate(ids):
        one = make_batch(bank, np.array([tree]))
        assert internal[t] == one.n_internal
        assert height[t] == one.height.max()


def test_chunks_keep_every_tree_in_order():
    _, bank, _, _, _ = engine_case("rntn", seed=1)
    ids = np.random.default_rng(0).permutation(bank.n_trees)
    for chunks in (1, 2, 3, 50):
        parts = split_into_chunks(bank, ids, chunks)
        assert 1 <= len(parts) <= chunks
        whole = make_batch(bank, ids)
        assert sum(p.n_trees for p in parts) == len(ids)
        assert np.array_equal(np.concatenate([p.word for p in parts]), whole.word)
        assert np.array_equal(np.concatenate([p.label for p in parts]), whole.label)
