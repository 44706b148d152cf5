#!/usr/bin/env python3
"""Benchmark the training and evaluation kernels against the machine's own matrix-multiply rate.

Generates, in a temporary directory, a synthetic treebank shaped like a real
phrase-labelled sentiment treebank (8,000 trees, about 19 words on average, 2..60,
Zipf-distributed vocabulary of 20,000 types, random binary shapes, every node
labelled), then for each vector size, dtype and thread count measures:

  * training throughput: internal nodes/s, trees/s, seconds per epoch (minibatches of
    --batch-size trees, AdaGrad step included), median of --repeats timed passes;
  * forward-only (evaluation) throughput, trees/s;
  * effective GFLOP/s = 24 d^3 x internal nodes / seconds (the nominal count:
    about 4d^3 multiply-adds forward and 8d^3 backward for the tensor,
    2 flops each; everything O(d^2) is ignored);
  * NumPy's dense matrix-multiply GFLOP/s (2 n^3 / s, n = --matmul-size, same dtype and
    thread count) and the ratio effective / matmul;
  * the process's CPU seconds per wall second beside each timing;
  * the speed-up from 1 thread to all threads;
  * with --baseline-tree DIR: the same settings measured, in the same run and interleaved
    setting by setting, on another checkout of the project (an earlier commit: the code
    before a change), and the ratios of this code's training epoch and evaluation time to it.

Then, once: time to the first training step in a fresh process (warm kernel cache),
checkpoint save and load time, and peak resident memory per node of corpus.

Usage:  python scripts/bench.py [--json] [--dims 25 50] [--dtypes float32 float64] [--trees 8000]
        python scripts/bench.py --steps 80 --baseline-tree /path/to/older/checkout
The machine is shared: quote medians, and compare ratios measured in one run.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

from rntn_engine.data.batches import encode_treebank
from rntn_engine.data.synthetic_trees import random_binary_tree
from rntn_engine.data.treebank_reader import read_trees
from rntn_engine.data.treebank_writer import write_trees
from rntn_engine.data.vocabulary import build_vocabulary
from rntn_engine.model.adagrad import AdaGrad
from rntn_engine.model.objective import TreeModelObjective, split_into_chunks
from rntn_engine.model.parameters import Gradient, ModelShape, init_parameters
from rntn_engine.run.checkpoints import load_checkpoint, save_checkpoint
from rntn_engine.run.evaluation import predict_treebank
from rntn_engine.run.run_config import TrainConfig

NOMINAL_FLOPS_PER_NODE = 24  # x d^3, per internal node per training step (module docstring)


def synthetic_treebank(path: Path, n_trees: int, vocab_size: int, seed: int) -> None:
    """Write the synthetic treebank of the module docstring to ``path``."""
    rng = np.random.default_rng(seed)
    ranks = np.arange(1, vocab_size + 1)
    zipf = (1.0 / ranks) / np.sum(1.0 / ranks)  # Zipf's law with exponent 1
    words = [f"w{i}" for i in range(vocab_size)]
    lengths = np.clip(np.round(rng.gamma(4.0, 19.0 / 4.0, size=n_trees)), 2, 60).astype(int)
    trees = []
    for n in lengths:
        tree = random_binary_tree(rng, int(n), 5, ["x"], p_unlabelled=0.0)
        drawn = rng.choice(vocab_size, size=int(n), p=zipf)
        trees.append(type(tree)(tuple(words[k] for k in drawn), tree.word, tree.left, tree.right, tree.label))
    write_trees(trees, path)


def matmul_rate(dtype: str, threads: int, n: int, repeats: int) -> float:
    """NumPy dense matrix multiply, GFLOP/s (median)."""
    rng = np.random.default_rng(0)
    a = rng.random((n, n)).astype(dtype)
    b = rng.random((n, n)).astype(dtype)
    with threadpool_limits(limits=threads, user_api="blas"):
        a @ b
        times = []
        for _ in range(repeats):
            t0 = time.perf_counter()
            a @ b
            times.append(time.perf_counter() - t0)
    return 2 * n**3 / statistics.median(times) / 1e9


def timed(fn, repeats: int) -> tuple[float, float]:
    """(median wall seconds, CPU seconds per wall second over all repeats)."""
    walls, cpus = [], []
    for _ in range(repeats):
        c0, t0 = time.process_time(), time.perf_counter()
        fn()
        walls.append(time.perf_counter() - t0)
        cpus.append(time.process_time() - c0)
    return statistics.median(walls), sum(cpus) / sum(walls)


def bench_setting(bank, vocab_size: int, dim: int, dtype: str, threads: int, args) -> dict:
    shape = ModelShape("rntn", vocab_size, dim, 5, dtype)
    params = init_parameters(shape, np.random.default_rng(0))
    grads = Gradient(params.shape)
    objective = TreeModelObjective(params, threads=threads)
    if args.own_kernel_rows is not None:
        objective.model.own_kernel_rows = args.own_kernel_rows
    optimiser = AdaGrad(params, 0.01, threads=threads)
    order = np.random.default_rng(1).permutation(bank.n_trees)
    n_steps = min(args.steps, -(-bank.n_trees // args.batch_size))
    batches = [split_into_chunks(bank, order[i * args.batch_size:(i + 1) * args.batch_size], args.chunks)
               for i in range(n_steps)]
    internal = sum(int(np.sum(c.left >= 0)) for b in batches for c in b)
    trees = sum(c.n_trees for b in batches for c in b)

    def train_pass():  # the training loop's own path: data term, then L2 + AdaGrad + zeroing in one pass
        for chunks in batches:
            objective.loss_and_gradient(params, grads, chunks, include_l2=False)
            optimiser.step_with_l2(params, grads, objective.l2)

    train_pass()  # warm up: compile or load kernels, grow workspaces
    train_s, train_cpu = timed(train_pass, args.repeats)

    def forward_pass():
        predict_treebank(objective, params, bank)

    forward_pass()
    forward_s, forward_cpu = timed(forward_pass, args.repeats)
    objective.close()
    optimiser.close()
    internal_all = int(np.sum(bank.left >= 0))
    effective = NOMINAL_FLOPS_PER_NODE * dim**3 * internal / train_s / 1e9
    mm = matmul_rate(dtype, threads, args.matmul_size, args.repeats)
    return {
        "dim": dim, "dtype": dtype, "threads": threads,
        "train_internal_nodes_per_s": internal / train_s, "train_trees_per_s": trees / train_s,
        "train_seconds_per_epoch": train_s * bank.n_trees / trees, "train_cpu_per_wall": train_cpu,
        "forward_trees_per_s": bank.n_trees / forward_s, "forward_internal_nodes_per_s": internal_all / forward_s,
        "forward_cpu_per_wall": forward_cpu,
        "forward_over_train": (internal_all / forward_s) / (internal / train_s),
        "effective_gflops": effective, "matmul_gflops": mm, "ratio_to_matmul": effective / mm,
    }


def add_baseline(setting: dict, args) -> None:
    """Measure ``setting`` on the checkout ``args.baseline_tree`` (its own scripts/bench.py, in a fresh
    process importing that tree) and add its figures and this code's ratios to them to ``setting``."""
    tree = args.baseline_tree.resolve()
    command = [sys.executable, str(tree / "scripts" / "bench.py"), "--json", "--skip-process-probes",
               "--trees", str(args.trees), "--vocab", str(args.vocab), "--dims", str(setting["dim"]),
               "--dtypes", setting["dtype"], "--threads", str(setting["threads"]), "--batch-size",
               str(args.batch_size), "--chunks", str(args.chunks), "--steps", str(args.steps), "--repeats",
               str(args.repeats), "--matmul-size", str(args.matmul_size)]
    env = dict(os.environ, PYTHONPATH=str(tree))
    out = subprocess.run(command, capture_output=True, text=True, check=True, env=env, cwd=tree).stdout
    old = json.loads(out)["settings"][0]
    setting["baseline"] = {k: old[k] for k in ("train_seconds_per_epoch", "forward_trees_per_s", "ratio_to_matmul",
                                                "matmul_gflops", "train_cpu_per_wall")}
    setting["epoch_new_over_old"] = setting["train_seconds_per_epoch"] / old["train_seconds_per_epoch"]  # same corpus
    setting["eval_new_over_old"] = old["forward_trees_per_s"] / setting["forward_trees_per_s"]


