#!/usr/bin/env python3
"""Write demo word vectors (GloVe text format) learned from the demo treebank.

Corpus: the words (leaves) of all three demo splits, garden_train.trees,
garden_dev.trees and garden_test.trees, one sentence per tree. Using all three
gives vectors to words that training never sees (the dev/test-only words), so
the file exercises vocabulary extension and coverage reports.

Method (count-based distributional vectors):
  1. co-occurrence counts C[w, c] of word w and context word c within a
     symmetric window of WINDOW tokens, inside one sentence, every pair counted 1;
  2. positive PMI with context-distribution smoothing (Levy, Goldberg & Dagan 2015):
       P(c) proportional to count(c)**0.75,
       PPMI[w, c] = max(0, log(C[w, c] * total / (rowsum[w] * total * P(c))))
  3. truncated SVD  PPMI = U S V^T, vectors = U[:, :DIM] * sqrt(S[:DIM]);
  4. signs fixed per component (largest-magnitude entry positive), then all
     vectors divided by their mean row norm, so a typical vector has norm about 1.

Output: one line per word, `word v1 ... vDIM`, no header, 6 decimals, words by
descending frequency in the corpus (ties in code-point order). The numbers come
from LAPACK's SVD; on another BLAS/LAPACK build the 6th decimal could differ in
rare cases.

Usage:  python scripts/make_demo_vectors.py [--trees-dir data_demo] [--out-file FILE]
"""

from __future__ import annotations

import argparse
import re
from pathlib import Path

import numpy as np

DATA_DIR = Path(__file__).resolve().parent.parent / "data_demo"
SPLIT_FILES = ("garden_train.trees", "garden_dev.trees", "garden_test.trees")
OUT_NAME = "garden_vectors_25d.glove.txt"
DIM = 25
WINDOW = 4
CONTEXT_SMOOTHING = 0.75

# a leaf "(label word)": no bracket or space inside label or word
LEAF = re.compile(r"\(\s*[^()\s]+\s+([^()\s]+)\s*\)")


def read_sentences(paths: list[Path]) -> list[list[str]]:
    """Leaf words of every tree, one list per non-empty line (self-contained, no project import)."""
    sentences = []
    for path in paths:
        for line in path.read_text(encoding="utf-8").splitlines():
            words = LEAF.findall(line)
            if words:
                sentences.append(words)
    return sentences


def vocabulary(sentences: list[list[str]]) -> tuple[list[str], np.ndarray]:
    """Words by descending count, ties in code-point order; and their counts."""
    counts: dict[str, int] = {}
    for sentence in sentences:
        for word in sentence:
            counts[word] = counts.get(word, 0) + 1
    words = sorted(counts, key=lambda w: (-counts[w], w))
    return words, np.array([counts[w] for w in words], dtype=np.int64)


def cooccurrence(sentences: list[list[str]], index: dict[str, int], window: int) -> np.ndarray:
    """(V, V) int64 symmetric counts of word pairs at most `window` tokens apart."""
    rows, cols = [], []
    for sentence in sentences:
        ids = [index[w] for w in sentence]
        for i, a in enumerate(ids):
            for b in ids[i + 1 : i + 1 + window]:
                rows += (a, b)
                cols += (b, a)
    counts = np.zeros((len(index), len(index)), dtype=np.int64)
    np.add.at(counts, (np.array(rows), np.array(cols)), 1)
    return counts


def ppmi(counts: np.ndarray, smoothing: float) -> np.ndarray:
    """Positive PMI with the context distribution raised to `smoothing`."""
    total = counts.sum()
    row = counts.sum(axis=1)
    col = counts.sum(axis=0).astype(np.float64) ** smoothing
    p_context = col / col.sum()
    with np.errstate(divide="ignore"):
        pmi = np.log(counts / total) - np.log(row / total)[:, None] - np.log(p_context)[None, :]
    return np.where(counts > 0, np.maximum(pmi, 0.0), 0.0)


def svd_vectors(matrix: np.ndarray, dim: int) -> np.ndarray:
    """U[:, :dim] * sqrt(S[:dim]), each column's largest-|x| entry made positive, mean norm 1."""
    u, s, _ = np.linalg.svd(matrix, full_matrices=False)
    vectors = u[:, :dim] * np.sqrt(s[:dim])
    pivot = np.argmax(np.abs(vectors), axis=0)  # first index on ties
    vectors *= np.where(vectors[pivot, np.arange(dim)] < 0, -1.0, 1.0)
    return vectors / np.linalg.norm(vectors, axis=1).mean()


def glove_lines(words: list[str], vectors: np.ndarray) -> list[str]:
    lines = []
    for word, row in zip(words, vectors):
        values = (f"{x:.6f}" for x in row)
        lines.append(word + " " + " ".join("0.000000" if v == "-0.000000" else v for v in values))
    return lines


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Write PPMI+SVD word vectors of the demo treebank.")
    parser.add_argument("--trees-dir", type=Path, default=DATA_DIR,
                        help="folder holding the three .trees splits")
    parser.add_argument("--out-file", type=Path, default=None,
                        help=f"vector file to write (default TREES_DIR/{OUT_NAME})")
    args = parser.parse_args(argv)
    out_file = args.out_file or args.trees_dir / OUT_NAME

    sentences = read_sentences([args.trees_dir / name for name in SPLIT_FILES])
    words, _ = vocabulary(sentences)
    index = {w: i for i, w in enumerate(words)}
    vectors = svd_vectors(ppmi(cooccurrence(sentences, index, WINDOW), CONTEXT_SMOOTHING), DIM)
    train_words = {w for s in read_sentences([args.trees_dir / SPLIT_FILES[0]]) for w in s}

    data = "".join(line + "\n" for line in glove_lines(words, vectors)).encode("utf-8")
    out_file.write_bytes(data)
    n_extra = sum(w not in train_words for w in words)
    print(f"{out_file}: {len(words)} words x {DIM} dims, {n_extra} not in {SPLIT_FILES[0]}, "
          f"{len(data)} bytes, from {len(sentences)} sentences")


if __name__ == "__main__":
    main()
