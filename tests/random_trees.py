"""Seeded tiny treebanks for engine tests, with the corner cases that break tree code.

Corner cases always included: a single-word tree, unlabelled nodes, a deep
left-branching chain, a deep right-branching chain, and words unknown to the
vocabulary (they map to the unknown-word row 0).
"""

from __future__ import annotations

import numpy as np

from rntn_engine.data.synthetic_trees import random_binary_tree
from rntn_engine.data.tree import Tree

WORDS = ["moss", "fern", "palm", "glass", "quiet", "lovely", "dull", "not", "very", "bench"]


def random_tree(rng, n_words, num_classes=5, p_unlabelled=0.2, shape="random", words=WORDS) -> Tree:
    return random_binary_tree(rng, n_words, num_classes, words, p_unlabelled, shape)


def corner_case_treebank(seed: int = 0, n_random: int = 6, num_classes: int = 5, max_words: int = 7) -> list[Tree]:
    """Random small trees plus the corner cases listed in the module docstring."""
    rng = np.random.default_rng(seed)
    trees = [random_tree(rng, int(rng.integers(2, max_words + 1)), num_classes) for _ in range(n_random)]
    trees.append(random_tree(rng, 1, num_classes, p_unlabelled=0.0))  # single word
    trees.append(random_tree(rng, 8, num_classes, shape="left"))  # deep left-branching chain
    trees.append(random_tree(rng, 6, num_classes, shape="right"))
    trees.append(random_tree(rng, 3, num_classes, words=["zzz-unseen", "qqq-unseen"]))  # unknown words
    return trees


def engine_case(model: str, dtype: str = "float64", dim: int = 3, num_classes: int = 5, seed: int = 0,
                grad_chunks: int = 2, param_scale: float = 1.0):
    """(params, bank, chunks, full_batch, vocabulary) for a corner-case treebank, parameters drawn from ``seed``.

    The vocabulary leaves out the last tree's words, so they are unknown (row 0).
    ``param_scale`` multiplies the initial parameters, to push tanh out of its linear range.
    """
    from rntn_engine.data.batches import encode_treebank, make_batch
    from rntn_engine.data.vocabulary import build_vocabulary
    from rntn_engine.model.objective import split_into_chunks
    from rntn_engine.model.parameters import ModelShape, init_parameters

    trees = corner_case_treebank(seed, num_classes=num_classes)
    vocabulary = build_vocabulary(trees[:-1], min_count=1)
    bank = encode_treebank(trees, vocabulary)
    shape = ModelShape(model, len(vocabulary), dim, num_classes, dtype)
    params = init_parameters(shape, np.random.default_rng(seed + 100))
    params.flat *= params.flat.dtype.type(param_scale)
    params.b[:] = np.random.default_rng(seed + 200).uniform(-0.5, 0.5, size=params.b.shape)
    params.bs[:] = np.random.default_rng(seed + 300).uniform(-0.5, 0.5, size=params.bs.shape)
    ids = np.arange(bank.n_trees)
    return params, bank, split_into_chunks(bank, ids, grad_chunks), make_batch(bank, ids), vocabulary
