#!/usr/bin/env python3
"""Write a second generated treebank, unlike the demo one, for choosing default settings.

The demo treebank (scripts/make_demo_treebank.py) is English-like text from a phrase
grammar. This one is deliberately different, so that defaults chosen on both are not
tuned to one kind of data:

* **Random binary shapes.** A sentence of n tokens gets a tree split at a uniformly
  random point at every node (no grammar); operator words attach to the phrase on
  their right.
* **Invented tokens, Zipf-distributed.** VOCABULARY_SIZE made-up content words
  ("brelu", "skoitam", ...) built from syllables, drawn with weight 1/rank (Zipf's law,
  exponent 1), so most types are rare and dev/test hold many words training never saw.
  Every content word gets its own polarity, drawn once from POLARITY_SHARES.
* **Operator words** (fixed invented tokens, polarity 0): negators, intensifiers,
  diminishers and one contrast word, with the composition rules below.
* **Label noise.** Each node's written label is moved one class up or down with a
  chance of NOISE_PERCENT %, after the clean labels are computed (the composition always
  uses clean scores).

A node's score is computed bottom-up from its two children, rules tried in order:

    left is a negator leaf      s = factor * s_right   (factor < 0)
    left is an intensifier leaf s = factor * s_right   (factor > 1)
    left is a diminisher leaf   s = factor * s_right   (0 < factor < 1)
    left is the contrast leaf   s = s_right            (a "contrast phrase")
    right is a contrast phrase  s = 1/4 * s_left + s_right
    otherwise                   s = s_left + s_right

and every score is then clipped to [-3, 3] (so long phrases saturate). Scores are exact
fractions, bucketed into five classes:

    s <= -2 -> 0     -2 < s <= -1/2 -> 1     -1/2 < s < 1/2 -> 2     1/2 <= s < 2 -> 3     s >= 2 -> 4

Randomness comes only from ``random.Random(seed).getrandbits`` through ``below`` and
all weights are integers, so the files are byte-identical on every machine for a given
seed. No sentence (token sequence) occurs twice across the three splits.

The data is not committed: write it where you need it (a new temporary folder by default).

Usage:  python scripts/make_sweep_treebank.py [--out-dir DIR] [--seed 2718] [--sizes 6000 800 800]
"""

from __future__ import annotations

import argparse
import bisect
import random
import sys
import tempfile
from fractions import Fraction
from pathlib import Path

DEFAULT_SEED = 2718
DEFAULT_SIZES = (6000, 800, 800)  # train, dev, test trees
SPLIT_NAMES = ("sweep_train.trees", "sweep_dev.trees", "sweep_test.trees")
VOCABULARY_SIZE = 8000
NOISE_PERCENT = 5

# operator words: invented tokens, never produced by the syllable generator (checked)
NEGATORS = {"nul": Fraction(-1, 2), "nevra": Fraction(-3, 4)}
INTENSIFIERS = {"vasto": Fraction(3, 2), "trem": Fraction(2)}
DIMINISHERS = {"pim": Fraction(1, 2), "semmo": Fraction(2, 3)}
CONTRAST_WORD = "borr"
CONTRAST_LEFT_WEIGHT = Fraction(1, 4)
SCORE_LIMIT = Fraction(3)
OPERATOR_WORDS = (*NEGATORS, *INTENSIFIERS, *DIMINISHERS, CONTRAST_WORD)

# per-word polarity: (value, weight) -- most words are neutral
POLARITY_SHARES = (
    (Fraction(0), 50), (Fraction(1, 2), 13), (Fraction(-1, 2), 13), (Fraction(1), 8), (Fraction(-1), 8),
    (Fraction(2), 4), (Fraction(-2), 4),
)

# chance in % that a node of a phrase of >= 2 tokens is an operator node, by kind
NEGATOR_PERCENT, INTENSIFIER_PERCENT, DIMINISHER_PERCENT, CONTRAST_PERCENT = 9, 6, 3, 5
MIN_TOKENS, MAX_TOKENS = 2, 40

ONSETS = ("b", "br", "d", "dr", "f", "fl", "g", "gl", "h", "k", "kl", "l", "m", "n", "p", "pl", "r", "s", "sk",
          "st", "t", "tr", "v", "z", "sh", "ch", "w")
