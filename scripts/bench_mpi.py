#!/usr/bin/env python3
"""Data-parallel training over MPI ranks: 1 against 2 ranks, each step split into compute, communication, idle.

Generates (once, in a temporary directory) the synthetic treebank of scripts/bench.py, then
launches ``mpiexec -n 1`` and ``mpiexec -n 2`` of this script in worker mode, alternately,
``--rounds`` times per setting, so both rank counts see the same load on a shared machine.
Each worker trains the RNTN (d = --dim, --dtype) for --steps minibatches per timed pass, with
the training loop's own calls (``loss_and_gradient(..., group)`` then
``AdaGrad.step_with_l2``), one thread per rank, after one untimed warm-up pass. Per step:

    idle           time in a barrier just before the exchange: waiting for the slowest rank
    communication  the exchange of chunk gradients itself (MPI allgather, after the barrier)
    compute        everything else: own chunks forward and backward, the reduction of every
                   chunk's gradient in chunk order, the AdaGrad step

Also per rank: compute's CPU seconds per wall second (cpu/wall; below 1.0 the rank waited for a
core that other processes held), and the speed-up over only the 2-rank launches whose ranks all
had their cores (cpu/wall >= 0.9), beside the speed-up of the medians. The speed-up is (seconds per step on 1 rank) / (seconds per step on 2 ranks), both medians
over rounds, measured in the same run. Besides, once on 1 rank: the bytes one chunk's
gradient takes in the exchange, the seconds to add one chunk gradient in the reduction, and
the seconds of one AdaGrad step: the numbers the README's scaling model rests on
(``scaling_model.py`` next to this script).

Usage:  python scripts/bench_mpi.py [--json] [--batch-sizes 16 128] [--rounds 5] [--steps 60]
The machine is shared: quote medians, and say the load (printed: 1-minute load average before
each launch).
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))


class TimedRanks:
    """A process group that times its exchanges: a barrier first (idle), then the allgather (communication)."""

    def __init__(self, group) -> None:
        self.group = group
        self.rank, self.size, self.is_mpi = group.rank, group.size, group.is_mpi
        self.is_root = group.is_root
        self.idle = 0.0
        self.communication = 0.0
        self.exchange_cpu = 0.0  # CPU seconds of this process inside the exchange (MPI polls while it waits)
        self.bytes_sent = 0

    def allgather_views(self, data) -> list[memoryview]:
        c0, t0 = time.process_time(), time.perf_counter()
        if self.group.is_mpi:
            self.group._comm.Barrier()
        t1 = time.perf_counter()
        out = self.group.allgather_views(data)
        t2 = time.perf_counter()
        self.idle += t1 - t0
        self.communication += t2 - t1
        self.exchange_cpu += time.process_time() - c0
        self.bytes_sent += len(data)
        return out


def worker(args) -> None:
    """One rank of a measurement (under mpiexec): prints rank 0's JSON record."""
    from threadpoolctl import threadpool_limits

    from rntn_engine.data.batches import encode_treebank
    from rntn_engine.data.treebank_reader import read_trees
    from rntn_engine.data.vocabulary import build_vocabulary
    from rntn_engine.model.adagrad import AdaGrad
    from rntn_engine.model.objective import TreeModelObjective, split_into_chunks
    from rntn_engine.model.parameters import Gradient, ModelShape, init_parameters
    from rntn_engine.run.process_group import MpiRanks

    group = TimedRanks(MpiRanks())
    trees = read_trees(args.treebank)
    vocab = build_vocabulary(trees, min_count=1)
    bank = encode_treebank(trees, vocab)
    params = init_parameters(ModelShape("rntn", len(vocab), args.dim, 5, args.dtype), np.random.default_rng(0))
    grads = Gradient(params.shape)
    objective = TreeModelObjective(params, threads=1)
    optimiser = AdaGrad(params, 0.01)
    order = np.random.default_rng(1).permutation(bank.n_trees)
    batch = args.batch_size
    batches = [split_into_chunks(bank, order[(i * batch) % bank.n_trees:][:batch], args.chunks)
               for i in range(args.steps)]
    batches = [b for b in batches if sum(c.n_trees for c in b) == batch]
    passes = []
    with threadpool_limits(limits=1, user_api="blas"):
        for p in range(args.passes + 1):  # pass 0 warms up (kernels, workspaces)
            group.idle = group.communication = group.exchange_cpu = 0.0
            group.bytes_sent = 0
            cpu, started = time.process_time(), time.perf_counter()
            for chunks in batches:
                objective.loss_and_gradient(params, grads, chunks, include_l2=False, group=group)
                optimiser.step_with_l2(params, grads, objective.l2)
            wall = time.perf_counter() - started
            cpu = time.process_time() - cpu
            if p:
                # compute's CPU seconds per wall second: below 1, this rank waited for a core (other jobs)
                compute_share = (cpu - group.exchange_cpu) / max(wall - group.idle - group.communication, 1e-9)
                passes.append((wall, group.idle, group.communication, group.bytes_sent, compute_share))
        # parts of the step, timed alone (rank 0's numbers are reported): one chunk's reduction, one AdaGrad step
        objective.loss_and_gradient(params, grads, batches[0], include_l2=False)
        chunk_grads = objective._chunk_grads[: len(batches[0])]
        reduce_times, step_times = [], []
        for _ in range(20):
            t0 = time.perf_counter()
            for own in chunk_grads:  # the dense part of the reduction (model/objective.py, loss_and_gradient)
                for name, g in own.views.items():
                    grads[name] += g
                objective.model.set_layout_gradients(grads, [own.layout])
            reduce_times.append((time.perf_counter() - t0) / len(chunk_grads))
            t0 = time.perf_counter()
            optimiser.step_with_l2(params, grads, objective.l2)
            step_times.append(time.perf_counter() - t0)
        message = chunk_grads[0].packed_size()
        packed = np.empty(message, dtype=np.uint8)
        pack_times, unpack_times = [], []
        for _ in range(20):  # what a rank does with its own chunk, and with each chunk it receives
            t0 = time.perf_counter()
            chunk_grads[0].pack_into(packed)
            t1 = time.perf_counter()
            chunk_grads[-1].unpack(memoryview(packed))
            pack_times.append(t1 - t0)
            unpack_times.append(time.perf_counter() - t1)
    objective.close()
    per_rank = group.group.allgather_bytes(json.dumps(passes).encode())
    if not group.is_root:
        return
    steps = len(batches)
    wall = statistics.median(w for w, *_ in passes)
    per_step = {"wall": wall / steps}
    ranks = [json.loads(p) for p in per_rank]
    # idle and communication: the median pass of every rank, averaged over the ranks
    per_step["idle"] = statistics.mean(statistics.median(x[1] for x in r) for r in ranks) / steps
    per_step["communication"] = statistics.mean(statistics.median(x[2] for x in r) for r in ranks) / steps
    per_step["compute"] = per_step["wall"] - per_step["idle"] - per_step["communication"]
    compute_cpu_per_wall = statistics.mean(statistics.median(x[4] for x in r) for r in ranks)
    print(json.dumps({
        "ranks": group.size, "batch_size": batch, "chunks": args.chunks, "dim": args.dim, "dtype": args.dtype,
        "steps": steps, "seconds_per_step": per_step, "compute_cpu_per_wall": compute_cpu_per_wall, "trees_per_s": batch / per_step["wall"],
        "bytes_sent_per_step": passes[-1][3] / steps,
        "chunk_message_bytes": message,
        "reduce_one_chunk_s": statistics.median(reduce_times),
        "adagrad_step_s": statistics.median(step_times),
        "pack_one_chunk_s": statistics.median(pack_times),
        "unpack_one_chunk_s": statistics.median(unpack_times),
    }))


