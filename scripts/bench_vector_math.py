#!/usr/bin/env python3
"""Nanoseconds per element of the kernels' exp and tanh (kernels/vector_math.py) against the C
math library's, called the same way from a compiled loop over an array.

For each dtype and array length: the median of --rounds timings of one pass over the array, for
our functions and for np.tanh / np.exp in the same loop (what the kernels used before). Lengths
25 .. 250,000 cover a level of one node at d = 25 up to a large batch.

Usage:  python scripts/bench_vector_math.py [--lengths 25 325 2500 250000] [--rounds 51]
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np

from rntn_engine.jit_setup import numeric_kernel
from rntn_engine.kernels.vector_math import exp_nonpositive, tanh_value


@numeric_kernel
def own_tanh(out, x):
    for j in range(x.shape[0]):
        out[j] = tanh_value(np.float64(x[j]))


@numeric_kernel
def library_tanh(out, x):
    for j in range(x.shape[0]):
        out[j] = np.tanh(x[j])


@numeric_kernel
def own_exp(out, x):
    for j in range(x.shape[0]):
        out[j] = exp_nonpositive(np.float64(x[j]))


@numeric_kernel
def library_exp(out, x):
    for j in range(x.shape[0]):
        out[j] = np.exp(x[j])


def ns_per_element(fn, out, x, rounds: int) -> float:
    fn(out, x)  # compile or load
    repeat = max(1, 200_000 // x.shape[0])  # about 200k elements a timing: above the timer's resolution
    times = []
    for _ in range(rounds):
        t0 = time.perf_counter()
        for _ in range(repeat):
            fn(out, x)
        times.append((time.perf_counter() - t0) / repeat / x.shape[0] * 1e9)
    return statistics.median(times)


def main(argv: list[str] | None = None) -> list[dict]:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--lengths", type=int, nargs="+", default=[25, 325, 2500, 250_000])
    parser.add_argument("--rounds", type=int, default=51)
    args = parser.parse_args(argv)
    rows = []
    print(f"{'dtype':>8} {'length':>8} {'tanh own':>9} {'tanh lib':>9} {'ratio':>6} {'exp own':>8} {'exp lib':>8} "
          f"{'ratio':>6}   (ns per element, median of {args.rounds})")
    for dtype in (np.float32, np.float64):
        for n in args.lengths:
            rng = np.random.default_rng(0)
            x = (rng.standard_normal(n) * 2).astype(dtype)  # pre-activations of a trained model's size
            y = -np.abs(x) * 3  # softmax arguments s - max(s) <= 0
            out = np.empty_like(x)
            row = {"dtype": np.dtype(dtype).name, "length": n,
                   "tanh_own": ns_per_element(own_tanh, out, x, args.rounds),
                   "tanh_library": ns_per_element(library_tanh, out, x, args.rounds),
                   "exp_own": ns_per_element(own_exp, out, y, args.rounds),
                   "exp_library": ns_per_element(library_exp, out, y, args.rounds)}
            rows.append(row)
            print(f"{row['dtype']:>8} {n:>8} {row['tanh_own']:>9.2f} {row['tanh_library']:>9.2f} "
                  f"{row['tanh_library'] / row['tanh_own']:>6.1f} {row['exp_own']:>8.2f} {row['exp_library']:>8.2f} "
                  f"{row['exp_library'] / row['exp_own']:>6.1f}")
    return rows


if __name__ == "__main__":
    main()