FIRST_STEP_PROBE = """
import time, sys
t0 = time.perf_counter()
import numpy as np
from rntn_engine.data.treebank_reader import read_trees
from rntn_engine.data.vocabulary import build_vocabulary
from rntn_engine.data.batches import encode_treebank
from rntn_engine.model.parameters import Gradient, ModelShape, init_parameters
from rntn_engine.model.objective import TreeModelObjective, split_into_chunks
from rntn_engine.model.adagrad import AdaGrad
trees = read_trees(sys.argv[1])[:200]
vocab = build_vocabulary(trees, min_count=1)
bank = encode_treebank(trees, vocab)
params = init_parameters(ModelShape("rntn", len(vocab), int(sys.argv[2]), 5, sys.argv[3]), np.random.default_rng(0))
grads = Gradient(params.shape)
objective = TreeModelObjective(params)
objective.loss_and_gradient(params, grads, split_into_chunks(bank, np.arange(16), 2))  # the trainer's default minibatch
AdaGrad(params, 0.01).step(params, grads)
print(time.perf_counter() - t0)
"""

# Peak resident memory from /proc/self/status VmHWM: unlike getrusage's ru_maxrss, which a child
# inherits from its parent across fork and exec, VmHWM belongs to this process image alone.
MEMORY_PROBE = """
import sys
from rntn_engine.run.run_config import TrainConfig
from rntn_engine.run.trainer import load_training_data
data = load_training_data(TrainConfig(train_file=sys.argv[1], min_count=1, dim=25))
hwm = [line for line in open("/proc/self/status") if line.startswith("VmHWM:")][0].split()
print(int(hwm[1]) * 1024, data.train.n_nodes)
"""


