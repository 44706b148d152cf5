"""Predict a label for every phrase of new sentences, streamed in blocks of lines.

Input, one item per line (blank lines skipped):
  * a bracketed tree (the line starts with "("): its labels, if any, are ignored, so
    class numbers, ``_`` and a parser's categories (``(S (NP ...) (VP ...))``) all work;
  * a plain tokenised sentence (anything else): no parser is bundled, so it gets the
    fallback tree below, and the caller is told (``PredictionSummary.fallback_trees``).

Fallback tree: right-branching, ``(w1 (w2 (w3 ... wn)))``. English constituency
structure is predominantly right-branching (heads before complements), so this
chain keeps pre-modifiers -- negators, intensifiers, determiners -- next to the phrase
that follows them; it cannot know where phrases really end, so a real parse gives
better results.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Iterable, Iterator

import numpy as np

from rntn_engine.data.batches import encode_treebank
from rntn_engine.data.bracket_tokens import SEPARATORS, unescape_token
from rntn_engine.data.tree import Tree, right_branching_tree
from rntn_engine.data.treebank_reader import parse_tree
from rntn_engine.model.objective import TreeModelObjective, split_into_chunks
from rntn_engine.run.checkpoints import Checkpoint
from rntn_engine.run.evaluation import PREDICT_CHUNKS

BLOCK_LINES = 256  # lines predicted together (one forward call)


@dataclass
class PredictionSummary:
    sentences: int = 0
    nodes: int = 0
    tokens: int = 0
    unknown_tokens: int = 0
    unknown_types: set = field(default_factory=set)
    fallback_trees: int = 0


@dataclass
class PredictedTree:
    tree: Tree
    line: int
    labels: np.ndarray  # (N,) predicted class per node
    probabilities: np.ndarray  # (N, C)
    unknown_words: list[str]
    fallback: bool


def parse_input_line(text: str, source: str, line: int, input_format: str, binarise: str) -> tuple[Tree, bool] | None:
    """(tree, used_fallback) for one input line, or None for a blank line."""
    body = text.strip(SEPARATORS + "\r\n")
    if not body:
        return None
    as_tree = input_format == "trees" or (input_format == "auto" and body.startswith("("))
    if as_tree:
        return parse_tree(text.rstrip("\r\n"), path=source, line=line, binarise=binarise, ignore_labels=True), False
    words = [unescape_token(t) for t in body.split()]
    return right_branching_tree(words, f"{source}:{line}"), True


def predict_lines(checkpoint: Checkpoint, lines: Iterable[str], source: str, input_format: str = "auto",
                  summary: PredictionSummary | None = None, threads: int = 1) -> Iterator[PredictedTree]:
    """Predict every node of every input line, in input order, ``BLOCK_LINES`` lines per forward pass.

    ``threads`` worker threads share each block (the labels do not depend on it).
    """
    summary = summary if summary is not None else PredictionSummary()
    objective = TreeModelObjective(checkpoint.params, threads=threads)
    block: list[tuple[Tree, int, bool]] = []
    try:
        for line_no, text in enumerate(lines, start=1):
            parsed = parse_input_line(text, source, line_no, input_format, checkpoint.config.binarise)
            if parsed is not None:
                block.append((parsed[0], line_no, parsed[1]))
            if len(block) >= BLOCK_LINES:
                yield from _predict_block(objective, checkpoint, block, summary)
                block = []
        if block:
            yield from _predict_block(objective, checkpoint, block, summary)
    finally:
        objective.close()


def _predict_block(objective: TreeModelObjective, checkpoint: Checkpoint, block, summary: PredictionSummary):
    trees = [t for t, _, _ in block]
    bank = encode_treebank(trees, checkpoint.vocabulary)
    # the same fixed split as scoring (run/evaluation.py), so both give the same labels
    chunks = split_into_chunks(bank, np.arange(len(trees)), PREDICT_CHUNKS)
    Y = np.concatenate([y for _, y in objective.forward_chunks(checkpoint.params, chunks)])  # a copy
    labels = np.argmax(Y, axis=1).astype(np.int32)
    for k, (tree, line_no, fallback) in enumerate(block):
        a, z = int(bank.start[k]), int(bank.start[k + 1])
        unknown = [w for w in tree.words if checkpoint.vocabulary.id_of(w) == 0]
        summary.sentences += 1
        summary.nodes += z - a
        summary.tokens += len(tree.words)
        summary.unknown_tokens += len(unknown)
        summary.unknown_types.update(unknown)
        summary.fallback_trees += int(fallback)
        yield PredictedTree(tree, line_no, labels[a:z], Y[a:z], unknown, fallback)


def prediction_record(p: PredictedTree) -> dict:
    """One JSON-lines record: every node's span, text, predicted label and class probabilities."""
    spans = p.tree.spans()
    nodes = []
    for i in range(p.tree.n_nodes):
        start, end = int(spans[i, 0]), int(spans[i, 1])
        nodes.append({"span": [start, end], "text": " ".join(p.tree.words[start:end]), "label": int(p.labels[i]),
                      "probabilities": [round(float(x), 6) for x in p.probabilities[i]]})
    return {"line": p.line, "sentence": " ".join(p.tree.words), "root_label": int(p.labels[-1]),
            "tree_source": "fallback right-branching" if p.fallback else "input", "unknown_words": p.unknown_words,
            "nodes": nodes}