NUCLEI = ("a", "e", "i", "o", "u", "ai", "ou", "ei")
CODAS = ("", "", "", "n", "l", "r", "s", "m", "k", "t")


def below(rng: random.Random, n: int) -> int:
    """Uniform integer in [0, n) by rejection from ``getrandbits`` (the same stream in every Python 3)."""
    bits = n.bit_length()
    while True:
        r = rng.getrandbits(bits)
        if r < n:
            return r


def weighted(rng: random.Random, pairs):
    """One value of (value, integer weight) pairs."""
    r = below(rng, sum(w for _, w in pairs))
    for value, w in pairs:
        if r < w:
            return value
        r -= w
    raise AssertionError("unreachable")


def invented_words(rng: random.Random, count: int) -> list[str]:
    """``count`` distinct made-up tokens of 2 or 3 syllables, none of them an operator word."""
    words: list[str] = []
    seen = set(OPERATOR_WORDS)  # membership only, never iterated
    while len(words) < count:
        syllables = 2 + (below(rng, 4) == 0)
        word = "".join(ONSETS[below(rng, len(ONSETS))] + NUCLEI[below(rng, len(NUCLEI))] + CODAS[below(rng, len(CODAS))]
                       for _ in range(syllables))
        if word not in seen:
            seen.add(word)
            words.append(word)
    return words


class Lexicon:
    """Content words with Zipf weights (1/rank, as integers) and their polarities."""

    def __init__(self, rng: random.Random, size: int):
        self.words = invented_words(rng, size)
        self.polarity = {w: weighted(rng, POLARITY_SHARES) for w in self.words}
        scale = 10**12
        self.cumulative: list[int] = []
        total = 0
        for rank in range(1, size + 1):
            total += scale // rank
            self.cumulative.append(total)

    def draw(self, rng: random.Random) -> str:
        return self.words[bisect.bisect_right(self.cumulative, below(rng, self.cumulative[-1]))]


def sentence_length(rng: random.Random) -> int:
    """2..40 tokens, mean about 14: a sum of two uniforms with an occasional long tail."""
    n = 2 + below(rng, 12) + below(rng, 12)
    if below(rng, 10) == 0:
        n += below(rng, 17)
    return min(n, MAX_TOKENS)


def random_tree(rng: random.Random, lexicon: Lexicon, n: int):
    """A binary tree over ``n`` tokens: a leaf is a str, an internal node a (left, right) pair."""
    if n == 1:
        return lexicon.draw(rng)
    roll = below(rng, 100)
    if roll < NEGATOR_PERCENT:
        return (list(NEGATORS)[below(rng, len(NEGATORS))], random_tree(rng, lexicon, n - 1))
    roll -= NEGATOR_PERCENT
    if roll < INTENSIFIER_PERCENT:
        return (list(INTENSIFIERS)[below(rng, len(INTENSIFIERS))], random_tree(rng, lexicon, n - 1))
    roll -= INTENSIFIER_PERCENT
    if roll < DIMINISHER_PERCENT:
        return (list(DIMINISHERS)[below(rng, len(DIMINISHERS))], random_tree(rng, lexicon, n - 1))
    roll -= DIMINISHER_PERCENT
    if roll < CONTRAST_PERCENT and n >= 4:  # X (borr Y), X and Y at least one token each
        k = 1 + below(rng, n - 2)
        return (random_tree(rng, lexicon, k), (CONTRAST_WORD, random_tree(rng, lexicon, n - 1 - k)))
    k = 1 + below(rng, n - 1)
    return (random_tree(rng, lexicon, k), random_tree(rng, lexicon, n - k))


def is_contrast_phrase(node) -> bool:
    return isinstance(node, tuple) and node[0] == CONTRAST_WORD


def compose(left, right, s_left: Fraction, s_right: Fraction) -> Fraction:
    """Score of the node (left right) from its children's scores (rules in the module docstring)."""
    if isinstance(left, str) and left in NEGATORS:
        s = NEGATORS[left] * s_right
    elif isinstance(left, str) and left in INTENSIFIERS:
        s = INTENSIFIERS[left] * s_right
    elif isinstance(left, str) and left in DIMINISHERS:
        s = DIMINISHERS[left] * s_right
    elif left == CONTRAST_WORD:
        s = s_right
    elif is_contrast_phrase(right):
        s = CONTRAST_LEFT_WEIGHT * s_left + s_right
    else:
        s = s_left + s_right
    return max(-SCORE_LIMIT, min(SCORE_LIMIT, s))


