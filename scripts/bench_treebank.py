#!/usr/bin/env python3
"""Benchmark large treebanks: read speed, start-up to the first training step, memory, evaluation speed.

For each corpus size (--trees, default 100,000 and 1,000,000 trees) it writes (once, into
--corpus-dir, reused on later runs) a synthetic treebank shaped like the one of
scripts/bench.py: about 19 words a tree (2..60, gamma-distributed), random binary
shapes, every node labelled 0..4, words drawn from a Zipf law over --vocab types; then
measures, with the file in the page cache:

  * read MB/s: the file read as training reads it (bulk reader, vocabulary from the
    word counts, encoded bank), in this process, median of --repeats; beside it the
    Tree-object reader (iter_trees) and the exact reader alone on the first
    --exact-mb megabytes, for comparison;
  * bytes per node of the encoded bank;
  * `rntn train` (d = --dim, in a fresh process): seconds from the command's start to
    its first training step (seen in progress.json), then --train-seconds of training,
    SIGTERM (a checkpoint), and the process's peak RSS;
  * `rntn resume` of that run: seconds from the command's start to its first step, with the
    run's encoded-treebank cache (treebanks of 16 MiB and more are cached), and again with the
    cache removed, so that the resume reads the treebank text;
  * `rntn evaluate` of its checkpoint on the whole corpus (1 worker): trees/s over the
    command's wall time, and its peak RSS.

Commands run as `python -m rntn_engine.cli.app ...` with this interpreter; the kernel
cache is warmed by a small run first. Peak RSS is each command's own VmHWM, written at its
exit (after SIGTERM for train and resume, so it includes the checkpoint written then).

Usage:  python scripts/bench_treebank.py [--trees 100000 1000000] [--corpus-dir DIR] [--json]
The machine is shared: quote medians, and compare ratios measured in one run.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import shutil
import signal
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from rntn_engine.data.treebank_encoding import apply_vocabulary, read_treebank_words
from rntn_engine.data.treebank_reader import iter_trees, iter_trees_exact
from rntn_engine.data.vocabulary import vocabulary_from_counts
from rntn_engine.run.trainer import TREEBANK_CACHE_DIR

MB = 1e6


def write_corpus(path: Path, n_trees: int, vocab_size: int, seed: int) -> None:
    """The synthetic treebank of the module docstring (written to a temporary name, then renamed)."""
    rng = np.random.default_rng(seed)
    ranks = np.arange(1, vocab_size + 1)
    cumulative = np.cumsum((1.0 / ranks) / np.sum(1.0 / ranks))  # Zipf's law with exponent 1
    words = [f"w{i}" for i in range(vocab_size)]
    tmp = path.with_name(path.name + ".part")
    with open(tmp, "w", encoding="utf-8") as out:
        done = 0
        while done < n_trees:
            m = min(20_000, n_trees - done)
            lengths = np.clip(np.round(rng.gamma(4.0, 19.0 / 4.0, size=m)), 2, 60).astype(int)
            total = int(lengths.sum())
            drawn = np.minimum(np.searchsorted(cumulative, rng.random(total)), vocab_size - 1).tolist()
            leaf_labels = rng.integers(0, 5, size=total).tolist()
            node_labels = rng.integers(0, 5, size=total).tolist()
            merge_at = rng.random(total).tolist()
            lines, k = [], 0
            for n in lengths.tolist():
                items = [f"({leaf_labels[k + i]} {words[drawn[k + i]]})" for i in range(n)]
                for step in range(n - 1):  # merge a random adjacent pair until one tree is left
                    j = int(merge_at[k + step] * (len(items) - 1))
                    items[j : j + 2] = [f"({node_labels[k + step]} {items[j]} {items[j + 1]})"]
                lines.append(items[0])
                k += n
            out.write("\n".join(lines) + "\n")
            done += m
    os.replace(tmp, path)


def corpus(corpus_dir: Path, n_trees: int, vocab_size: int) -> Path:
    path = corpus_dir / f"synthetic-{n_trees}-v{vocab_size}.trees"
    if not path.exists():
        t0 = time.perf_counter()
        write_corpus(path, n_trees, vocab_size, seed=n_trees)
        print(f"# wrote {path} in {time.perf_counter() - t0:.0f} s", file=sys.stderr)
    return path


def read_for_training(path: Path):
    bank, words = read_treebank_words(path, num_classes=5)
    vocabulary = vocabulary_from_counts(words.as_dict(), 2)
    return apply_vocabulary(bank, words, vocabulary), vocabulary


def median_seconds(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def exact_slice(path: Path, megabytes: float, tmp: Path) -> Path:
    """The first ``megabytes`` of the corpus, cut at a line end."""
    with open(path, "rb") as fh:
        head = fh.read(int(megabytes * MB))
    out = tmp / "head.trees"
    out.write_bytes(head[: head.rfind(b"\n") + 1])
    return out


# Runs the command line in this process image and, at exit, writes its peak resident memory (VmHWM of
# /proc/self/status) to the file named by RNTN_BENCH_PEAK_FILE. Unlike getrusage's ru_maxrss, which a
# child inherits from its parent across fork and exec, VmHWM belongs to the command's process alone.
PEAK_WRAPPER = """
import atexit, os, runpy, sys
def _peak():
    with open("/proc/self/status") as status:
        line = next(l for l in status if l.startswith("VmHWM:"))
    with open(os.environ["RNTN_BENCH_PEAK_FILE"], "w") as out:
        out.write(str(int(line.split()[1]) * 1024))