def fresh_process_seconds(treebank: Path, dim: int, dtype: str, repeats: int) -> float:
    times = []
    for _ in range(repeats + 1):  # the first run may compile (cold cache); it is not counted
        out = subprocess.run([sys.executable, "-c", FIRST_STEP_PROBE, str(treebank), str(dim), dtype],
                             capture_output=True, text=True, check=True)
        times.append(float(out.stdout.strip()))
    return statistics.median(times[1:])


def checkpoint_seconds(bank, vocab, dim: int, dtype: str, tmp: Path, repeats: int) -> tuple[float, float, int]:
    shape = ModelShape("rntn", len(vocab), dim, 5, dtype)
    params = init_parameters(shape, np.random.default_rng(0))
    path = tmp / "bench-checkpoint.h5"
    config = TrainConfig(train_file="x", dim=dim, dtype=dtype)
    save_s, _ = timed(lambda: save_checkpoint(path, params, vocab, config, params.zeros_like(), {}, [], {}), repeats)
    load_s, _ = timed(lambda: load_checkpoint(path), repeats)
    return save_s, load_s, path.stat().st_size


def memory_per_node(treebank: Path, tmp: Path) -> float:
    """Extra peak RSS of loading training data (read, vocabulary, encode) per extra node, corpus x2 vs x6
    (large enough that the data, not the imports, sets the peak)."""
    text = treebank.read_bytes()
    paths = []
    for k in (2, 6):
        paths.append(tmp / f"corpus-x{k}.trees")
        paths[-1].write_bytes(text * k)
    rss, nodes = [], []
    for path in paths:
        out = subprocess.run([sys.executable, "-c", MEMORY_PROBE, str(path)], capture_output=True,
                             text=True, check=True).stdout.split()
        rss.append(int(out[0]))
        nodes.append(int(out[1]))
    return (rss[1] - rss[0]) / (nodes[1] - nodes[0])


