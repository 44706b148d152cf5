#!/usr/bin/env python3
"""A model of data-parallel training over N MPI ranks: seconds per step, efficiency, and the smallest
minibatch that keeps N ranks at a target efficiency.

The step of ``rntn train --mpi`` (model/objective.py, loss_and_gradient): the minibatch of B trees
is cut into K = --grad-chunks chunks; rank r computes chunks r, r + N, ...; every rank sends its
chunks' gradients to every other rank (one allgather); every rank adds all K chunk gradients in
chunk order and takes the same AdaGrad step. With K = N (one chunk per rank, the fewest that
keep every rank busy) and the same K on one process (the same results need the same K):

    T_1 = c B + K rho + a
    T_N = c B / N                                  own chunk, forward and backward
          + (N - 1) (alpha + m / beta)             ring allgather: N - 1 messages of m bytes in, on a
                                                   full-duplex link per rank
          + (N - 1) u + p                          unpack every other chunk, pack one's own
          + N rho + a                              reduction of all N chunks, AdaGrad step
    efficiency E = T_1 / (N T_N)

    c      compute seconds per tree (forward and backward), measured on one rank
    rho    seconds to add one chunk's gradient in the reduction, measured
    a      seconds of one AdaGrad step (dense groups and touched word rows), measured
    m      bytes of one chunk's gradient in the exchange (dense groups, tensor, touched word rows)
    u, p   seconds to unpack / pack one chunk's gradient, measured
    alpha  network latency per message, beta network bandwidth (bytes/s): stated, not measured

E >= e  <=>  c B (1 - e) >= e N X - N rho - a,  X = (N - 1)(alpha + m / beta) + (N - 1) u + p + N rho + a,
so the smallest such B is ceil((e N X - N rho - a) / (c (1 - e))), and at least N (a tree per chunk).

Usage:  python scripts/scaling_model.py [--bench bench_mpi.json] [--efficiency 0.7] [--ranks 8 32 128]
(--bench: the JSON of ``python scripts/bench_mpi.py --json``; without it, the numbers of the README).
"""

from __future__ import annotations

import argparse
import json
import math
from dataclasses import dataclass


@dataclass(frozen=True)
class StepCosts:
    """Measured on one machine (scripts/bench_mpi.py)."""

    per_tree_s: float  # c
    reduce_chunk_s: float  # rho
    adagrad_step_s: float  # a
    message_bytes: float  # m
    unpack_chunk_s: float  # u
    pack_chunk_s: float  # p


@dataclass(frozen=True)
class Network:
    """Stated, not measured."""

    name: str
    bandwidth_bytes_per_s: float  # beta
    latency_s: float  # alpha


# README "MPI": measured by scripts/bench_mpi.py, RNTN d = 50, float64 (update both together)
README_COSTS = StepCosts(per_tree_s=0.686e-3, reduce_chunk_s=0.373e-3, adagrad_step_s=1.002e-3,
                         message_bytes=2103664, unpack_chunk_s=0.164e-3, pack_chunk_s=0.158e-3)
NETWORKS = (
    Network("100 Gb/s InfiniBand-class (10 GB/s, 2 us)", 10e9, 2e-6),
    Network("10 Gb/s Ethernet (1.1 GB/s, 30 us)", 1.1e9, 30e-6),
)


EFFICIENCY_AT = (128, 1024)  # batch sizes whose efficiency is printed too


def seconds_per_step(n_ranks: int, batch: int, costs: StepCosts, network: Network) -> float:
    """T_N of the module docstring: seconds per step on ``n_ranks`` ranks with one chunk each."""
    n = n_ranks
    exchange = (n - 1) * (network.latency_s + costs.message_bytes / network.bandwidth_bytes_per_s)
    copies = (n - 1) * costs.unpack_chunk_s + (costs.pack_chunk_s if n > 1 else 0.0)
    return costs.per_tree_s * batch / n + exchange + copies + n * costs.reduce_chunk_s + costs.adagrad_step_s


def one_rank_seconds(chunks: int, batch: int, costs: StepCosts) -> float:
    """T_1: one process, the same ``chunks`` (K) as the N-rank run."""
    return costs.per_tree_s * batch + chunks * costs.reduce_chunk_s + costs.adagrad_step_s


def efficiency(n_ranks: int, batch: int, costs: StepCosts, network: Network) -> float:
    """E = T_1 / (N T_N), with K = N chunks on both."""
    return one_rank_seconds(n_ranks, batch, costs) / (n_ranks * seconds_per_step(n_ranks, batch, costs, network))


def smallest_batch(n_ranks: int, target: float, costs: StepCosts, network: Network) -> int:
    """The smallest minibatch (trees) with efficiency >= ``target`` on ``n_ranks`` ranks (at least N)."""
    n = n_ranks
    rest = seconds_per_step(n, 0, costs, network)  # X: everything but the trees' own compute
    need = (target * n * rest - n * costs.reduce_chunk_s - costs.adagrad_step_s) / (costs.per_tree_s * (1 - target))
    return max(n, math.ceil(need - 1e-9))


def costs_from_bench(path: str) -> StepCosts:
    parts = json.loads(open(path, encoding="utf-8").read())["summary"]["parts"]
    return StepCosts(parts["compute_per_tree_s"], parts["reduce_one_chunk_s"], parts["adagrad_step_s"],
                     parts["chunk_message_bytes"], parts["unpack_one_chunk_s"], parts["pack_one_chunk_s"])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--bench", help="JSON of scripts/bench_mpi.py --json (default: the README's numbers).")
    parser.add_argument("--efficiency", type=float, default=0.7)
    parser.add_argument("--ranks", type=int, nargs="+", default=[8, 32, 128])
    args = parser.parse_args()
    costs = costs_from_bench(args.bench) if args.bench else README_COSTS
    print(f"costs: c = {1e3 * costs.per_tree_s:.3f} ms/tree, rho = {1e3 * costs.reduce_chunk_s:.3f} ms, "
          f"a = {1e3 * costs.adagrad_step_s:.3f} ms, m = {costs.message_bytes / 1e6:.2f} MB, "
          f"u = {1e3 * costs.unpack_chunk_s:.3f} ms, p = {1e3 * costs.pack_chunk_s:.3f} ms")
    for network in NETWORKS:
        print(f"\n{network.name}")
        print(f"{'ranks':>5} {'batch for E>=' + str(args.efficiency):>15} {'ms/step':>9} {'trees/s':>9}  "
              + "  ".join(f"{'E at ' + str(b):>9}" for b in EFFICIENCY_AT))
        for n in args.ranks:
            batch = smallest_batch(n, args.efficiency, costs, network)
            t = seconds_per_step(n, batch, costs, network)
            print(f"{n:>5} {batch:>15} {1e3 * t:9.1f} {batch / t:9.0f}  "
                  + "  ".join(f"{efficiency(n, b, costs, network):9.2f}" for b in EFFICIENCY_AT))


if __name__ == "__main__":
    main()