def score_label(s: Fraction) -> int:
    """The class 0..4 of a score (thresholds in the module docstring)."""
    if s <= -2:
        return 0
    if s <= Fraction(-1, 2):
        return 1
    if s < Fraction(1, 2):
        return 2
    if s < 2:
        return 3
    return 4


def noisy(rng: random.Random, label: int) -> int:
    """The label, or with NOISE_PERCENT % chance a neighbouring class (up or down, within 0..4)."""
    if below(rng, 100) >= NOISE_PERCENT:
        return label
    step = 1 if below(rng, 2) else -1
    if not 0 <= label + step <= 4:
        step = -step
    return label + step


def render(rng: random.Random, lexicon: Lexicon, node) -> tuple[str, Fraction]:
    """Bracketed text of a tree with (noisy) labels, and the clean score of its root."""
    if isinstance(node, str):
        score = lexicon.polarity.get(node, Fraction(0))
        return f"({noisy(rng, score_label(score))} {node})", score
    text_left, s_left = render(rng, lexicon, node[0])
    text_right, s_right = render(rng, lexicon, node[1])
    score = compose(node[0], node[1], s_left, s_right)
    return f"({noisy(rng, score_label(score))} {text_left} {text_right})", score


def leaves(node) -> list[str]:
    return [node] if isinstance(node, str) else leaves(node[0]) + leaves(node[1])


def generate_splits(seed: int, sizes: tuple[int, int, int] = DEFAULT_SIZES) -> list[tuple[str, list[str]]]:
    """(file name, bracketed lines) for train, dev and test; no token sequence repeats."""
    rng = random.Random(seed)
    lexicon = Lexicon(rng, VOCABULARY_SIZE)
    seen: set[str] = set()  # membership only, never iterated
    out = []
    for name, count in zip(SPLIT_NAMES, sizes):
        lines: list[str] = []
        while len(lines) < count:
            tree = random_tree(rng, lexicon, sentence_length(rng))
            text = " ".join(leaves(tree))
            if text in seen:
                continue
            seen.add(text)
            lines.append(render(rng, lexicon, tree)[0])
        out.append((name, lines))
    return out


def write_treebank(out_dir: Path, seed: int = DEFAULT_SEED, sizes: tuple[int, int, int] = DEFAULT_SIZES,
                   echo=print) -> list[Path]:
    """Write the three split files into ``out_dir``; returns their paths (train, dev, test)."""
    out_dir.mkdir(parents=True, exist_ok=True)
    paths = []
    for name, lines in generate_splits(seed, sizes):
        path = out_dir / name
        data = "".join(line + "\n" for line in lines).encode("utf-8")
        path.write_bytes(data)
        roots = [0] * 5
        for line in lines:
            roots[int(line[1])] += 1
        shares = " ".join(f"{k}:{100 * c / max(1, len(lines)):.1f}%" for k, c in enumerate(roots))
        echo(f"{path}: {len(lines)} trees, {len(data)} bytes, root labels {shares}")
        paths.append(path)
    return paths


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description="Write the second generated treebank (random shapes, invented "
                                                 "Zipf vocabulary, operator words, label noise).")
    parser.add_argument("--out-dir", type=Path, default=None, help="folder for the .trees files (default: a new "
                                                                   "temporary folder)")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help="seed of the generator")
    parser.add_argument("--sizes", type=int, nargs=3, default=DEFAULT_SIZES, metavar=("TRAIN", "DEV", "TEST"),
                        help="trees per split")
    args = parser.parse_args(argv)
    if min(args.sizes) < 1:
        parser.error("--sizes must be positive")
    out_dir = args.out_dir or Path(tempfile.mkdtemp(prefix="rntn-sweep-treebank-"))
    write_treebank(out_dir, args.seed, tuple(args.sizes))
    return 0


if __name__ == "__main__":
    sys.exit(main())