def main(argv: list[str] | None = None) -> dict:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--trees", type=int, default=8000)
    parser.add_argument("--vocab", type=int, default=20000)
    parser.add_argument("--dims", type=int, nargs="+", default=[25, 50])
    parser.add_argument("--dtypes", nargs="+", default=["float32", "float64"])
    parser.add_argument("--threads", type=int, nargs="+", default=sorted({1, os.cpu_count() or 1}))
    parser.add_argument("--batch-size", type=int, default=TrainConfig().batch_size,
                        help="trees per minibatch (default: the trainer's own default, what a run uses)")
    parser.add_argument("--chunks", type=int, default=TrainConfig().grad_chunks,
                        help="grad_chunks of the objective (default: the trainer's)")
    parser.add_argument("--steps", type=int, default=10**9, help="timed minibatches per pass (default: a full epoch)")
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--matmul-size", type=int, default=1024)
    parser.add_argument("--own-kernel-rows", type=int, default=None,
                        help="levels of at most this many nodes take the tensor term's own kernel, wider ones BLAS "
                             "(default: the library's OWN_KERNEL_ROWS; 0: BLAS for every level)")
    parser.add_argument("--baseline-tree", type=Path, default=None,
                        help="another checkout of the project (e.g. `git worktree add DIR COMMIT`): measure each "
                             "setting there too, right after this code's, and print the ratios")
    parser.add_argument("--json", action="store_true", help="print JSON instead of a table")
    parser.add_argument("--skip-process-probes", action="store_true", help="skip fresh-process and memory probes")
    args = parser.parse_args(argv)

    with tempfile.TemporaryDirectory(prefix="rntn-bench-") as tmp_dir:
        tmp = Path(tmp_dir)
        treebank = tmp / "synthetic.trees"
        t0 = time.perf_counter()
        synthetic_treebank(treebank, args.trees, args.vocab, seed=0)
        t1 = time.perf_counter()
        trees = read_trees(treebank)
        read_s = time.perf_counter() - t1
        vocab = build_vocabulary(trees, min_count=1)
        bank = encode_treebank(trees, vocab)
        lengths = [len(t.words) for t in trees]
        result = {
            "machine": {"python": platform.python_version(), "cpus": os.cpu_count(), "platform": platform.platform(),
                        "numpy": np.__version__, "date": time.strftime("%Y-%m-%d")},
            "command": "python scripts/bench.py " + " ".join(argv if argv is not None else sys.argv[1:]),
            "corpus": {"trees": bank.n_trees, "nodes": bank.n_nodes, "internal_nodes": int(np.sum(bank.left >= 0)),
                       "vocabulary": len(vocab), "mean_words": float(np.mean(lengths)), "min_words": min(lengths),
                       "max_words": max(lengths), "generate_seconds": t1 - t0, "read_seconds": read_s},
            "settings": [],
        }
        for dim in args.dims:
            for dtype in args.dtypes:
                for threads in args.threads:
                    setting = bench_setting(bank, len(vocab), dim, dtype, threads, args)
                    if args.baseline_tree is not None:
                        add_baseline(setting, args)
                    result["settings"].append(setting)
        by_key = {(s["dim"], s["dtype"], s["threads"]): s for s in result["settings"]}
        top = max(args.threads)
        for s in result["settings"]:
            one = by_key.get((s["dim"], s["dtype"], 1))
            s["speedup_vs_1_thread"] = s["train_internal_nodes_per_s"] / one["train_internal_nodes_per_s"] if one else None
        once = {}
        dim0, dtype0 = args.dims[-1], args.dtypes[0]
        save_s, load_s, size = checkpoint_seconds(bank, vocab, dim0, dtype0, tmp, args.repeats)
        once.update({"checkpoint_save_seconds": save_s, "checkpoint_load_seconds": load_s,
                     "checkpoint_bytes": size, "checkpoint_setting": f"d={dim0} {dtype0}, |V|={len(vocab)}"})
        if not args.skip_process_probes:
            once["first_step_seconds_fresh_process"] = fresh_process_seconds(treebank, dim0, dtype0, args.repeats)
            once["peak_rss_bytes_per_extra_node"] = memory_per_node(treebank, tmp)
        once["peak_rss_bytes_this_process"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
        result["once"] = once
        result["top_threads"] = top

    if args.json:
        print(json.dumps(result, indent=2))
    else:
        print_table(result)
    return result


def print_table(result: dict) -> None:
    c = result["corpus"]
    print(f"# {result['command']}  ({result['machine']['date']}, {result['machine']['cpus']} cpus, "
          f"Python {result['machine']['python']}, NumPy {result['machine']['numpy']})")
    print(f"# corpus: {c['trees']} trees, {c['internal_nodes']} internal nodes, {c['vocabulary']} word types, "
          f"{c['mean_words']:.1f} words/tree ({c['min_words']}..{c['max_words']}); read in {c['read_seconds']:.2f} s")
    header = ["d", "dtype", "thr", "train int.nodes/s", "trees/s", "s/epoch", "cpu/wall", "eval trees/s",
              "eval/train", "eff GF/s", "matmul GF/s", "ratio", "speed-up"]
    baseline = any("baseline" in s for s in result["settings"])
    if baseline:
        header += ["old s/epoch", "old ratio", "epoch new/old", "eval time new/old"]
    rows = []
    for s in result["settings"]:
        rows.append([s["dim"], s["dtype"], s["threads"], f"{s['train_internal_nodes_per_s']:,.0f}",
                     f"{s['train_trees_per_s']:,.0f}", f"{s['train_seconds_per_epoch']:.2f}",
                     f"{s['train_cpu_per_wall']:.2f}", f"{s['forward_trees_per_s']:,.0f}",
                     f"{s['forward_over_train']:.1f}", f"{s['effective_gflops']:.1f}", f"{s['matmul_gflops']:.1f}",
                     f"{s['ratio_to_matmul']:.2f}",
                     f"{s['speedup_vs_1_thread']:.2f}" if s["speedup_vs_1_thread"] else "-"])
        if baseline:
            rows[-1] += [f"{s['baseline']['train_seconds_per_epoch']:.2f}", f"{s['baseline']['ratio_to_matmul']:.2f}",
                         f"{s['epoch_new_over_old']:.2f}", f"{s['eval_new_over_old']:.2f}"]
    widths = [max(len(str(r[i])) for r in rows + [header]) for i in range(len(header))]
    for r in [header] + rows:
        print("  ".join(str(v).rjust(w) for v, w in zip(r, widths)))
    for k, v in result["once"].items():
        print(f"# {k}: {v:.4g}" if isinstance(v, float) else f"# {k}: {v}")


if __name__ == "__main__":
    main()
