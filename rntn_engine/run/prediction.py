"""Predict a label for every phrase of new sentences, streamed in blocks of lines.

Input, one item per line (blank lines skipped):
  * a bracketed tree (the line starts with "("): its labels, if any, are ignored, so
    class numbers, ``_`` and a parser's categories (``(S (NP ...) (VP ...))``) all work;
    a tree may go on over the next lines, as parsers' pretty printers write it (the
    treebank format's rules: it ends where its brackets balance);
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
from rntn_engine.data.treebank_reader import RecordAssembler, parse_record
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


def sentence_tree(body: str, source: str, line: int) -> Tree:
    """The fallback tree of a tokenised sentence (tokens split on white space, escapes undone)."""
    return right_branching_tree([unescape_token(t) for t in body.split()], f"{source}:{line}")


def iter_input_items(lines: Iterable[str], source: str, input_format: str, binarise: str) -> Iterator[tuple[Tree, int, bool]]:
    """(tree, first line, used_fallback) for every item of the input, in order.

    A tree may span several lines, by the rules of the treebank format (data/treebank_reader.py):
    it ends where its brackets balance, and a '(' in the first column starts a new one.
    Blank lines are skipped; so are comment lines ('#') where a tree may start, except
    in sentence input, where every non-blank line is a sentence.
    """
    records = RecordAssembler()

    def tree_of(done) -> tuple[Tree, int, bool]:
        record, cut_by = done
        tree = parse_record(record, path=source, cut_by=cut_by, binarise=binarise, ignore_labels=True)
        return tree, record[0][0], False

    for line_no, text in enumerate(lines, start=1):
        text = text.rstrip("\r\n")
        if not records.open:
            body = text.strip(SEPARATORS)
            if not body:
                continue
            if not (input_format == "trees" or (input_format == "auto" and body.startswith("("))):
                yield sentence_tree(body, source, line_no), line_no, True
                continue
        done = records.feed(line_no, text)
        if done is not None:
            yield tree_of(done)
    done = records.finish()
    if done is not None:
        yield tree_of(done)


def predict_lines(checkpoint: Checkpoint, lines: Iterable[str], source: str, input_format: str = "auto",
                  summary: PredictionSummary | None = None, threads: int = 1) -> Iterator[PredictedTree]:
    """Predict every node of every input item, in input order, ``BLOCK_LINES`` items per forward pass.

    ``threads`` worker threads share each block (the labels do not depend on it).
    """
    summary = summary if summary is not None else PredictionSummary()
    objective = TreeModelObjective(checkpoint.params, threads=threads)
    block: list[tuple[Tree, int, bool]] = []
    try:
        for item in iter_input_items(lines, source, input_format, checkpoint.config.binarise):
            block.append(item)
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
