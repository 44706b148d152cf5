"""Benchmark: our word-vector loader against gensim's on the same word2vec text file.

Writes a word2vec text file of ``--rows`` x ``--dim`` random vectors (five-decimal
values, like published GloVe files) in a temporary directory, draws a vocabulary
of ``--vocab`` of its words, then times, ``--repeats`` times each (the median is
reported):

* ours:   ``load_vectors_for(path, vocabulary)`` (one pass, parses wanted rows only);
* gensim: ``KeyedVectors.load_word2vec_format(path)`` (parses every row).

It also checks that both return the same float32 values for the vocabulary.
Speeds are in MB/s of file scanned (1 MB = 10^6 bytes); the file is read from the
page cache after the first run, so this measures parsing, not the disk.

    python scripts/bench_vectors.py                 # 400,000 x 100, 20,000 words
    python scripts/bench_vectors.py --rows 2000 --dim 10 --vocab 100 --repeats 1 --json
"""

from __future__ import annotations

import argparse
import json
import logging
import os
import statistics
import sys
import tempfile
import time

import numpy as np

from rntn_engine.data.word_vectors import load_vectors_for


def write_bench_file(path: str, rows: int, dim: int, rng: np.random.Generator) -> list[str]:
    """A word2vec text file of random five-decimal vectors; returns its words in file order."""
    table = np.array([f"{v:.5f}" for v in rng.standard_normal(20_000) * 0.4], dtype=object)
    words = [f"w{i}" for i in range(rows)]
    with open(path, "w", encoding="utf-8") as out:
        out.write(f"{rows} {dim}\n")
        for first in range(0, rows, 10_000):
            picks = rng.integers(0, len(table), size=(min(10_000, rows - first), dim))
            out.write("".join(f"{words[first + i]} {' '.join(table[row])}\n" for i, row in enumerate(picks)))
    return words


def median_seconds(run, repeats: int):
    """(median wall time in seconds, result of the last run)."""
    times, result = [], None
    for _ in range(repeats):
        start = time.perf_counter()
        result = run()
        times.append(time.perf_counter() - start)
    return statistics.median(times), result


def main(argv: list[str] | None = None) -> dict:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--rows", type=int, default=400_000, help="rows of the generated file")
    parser.add_argument("--dim", type=int, default=100, help="values per row")
    parser.add_argument("--vocab", type=int, default=20_000, help="words looked up (drawn from the file)")
    parser.add_argument("--repeats", type=int, default=3, help="timed runs of each loader (median reported)")
    parser.add_argument("--seed", type=int, default=0, help="seed of the generated file and vocabulary")
    parser.add_argument("--json", action="store_true", help="print one JSON object instead of a table")
    args = parser.parse_args(argv)
    if not 1 <= args.vocab <= args.rows or args.dim < 1 or args.repeats < 1:
        parser.error("need 1 <= --vocab <= --rows, --dim >= 1 and --repeats >= 1")

    from gensim.models import KeyedVectors  # the reference loader (test extra); imported late: it is slow

    logging.getLogger("gensim").setLevel(logging.WARNING)
    rng = np.random.default_rng(args.seed)
    with tempfile.TemporaryDirectory(prefix="bench_vectors_") as folder:
        path = os.path.join(folder, "vectors.w2v.txt")
        words = write_bench_file(path, args.rows, args.dim, rng)
        vocabulary = {words[i] for i in rng.choice(args.rows, size=args.vocab, replace=False)}
        size = os.path.getsize(path)
        ours_s, ours = median_seconds(lambda: load_vectors_for(path, vocabulary), args.repeats)
        gensim_s, reference = median_seconds(lambda: KeyedVectors.load_word2vec_format(path), args.repeats)
        agree = ours.coverage.found == len(vocabulary) and all(
            np.array_equal(ours.vector_of(w), reference[w]) for w in vocabulary
        )
    report = {
        "rows": args.rows,
        "dim": args.dim,
        "vocab": args.vocab,
        "repeats": args.repeats,
        "file_bytes": size,
        "ours_seconds": ours_s,
        "ours_mb_per_s": size / ours_s / 1e6,
        "gensim_seconds": gensim_s,
        "gensim_mb_per_s": size / gensim_s / 1e6,
        "speedup_vs_gensim": gensim_s / ours_s,
        "values_agree": agree,
    }
    if args.json:
        print(json.dumps(report))
    else:
        print(f"file: {args.rows:,} rows x {args.dim} values, {size / 1e6:.1f} MB; {args.vocab:,} words wanted")
        print(f"median of {args.repeats}       seconds      MB/s")
        print(f"ours (load_vectors_for)  {ours_s:9.3f} {report['ours_mb_per_s']:9.1f}")
        print(f"gensim load_word2vec     {gensim_s:9.3f} {report['gensim_mb_per_s']:9.1f}")
        same = "yes" if agree else "NO"
        print(f"speed-up vs gensim: {report['speedup_vs_gensim']:.1f}x; same float32 values: {same}")
    return report


if __name__ == "__main__":
    report = main()
    sys.exit(0 if report["values_agree"] else 1)