def make_treebank(directory: Path, n_trees: int) -> Path:
    from bench import synthetic_treebank

    path = directory / "bench-mpi.trees"
    synthetic_treebank(path, n_trees, 20000, seed=0)
    return path


def launch(mpiexec: str, ranks: int, treebank: Path, batch: int, args) -> dict:
    command = [mpiexec, "-n", str(ranks), sys.executable, str(Path(__file__).resolve()), "--worker",
               "--treebank", str(treebank), "--batch-size", str(batch), "--chunks", str(args.chunks),
               "--dim", str(args.dim), "--dtype", args.dtype, "--steps", str(args.steps),
               "--passes", str(args.passes)]
    env = dict(os.environ, OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1", MKL_NUM_THREADS="1")
    load = os.getloadavg()[0]
    done = subprocess.run(command, capture_output=True, text=True, env=env, check=True)
    record = json.loads(done.stdout.strip().splitlines()[-1])
    record["load_1min_before"] = load
    return record


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--worker", action="store_true", help=argparse.SUPPRESS)
    parser.add_argument("--treebank", type=Path, help="Treebank file (default: generated).")
    parser.add_argument("--trees", type=int, default=2000, help="Trees of the generated treebank.")
    parser.add_argument("--batch-sizes", type=int, nargs="+", default=[16, 128],
                        help="Minibatch sizes (16 is the default of rntn train).")
    parser.add_argument("--batch-size", type=int, default=16, help=argparse.SUPPRESS)
    parser.add_argument("--chunks", type=int, default=2, help="--grad-chunks (2 is the default of rntn train).")
    parser.add_argument("--dim", type=int, default=50)
    parser.add_argument("--dtype", default="float64")
    parser.add_argument("--steps", type=int, default=60, help="Minibatches per timed pass.")
    parser.add_argument("--passes", type=int, default=3, help="Timed passes per launch (median).")
    parser.add_argument("--rounds", type=int, default=5, help="Launches per rank count and batch size (median).")
    parser.add_argument("--json", action="store_true", help="Print JSON records instead of the table.")
    args = parser.parse_args()
    if args.worker:
        worker(args)
        return
    mpiexec = shutil.which("mpiexec")
    if mpiexec is None:
        sys.exit("bench_mpi: needs mpiexec (python3 -m pip install 'rntn_engine[mpi]')")
    started = datetime.now(timezone.utc)
    with tempfile.TemporaryDirectory(prefix="rntn-bench-mpi-") as tmp:
        treebank = args.treebank or make_treebank(Path(tmp), args.trees)
        records = []
        for batch in args.batch_sizes:
            for _ in range(args.rounds):
                for ranks in (1, 2):  # alternately: the same load for both
                    records.append(launch(mpiexec, ranks, treebank, batch, args))
    summary = summarise(records, args)
    if args.json:
        print(json.dumps({"records": records, "summary": summary}, indent=2))
        return
    print(f"bench_mpi: {platform.node()}, {os.cpu_count()} cores, Python {platform.python_version()}, "
          f"{started:%Y-%m-%d %H:%M} UTC")
    print("command: python scripts/bench_mpi.py " + " ".join(sys.argv[1:]))
    print(f"RNTN d={args.dim} {args.dtype}, --grad-chunks {args.chunks}, one thread per rank, "
          f"{args.steps} minibatches per pass, median of {args.passes} passes per launch, "
          f"median of {args.rounds} launches")
    header = f"{'batch':>5} {'ranks':>5} {'ms/step':>8} {'compute':>8} {'comm':>7} {'idle':>7} {'trees/s':>8} " \
             f"{'speed-up':>8} {'cpu/wall':>8} {'load':>9}"
    print(header)
    for row in summary["rows"]:
        print(f"{row['batch_size']:>5} {row['ranks']:>5} {1e3 * row['wall']:8.2f} {1e3 * row['compute']:8.2f} "
              f"{1e3 * row['communication']:7.2f} {1e3 * row['idle']:7.2f} {row['trees_per_s']:8.1f} "
              f"{row.get('speed_up', float('nan')):8.2f} {row['compute_cpu_per_wall']:8.2f} "
              f"{row['load_min']:4.1f}-{row['load_max']:<4.1f}")
    for row in summary["rows"]:
        if row["ranks"] == 2:
            print(f"batch {row['batch_size']}: speed-up over the {row['free_core_launches']} 2-rank launch(es) in "
                  f"which both ranks had their cores (cpu/wall >= {FREE_CORE}): {row['speed_up_free_cores']:.2f}")
    parts = summary["parts"]
    print(f"one chunk's gradient in the exchange: {parts['chunk_message_bytes']} bytes; adding one chunk "
          f"gradient: {1e3 * parts['reduce_one_chunk_s']:.3f} ms; one AdaGrad step: "
          f"{1e3 * parts['adagrad_step_s']:.3f} ms; pack one chunk {1e3 * parts['pack_one_chunk_s']:.3f} ms, "
          f"unpack one {1e3 * parts['unpack_one_chunk_s']:.3f} ms; compute per tree on 1 rank (batch "
          f"{parts['batch_size']}): {1e3 * parts['compute_per_tree_s']:.3f} ms")


FREE_CORE = 0.9  # compute's CPU seconds per wall second above which a rank counts as having had its core


def summarise(records: list[dict], args) -> dict:
    rows = []
    for batch in args.batch_sizes:
        for ranks in (1, 2):
            mine = [r for r in records if r["batch_size"] == batch and r["ranks"] == ranks]
            med = {k: statistics.median(r["seconds_per_step"][k] for r in mine)
                   for k in ("wall", "compute", "communication", "idle")}
            rows.append({"batch_size": batch, "ranks": ranks, **med, "trees_per_s": batch / med["wall"],
                         "compute_cpu_per_wall": statistics.median(r["compute_cpu_per_wall"] for r in mine),
                         "load_min": min(r["load_1min_before"] for r in mine),
                         "load_max": max(r["load_1min_before"] for r in mine)})
        one, two = rows[-2], rows[-1]
        two["speed_up"] = one["wall"] / two["wall"]
        # the same, over the 2-rank launches in which every rank had its core (compute cpu/wall >= 0.9)
        free = [r["seconds_per_step"]["wall"] for r in records if r["batch_size"] == batch and r["ranks"] == 2
                and r["compute_cpu_per_wall"] >= FREE_CORE]
        two["free_core_launches"] = len(free)
        two["speed_up_free_cores"] = one["wall"] / statistics.median(free) if free else float("nan")
    single = [r for r in records if r["ranks"] == 1]
    largest = max(args.batch_sizes)
    big = [r for r in single if r["batch_size"] == largest]
    parts = {
        "chunk_message_bytes": single[0]["chunk_message_bytes"],
        "reduce_one_chunk_s": statistics.median(r["reduce_one_chunk_s"] for r in single),
        "adagrad_step_s": statistics.median(r["adagrad_step_s"] for r in single),
        "pack_one_chunk_s": statistics.median(r["pack_one_chunk_s"] for r in single),
        "unpack_one_chunk_s": statistics.median(r["unpack_one_chunk_s"] for r in single),
        "batch_size": largest,
        # the batch's own work per tree: the step minus the reduction of its chunks and the AdaGrad step
        "compute_per_tree_s": statistics.median(
            (r["seconds_per_step"]["compute"] - args.chunks * r["reduce_one_chunk_s"] - r["adagrad_step_s"])
            / largest for r in big),
    }
    return {"rows": rows, "parts": parts}


if __name__ == "__main__":
    main()
