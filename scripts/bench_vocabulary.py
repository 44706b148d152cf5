#!/usr/bin/env python3
"""Benchmark: does a training step cost what its minibatch touches, whatever the vocabulary size?

Trains an RNTN (d = 50 by default, float32, the default batch and chunks) on the same
trees -- the demo training treebank, 3,000 trees, by default -- with vocabularies of about 1,000, 100,000 and
1,000,000 rows. The rows beyond the training words come from a generated word2vec binary
file (its first words are the training words, then made-up ones), through the same path
`rntn train --vectors F --extend-vocabulary N` takes. For each size it measures, in a
fresh process:

  * seconds per epoch of training steps (data term, word-row L2, AdaGrad: the training
    loop's own calls): the fastest of --epochs epochs in a process (load from other
    processes only ever adds time), median over --repeats processes, sizes interleaved so
    that machine noise hits them alike; the ratio to the smallest vocabulary;
  * the process's peak resident memory (VmHWM);
  * the time of one checkpoint save, which holds L and its AdaGrad sums and so grows
    with the vocabulary (reported apart: it runs at epoch ends and by the clock, not per step).

Usage:  python scripts/bench_vocabulary.py [--rows 1000 100000 1000000] [--repeats 3] [--epochs 3] [--dim 50] [--json]
The machine is shared: quote medians, and ratios from one run.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
TRAIN = ROOT / "data_demo" / "garden_train.trees"
DIM = 50


def generate_vector_file(path: Path, rows: int, train: Path, dim: int, seed: int = 0) -> None:
    """word2vec binary: the training words first (most frequent first), then made-up words up to ``rows``."""
    from rntn_engine.data.treebank_reader import read_trees
    from rntn_engine.data.vocabulary import build_vocabulary
    from rntn_engine.data.word_vector_writers import write_word2vec_binary

    train_words = list(build_vocabulary(read_trees(train), min_count=1).words[1:])
    words = train_words + [f"bloom{i:07d}" for i in range(rows - len(train_words))]
    vectors = np.random.default_rng(seed).standard_normal((len(words), dim), dtype=np.float32) * np.float32(0.3)
    write_word2vec_binary(path, words, vectors)


def peak_rss_mb() -> float:
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024
    return float("nan")


def worker(vectors: Path, extend: int, train: Path, epochs: int) -> dict:
    """One process, one vocabulary size: a warm-up, ``epochs`` timed epochs (the fastest counts), a save."""
    from rntn_engine.model.adagrad import AdaGrad
    from rntn_engine.model.objective import L2Strengths, TreeModelObjective, split_into_chunks
    from rntn_engine.model.parameters import Gradient, ModelShape, init_parameters
    from rntn_engine.run.checkpoints import save_checkpoint
    from rntn_engine.run.pretrained_start import initial_word_vectors, resolve_dim
    from rntn_engine.run.run_config import TrainConfig
    from rntn_engine.run.trainer import epoch_order, load_training_data

    config = TrainConfig(train_file=str(train), vectors_file=str(vectors), vectors_format="word2vec-binary",
                         extend_vocabulary=extend, model="rntn", dtype="float32").validate()
    resolve_dim(config)
    data = load_training_data(config)
    bank = data.train
    shape = ModelShape(config.model, len(data.vocabulary), config.dim, config.num_classes, config.dtype)
    params = init_parameters(shape, np.random.default_rng(config.seed))
    params.L[:] = initial_word_vectors(config, data.vocabulary, bank, params.flat.dtype, lambda line: None)
    l2 = L2Strengths(words=config.l2_words, compose=config.l2_compose, tensor=config.l2_tensor,
                     classifier=config.l2_classifier, word_matrices=config.l2_word_matrices)
    objective = TreeModelObjective(params, l2, threads=config.threads)
    optimiser = AdaGrad(params, config.lr, config.adagrad_eps)
    grads = Gradient(shape)

    def steps(order: np.ndarray) -> None:  # the training loop's own calls (run/trainer.py)
        for a in range(0, len(order), config.batch_size):
            chunks = split_into_chunks(bank, order[a : a + config.batch_size], config.grad_chunks)
            objective.loss_and_gradient(params, grads, chunks, include_l2=False)
            optimiser.step_with_l2(params, grads, l2)

    steps(epoch_order(config.seed, 0, bank.n_trees)[: 20 * config.batch_size])  # warm-up: kernels, workspaces
    epoch_times = []
    for epoch in range(1, 1 + epochs):
        t0 = time.perf_counter()
        steps(epoch_order(config.seed, epoch, bank.n_trees))
        epoch_times.append(time.perf_counter() - t0)
    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        save_checkpoint(Path(tmp) / "c.h5", params, data.vocabulary, config, optimiser.sums, {}, [], {})
        save_seconds = time.perf_counter() - t0
    objective.close()
    # the fastest epoch: other processes on a shared machine only ever add time
    return {"rows": len(data.vocabulary), "trees": bank.n_trees, "epoch_seconds": min(epoch_times),
            "save_seconds": save_seconds, "peak_rss_mb": peak_rss_mb()}


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, nargs="+", default=[1000, 100_000, 1_000_000],
                        help="vocabulary sizes (approximate: training words plus the vector file's first words)")
    parser.add_argument("--repeats", type=int, default=3, help="processes per size (median)")
    parser.add_argument("--epochs", type=int, default=3, help="timed epochs per process (the fastest counts)")
    parser.add_argument("--train-file", type=Path, default=TRAIN, help="training treebank (default: the demo's)")
    parser.add_argument("--dim", type=int, default=DIM, help="vector size d")
    parser.add_argument("--json", action="store_true", help="print one JSON object")
    parser.add_argument("--worker", nargs=2, metavar=("VECTORS", "EXTEND"), help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.worker:
        print(json.dumps(worker(Path(args.worker[0]), int(args.worker[1]), args.train_file, args.epochs)))
        return 0

    results: dict[int, list[dict]] = {n: [] for n in args.rows}
    with tempfile.TemporaryDirectory() as tmp:
        vectors = Path(tmp) / "generated.w2v.bin"
        t0 = time.perf_counter()
        generate_vector_file(vectors, max(args.rows), args.train_file, args.dim)
        if not args.json:
            print(f"generated {vectors.stat().st_size / 2**20:.0f} MB vector file ({max(args.rows):,} x {args.dim}) "
                  f"in {time.perf_counter() - t0:.1f} s", file=sys.stderr)
        for repeat in range(args.repeats):
            for n in args.rows:  # interleaved: noise of the shared machine falls on every size alike
                done = subprocess.run([sys.executable, __file__, "--worker", str(vectors), str(n),
                                       "--train-file", str(args.train_file), "--epochs", str(args.epochs)],
                                      capture_output=True, text=True, check=True, env=os.environ)
                results[n].append(json.loads(done.stdout.strip().splitlines()[-1]))
                if not args.json:
                    r = results[n][-1]
                    print(f"  pass {repeat + 1}: {r['rows']:>9,} rows  {r['epoch_seconds']:.2f} s/epoch",
                          file=sys.stderr)
    base = statistics.median(r["epoch_seconds"] for r in results[args.rows[0]])
    table = []
    for n in args.rows:
        runs = results[n]
        epoch = statistics.median(r["epoch_seconds"] for r in runs)
        table.append({"rows": runs[0]["rows"], "epoch_seconds": round(epoch, 3), "ratio": round(epoch / base, 3),
                      "peak_rss_mb": round(max(r["peak_rss_mb"] for r in runs), 1),
                      "save_seconds": round(statistics.median(r["save_seconds"] for r in runs), 3)})
    report = {"command": "python scripts/bench_vocabulary.py " + " ".join(argv if argv is not None else sys.argv[1:]),
              "date": time.strftime("%Y-%m-%d"), "machine": f"{os.cpu_count()} cores, {platform.machine()}, "
              f"Python {platform.python_version()}, NumPy {np.__version__}", "dim": args.dim, "model": "rntn",
              "dtype": "float32", "trees": results[args.rows[0]][0]["trees"], "repeats": args.repeats,
              "epochs_per_process": args.epochs, "table": table}
    if args.json:
        print(json.dumps(report, indent=2))
        return 0
    print(f"{report['command']}  ({report['date']}; {report['machine']})")
    print(f"RNTN d={args.dim} float32, {report['trees']:,} trees per epoch; fastest of {args.epochs} epochs per "
          f"process, median of {args.repeats} processes")
    print(f"{'vocabulary rows':>16} {'s/epoch':>8} {'ratio':>6} {'peak RSS MB':>12} {'checkpoint save s':>18}")
    for row in table:
        print(f"{row['rows']:>16,} {row['epoch_seconds']:>8.2f} {row['ratio']:>6.2f} {row['peak_rss_mb']:>12.0f} "
              f"{row['save_seconds']:>18.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