atexit.register(_peak)
sys.argv = ["rntn"] + sys.argv[1:]
runpy.run_module("rntn_engine.cli.app", run_name="__main__")
"""


def app(*args: str) -> list[str]:
    return [sys.executable, "-c", PEAK_WRAPPER, *args]


def start(command: list[str], peak_file: Path, **popen) -> subprocess.Popen:
    peak_file.unlink(missing_ok=True)
    return subprocess.Popen(command, env={**os.environ, "RNTN_BENCH_PEAK_FILE": str(peak_file)}, **popen)


def peak_rss(peak_file: Path) -> int | None:
    try:
        return int(peak_file.read_text())
    except (OSError, ValueError):
        return None


def wait_exit(proc: subprocess.Popen, block: bool = True) -> int | None:
    """The exit code of a child, or None if it still runs (block=False)."""
    return proc.wait() if block else proc.poll()


def step_in_progress(run_dir: Path) -> int:
    try:
        return int(json.loads((run_dir / "progress.json").read_text(encoding="utf-8"))["step"])
    except (OSError, ValueError, KeyError):
        return -1


def time_to_step(command: list[str], run_dir: Path, after_step: int, train_seconds: float, tmp: Path,
                 timeout: float = 3600) -> dict:
    """Start ``command``; seconds until progress.json shows a step beyond ``after_step``; train on for
    ``train_seconds``; SIGTERM; the run's step and the command's peak RSS."""
    peak_file = tmp / "peak-rss"
    t0 = time.perf_counter()
    proc = start(command, peak_file, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    first = None
    while time.perf_counter() - t0 < timeout:
        if step_in_progress(run_dir) > after_step:
            first = time.perf_counter() - t0
            break
        code = wait_exit(proc, block=False)
        if code is not None:
            raise RuntimeError(f"{' '.join(command)} ended with exit code {code} before its first step")
        time.sleep(0.01)
    time.sleep(train_seconds)
    proc.send_signal(signal.SIGTERM)
    code = wait_exit(proc)
    return {"first_step_seconds": first, "peak_rss_bytes": peak_rss(peak_file), "exit_code": code,
            "step": step_in_progress(run_dir)}


def bench_size(path: Path, args, tmp: Path) -> dict:
    size = path.stat().st_size
    path.read_bytes()  # into the page cache
    bank, vocabulary = read_for_training(path)  # also warms the reader's kernels
    result = {"trees": bank.n_trees, "nodes": bank.n_nodes, "megabytes": size / MB, "vocabulary": len(vocabulary),
              "bank_bytes_per_node": bank.nbytes / bank.n_nodes,
              "bank_dtypes": {n: str(getattr(bank, n).dtype) for n in ("word", "left", "right", "label", "start")}}
    del bank
    read_s = median_seconds(lambda: read_for_training(path), args.repeats)
    result["read_for_training_seconds"] = read_s
    result["read_for_training_mb_per_s"] = size / MB / read_s
    trees_s = median_seconds(lambda: sum(1 for _ in iter_trees(path, num_classes=5)), 1)
    result["iter_trees_mb_per_s"] = size / MB / trees_s
    head = exact_slice(path, args.exact_mb, tmp)
    exact_s = median_seconds(lambda: sum(1 for _ in iter_trees_exact(head, num_classes=5)), 1)
    result["exact_reader_mb_per_s"] = head.stat().st_size / MB / exact_s
    if args.skip_commands:
        return result
    run_dir = tmp / f"run-{result['trees']}"
    train = time_to_step(app("train", "--train-file", str(path), "--dim", str(args.dim), "--epochs", "100",
                             "--run-dir", str(run_dir), "--no-progress"), run_dir, 0, args.train_seconds, tmp)
    result["train"] = train
    resume = time_to_step(app("resume", str(run_dir), "--no-progress"), run_dir, train["step"], args.train_seconds,
                          tmp)
    result["resume"] = resume
    cache = run_dir / TREEBANK_CACHE_DIR
    result["cache_megabytes"] = sum(f.stat().st_size for f in cache.rglob("*") if f.is_file()) / MB \
        if cache.is_dir() else 0.0
    shutil.rmtree(cache, ignore_errors=True)  # the same resume, reading the treebank text (and caching it again)
    result["resume_reading_text"] = time_to_step(app("resume", str(run_dir), "--no-progress"), run_dir,
                                                 resume["step"], args.train_seconds, tmp)
    checkpoints = sorted(run_dir.glob("checkpoint-step*.h5"))
    t0 = time.perf_counter()
    proc = start(app("evaluate", str(checkpoints[-1]), "-t", str(path), "--jobs", "1", "--json", "--no-progress"),
                 tmp / "peak-rss", stdout=subprocess.PIPE, stderr=subprocess.DEVNULL)
    out = proc.stdout.read()
    code = wait_exit(proc)
    seconds = time.perf_counter() - t0
    rows = json.loads(out)
    result["evaluate"] = {"seconds": seconds, "trees_per_second": rows[0]["trees"] / seconds,
                          "peak_rss_bytes": peak_rss(tmp / "peak-rss"), "exit_code": code,
                          "fine_all": rows[0]["fine_all"]}
    return result


def warm_kernel_cache(tmp: Path) -> None:
    """One small train + evaluate, so the timed commands load compiled kernels instead of compiling."""
    path = tmp / "warm.trees"
    write_corpus(path, 300, 200, seed=1)
    run_dir = tmp / "warm-run"
    subprocess.run(app("train", "--train-file", str(path), "--dim", "4", "--epochs", "1", "--run-dir", str(run_dir),
                       "--no-progress"), check=True, capture_output=True)
    subprocess.run(app("evaluate", str(run_dir / "model.h5"), "-t", str(path), "--jobs", "1", "--no-progress"),
                   check=True, capture_output=True)


def main(argv: list[str] | None = None) -> dict:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--trees", type=int, nargs="+", default=[100_000, 1_000_000])
    parser.add_argument("--vocab", type=int, default=20_000)
    parser.add_argument("--corpus-dir", type=Path, default=Path(tempfile.gettempdir()) / "rntn-bench-corpora")
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--exact-mb", type=float, default=10.0, help="megabytes the exact reader is timed on")
    parser.add_argument("--dim", type=int, default=25)
    parser.add_argument("--train-seconds", type=float, default=10.0, help="training after the first step, then SIGTERM")
    parser.add_argument("--skip-commands", action="store_true", help="only the in-process read measurements")
    parser.add_argument("--json", action="store_true", help="print JSON instead of a table")
    args = parser.parse_args(argv)
    args.corpus_dir.mkdir(parents=True, exist_ok=True)
    result = {
        "machine": {"python": platform.python_version(), "cpus": os.cpu_count(), "platform": platform.platform(),
                    "numpy": np.__version__, "date": time.strftime("%Y-%m-%d")},
        "command": "python scripts/bench_treebank.py " + " ".join(argv if argv is not None else sys.argv[1:]),
        "sizes": [],
    }
    with tempfile.TemporaryDirectory(prefix="rntn-bench-treebank-") as tmp_dir:
        tmp = Path(tmp_dir)
        if not args.skip_commands:
            warm_kernel_cache(tmp)
        for n in args.trees:
            result["sizes"].append(bench_size(corpus(args.corpus_dir, n, args.vocab), args, tmp))
    if args.json:
        print(json.dumps(result, indent=2))
    else:
        print_table(result)
    return result


def print_table(result: dict) -> None:
    m = result["machine"]
    print(f"# {result['command']}  ({m['date']}, {m['cpus']} cpus, Python {m['python']}, NumPy {m['numpy']})")
    header = ["trees", "nodes", "MB", "read MB/s", "iter_trees MB/s", "exact MB/s", "bytes/node",
              "train: first step s", "train peak RSS MB", "resume: first step s", "resume, text: first step s",
              "evaluate trees/s", "eval peak RSS MB"]
    rows = []
    for s in result["sizes"]:
        train, resume, evaluate = s.get("train", {}), s.get("resume", {}), s.get("evaluate", {})
        text = s.get("resume_reading_text", {})
        rows.append([f"{s['trees']:,}", f"{s['nodes']:,}", f"{s['megabytes']:.1f}",
                     f"{s['read_for_training_mb_per_s']:.1f}", f"{s['iter_trees_mb_per_s']:.1f}",
                     f"{s['exact_reader_mb_per_s']:.1f}", f"{s['bank_bytes_per_node']:.2f}",
                     _fmt(train.get("first_step_seconds"), "{:.2f}"), _fmt(train.get("peak_rss_bytes"), "{:.0f}", 1e-6),
                     _fmt(resume.get("first_step_seconds"), "{:.2f}"), _fmt(text.get("first_step_seconds"), "{:.2f}"),
                     _fmt(evaluate.get("trees_per_second"), "{:,.0f}"),
                     _fmt(evaluate.get("peak_rss_bytes"), "{:.0f}", 1e-6)])
    widths = [max(len(str(r[i])) for r in rows + [header]) for i in range(len(header))]
    for r in [header] + rows:
        print("  ".join(str(v).rjust(w) for v, w in zip(r, widths)))


def _fmt(value, pattern: str, scale: float = 1.0) -> str:
    return "-" if value is None else pattern.format(value * scale)


if __name__ == "__main__":
    main()
