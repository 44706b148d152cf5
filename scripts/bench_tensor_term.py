#!/usr/bin/env python3
"""Measure what two constants of the training kernels are chosen from.

1. ``widths``: GFLOP/s of one level's tensor term (Q = X Vsym and h, kernels/tensor_term.py)
   by level width n, the own register-blocked kernel against BLAS, for each vector size and
   dtype: the crossover is OWN_KERNEL_ROWS. Best of --rounds timings (the machine is shared;
   the fastest round is the one least disturbed), 2 d D^2 n floating-point operations per call.
2. ``levels``: the fixed cost of a level against the cost of an internal node in a training
   step (forward + backward of one chunk, 1 thread), fitted by least squares over chunks of
   random trees from the synthetic treebank of scripts/bench.py: their ratio is LEVEL_WORK
   (kernels/chunk_balance.py).

Usage:  python scripts/bench_tensor_term.py [widths] [levels] [--dims 25 50] [--dtypes float32 float64]
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench import synthetic_treebank  # noqa: E402  the benchmark's own corpus

from rntn_engine.data.batches import encode_treebank, make_batch  # noqa: E402
from rntn_engine.data.treebank_reader import read_trees  # noqa: E402
from rntn_engine.data.vocabulary import build_vocabulary  # noqa: E402
from rntn_engine.kernels.tensor_term import (  # noqa: E402
    NODE_BLOCK,
    TILE,
    tensor_term_forward_blas,
    tensor_term_forward_own,
)
from rntn_engine.kernels.tree_compose import symmetric_tensor_layout  # noqa: E402
from rntn_engine.model.objective import TreeModelObjective  # noqa: E402
from rntn_engine.model.parameters import Gradient, ModelShape, init_parameters  # noqa: E402

WIDTHS = (1, 2, 3, 4, 8, 16, 32)


def best_of(fn, calls: int, rounds: int) -> float:
    """Fastest mean seconds per call over ``rounds`` rounds of ``calls`` calls."""
    best = float("inf")
    for _ in range(rounds):
        t0 = time.perf_counter()
        for _ in range(calls):
            fn()
        best = min(best, (time.perf_counter() - t0) / calls)
    return best


def widths(dims, dtypes, rounds: int) -> None:
    print(f"# GFLOP/s of one level's tensor term (Q and h), own / BLAS, best of {rounds}; 1 thread")
    print("# n = " + "  ".join(f"{n:>7}" for n in WIDTHS))
    for d in dims:
        for dtype in dtypes:
            D = 2 * d
            rng = np.random.default_rng(0)
            V = (0.01 * rng.standard_normal((d, D, D))).astype(dtype)
            Vsym = np.zeros((D, d * D), dtype=dtype)
            symmetric_tensor_layout(Vsym, V)
            hv = np.empty(d, dtype=dtype)
            acc = np.empty((NODE_BLOCK, TILE), dtype=dtype)
            cells = []
            for n in WIDTHS:
                X = rng.standard_normal((n, D)).astype(dtype)
                Q = np.empty((n, d * D), dtype=dtype)
                Z = np.zeros((n, d), dtype=dtype)
                calls = max(3, int(4e6 / (n * d * D * D)))
                own = best_of(lambda: tensor_term_forward_own(Z, Q, X, Vsym, hv, acc, 0, n, 0), calls, rounds)
                blas = best_of(lambda: tensor_term_forward_blas(Z, Q, X, Vsym, hv, 0, n, 0), calls, rounds)
                flops = 2.0 * n * d * D * D
                cells.append(f"{flops / own / 1e9:3.0f}/{flops / blas / 1e9:<3.0f}")
            print(f"d={d} {dtype:7s} " + "  ".join(f"{c:>7}" for c in cells), flush=True)


def levels(dims, dtypes, rounds: int, chunks: int, trees: int) -> None:
    with tempfile.TemporaryDirectory(prefix="rntn-bench-tt-") as tmp:
        path = Path(tmp) / "synthetic.trees"
        synthetic_treebank(path, trees, 20000, seed=0)
        parsed = read_trees(path)
    vocab = build_vocabulary(parsed, min_count=1)
    bank = encode_treebank(parsed, vocab)
    rng = np.random.default_rng(5)
    batches = [make_batch(bank, rng.choice(bank.n_trees, size=int(rng.integers(2, 20)), replace=False))
               for _ in range(chunks)]
    A = np.array([[b.n_internal, len(b.level_start) - 1, 1.0] for b in batches])
    print(f"# training step of one chunk (1 thread), best of {rounds}, least squares over {chunks} chunks "
          f"of 2..19 random trees")
    for d in dims:
        for dtype in dtypes:
            params = init_parameters(ModelShape("rntn", len(vocab), d, 5, dtype), np.random.default_rng(0))
            grads = Gradient(params.shape)
            objective = TreeModelObjective(params, threads=1)
            seconds = []
            for b in batches:
                objective.loss_and_gradient(params, grads, [b], include_l2=False)  # grow the buffers
                seconds.append(best_of(lambda: objective.loss_and_gradient(params, grads, [b], include_l2=False),
                                       1, rounds))
            objective.close()
            (node, level, fixed), *_ = np.linalg.lstsq(A, np.array(seconds), rcond=None)
            print(f"d={d} {dtype:7s} per internal node {node * 1e6:6.2f} us, per level {level * 1e6:6.2f} us, "
                  f"per chunk {fixed * 1e6:6.1f} us: level / node = {level / node:.1f}", flush=True)


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("parts", nargs="*", default=["widths", "levels"], help="widths, levels (default: both)")
    parser.add_argument("--dims", type=int, nargs="+", default=[25, 50])
    parser.add_argument("--dtypes", nargs="+", default=["float32", "float64"])
    parser.add_argument("--rounds", type=int, default=9, help="timing rounds; the best is kept")
    parser.add_argument("--chunks", type=int, default=300, help="chunks of random trees in the level fit")
    parser.add_argument("--trees", type=int, default=2000, help="trees of the synthetic treebank")
    args = parser.parse_args(argv)
    unknown = set(args.parts) - {"widths", "levels"}
    if unknown:
        parser.error(f"unknown part {sorted(unknown)[0]!r}: expected widths or levels")
    with threadpool_limits(limits=1, user_api="blas"):
        if "widths" in args.parts:
            widths(args.dims, args.dtypes, args.rounds)
        if "levels" in args.parts:
            levels(args.dims, args.dtypes, args.rounds, args.chunks, args.trees)


if __name__ == "__main__":
    main()
