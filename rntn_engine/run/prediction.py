"""Predict a label for every phrase of new sentences, streamed in blocks of lines.

Input, one item per line (blank lines skipped):
  * a bracketed tree (the line starts with "("): its labels, if any, are ignored, so
    class numbers, ``_`` and a parser's categories (``(S (NP ...) (VP ...))``) all work;
    a tree may go on over the next lines, as parsers' pretty printers write it (the
    treebank format's rules: it ends where its brackets balance);
  * a plain sentence (anything else): cut into tokens by treebank conventions
    (data/sentence_tokens.py: punctuation split off, ``wasn't`` -> ``was n't``, brackets
    escaped), unless ``tokenize=False`` keeps the tokens as given. No parser is bundled, so
    it gets the fallback tree below, and the caller is told (``PredictionSummary.fallback_trees``).

Lines and tokens follow the one rule of the treebank reader (data/treebank_reader.py,
:class:`TextLines`): a line ends at LF only (a CR before it belongs to the line end), a lone
CR is a token separator like a space, and Unicode line and paragraph separators belong to
their word. Input is read as bytes and decoded line by line, so a NUL byte or invalid
UTF-8 is a one-line error at its line and column, from a file or from standard input alike.

Limits: a line longer than ``max_line_bytes`` (default :data:`MAX_INPUT_LINE_BYTES`), and a
tree spread over lines longer than :data:`TREE_LINES_FACTOR` times that over all its lines, are
refused with a one-line error naming the line. An error stops the input where it is found,
after every item before it has been predicted and handed out.

Fallback tree: right-branching, ``(w1 (w2 (w3 ... wn)))``. English constituency
structure is predominantly right-branching (heads before complements), so this
chain keeps pre-modifiers -- negators, intensifiers, determiners -- next to the phrase
that follows them; it cannot know where phrases really end, so a real parse gives
better results.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import BinaryIO, Iterable, Iterator

import numpy as np

from rntn_engine.data.batches import encode_treebank
from rntn_engine.data.bracket_tokens import SEPARATORS, unescape_token
from rntn_engine.data.errors import InputError, TreebankError
from rntn_engine.data.sentence_tokens import escape_brackets, sentence_words, split_at_separators, treebank_tokens
from rntn_engine.data.tree import Tree, right_branching_tree
from rntn_engine.data.treebank_reader import LineSource, RecordAssembler, TextLines, parse_record
from rntn_engine.model.objective import TreeModelObjective, split_into_chunks
from rntn_engine.run.checkpoints import Checkpoint
from rntn_engine.run.evaluation import PREDICT_CHUNKS

BLOCK_LINES = 256  # lines predicted together (one forward call)
# Longest input line in bytes. Memory grows with a sentence's words (2n-1 nodes, each with its vector
# and class probabilities), and its JSON-lines record quadratically (each node of the fallback chain
# repeats its span's text). Measured with `rntn predict` on one sentence line (README, `rntn predict`):
# 16 KiB (about 3,000 words) peaks at 313 MB with --format jsonl against 194 MB for 1 KiB, while 64 KiB
# peaks at 1.6 GB and writes 430 MB. The longest sentence of a treebank is a few hundred words (a few KB).
MAX_INPUT_LINE_BYTES = 16 * 1024
# A tree spread over several lines may take this many times the line limit over all its lines
# (a pretty printer's indentation takes room; a missing ')' must not gather lines without end).
TREE_LINES_FACTOR = 16
# Share of unknown tokens above which `rntn predict` warns (README, `rntn predict`, explains the choice).
UNKNOWN_SHARE_WARNING = 0.2
EXPECTED_INPUT = "expected UTF-8 text, a bracketed tree or a plain sentence per line"


@dataclass
class PredictionSummary:
    sentences: int = 0
    nodes: int = 0
    tokens: int = 0
    unknown_tokens: int = 0
    unknown_types: set = field(default_factory=set)
    fallback_trees: int = 0
    untokenised: int = 0  # items whose words still hold what treebank tokenisation splits off
    untokenised_example: tuple[int, str] | None = None  # (line, word) of the first such item

    def warnings(self, unknown_share_limit: float = UNKNOWN_SHARE_WARNING, option: str = "--warn-unknown-share",
                 item: str = "line") -> list[str]:
        """The one-line warnings of a run, from its counts (none when all is well); ``option`` names the
        setting of the limit and ``item`` what a place number counts, in their wording."""
        out = []
        if self.untokenised:
            where = ""
            if self.untokenised_example is not None:
                place, word = self.untokenised_example
                where = f" ({item} {place}: {word!r})"
            out.append(f"warning: {self.untokenised} of {self.sentences} items look untokenised{where}: "
                       "punctuation glued to a word or a clitic such as n't not split off makes words the "
                       "model does not know; give plain sentences (tokenised here) or tokenise the text "
                       "before parsing it")
        share = self.unknown_tokens / self.tokens if self.tokens else 0.0
        if share > unknown_share_limit:
            out.append(f"warning: {100 * share:.1f}% of the tokens are unknown words ({self.unknown_tokens} of "
                       f"{self.tokens}), above the limit of {100 * unknown_share_limit:.1f}% ({option}): their "
                       "phrases are labelled from the unknown-word vector; check the input's language, "
                       "tokenisation and letter case against the training data")
        return out

    def count(self, tree: Tree, unknown: list[str], sentence: bool, tokenized: bool, n_nodes: int, place: int) -> None:
        """Count one predicted item: ``sentence`` for a plain sentence (``tokenized``: cut by treebank
        conventions, so never untokenised); ``place`` is its line or item number."""
        self.sentences += 1
        self.nodes += n_nodes
        self.tokens += len(tree.words)
        self.unknown_tokens += len(unknown)
        self.unknown_types.update(unknown)
        self.fallback_trees += int(sentence)
        if not (sentence and tokenized):
            word = untokenised_word(tree.words)
            if word is not None:
                self.untokenised += 1
                if self.untokenised_example is None:
                    self.untokenised_example = (place, word)


@dataclass
class PredictedTree:
    tree: Tree
    line: int
    labels: np.ndarray  # (N,) predicted class per node
    probabilities: np.ndarray  # (N, C)
    unknown_words: list[str]
    fallback: bool


def sentence_tree(body: str, source: str, line: int, tokenize: bool = True) -> Tree:
    """The fallback tree of a plain sentence: cut by treebank conventions, or (``tokenize=False``)
    split on the separators only; escapes undone either way."""
    words = sentence_words(body) if tokenize else [unescape_token(t) for t in split_at_separators(body)]
    return right_branching_tree(words, f"{source}:{line}")


def untokenised_word(words: list[str] | tuple[str, ...]) -> str | None:
    """The first word that treebank tokenisation would cut (e.g. ``queue.``), or None when none would be
    (the test of data/sentence_tokens.py looks_untokenised, with the word that fails it)."""
    escaped = [escape_brackets(w) for w in words]
    tokens = treebank_tokens(" ".join(escaped))
    if tokens == escaped:
        return None
    for word, token, token_of_word in zip(words, tokens, escaped):
        if token_of_word != token:
            return word
    return words[-1]


def input_lines(stream: BinaryIO, source: str, max_line_bytes: int = MAX_INPUT_LINE_BYTES) -> Iterator[tuple[int, str]]:
    """(line number, text) of every line of a binary input, by the reader's line rule and checks."""
    lines = TextLines(LineSource(stream), source, limit=max_line_bytes, expect=EXPECTED_INPUT,
                      limit_hint=" (--max-line-bytes)")
    while (text := lines.next()) is not None:
        yield lines.line_no, text


def iter_input_items(lines: Iterable[tuple[int, str]], source: str, input_format: str, binarise: str,
                     tokenize: bool = True, max_line_bytes: int = MAX_INPUT_LINE_BYTES) -> Iterator[tuple[Tree, int, bool]]:
    """(tree, first line, used_fallback) for every item of the input, in order.

    A tree may span several lines, by the rules of the treebank format (data/treebank_reader.py):
    it ends where its brackets balance, and a '(' in the first column starts a new one.
    Blank lines are skipped; so are comment lines ('#') where a tree may start, except
    in sentence input, where every non-blank line is a sentence. A tree longer than
    ``TREE_LINES_FACTOR * max_line_bytes`` over its lines is refused at its first line.
    """
    records = RecordAssembler()
    record_bytes = 0

    def tree_of(done) -> tuple[Tree, int, bool]:
        record, cut_by = done
        tree = parse_record(record, path=source, cut_by=cut_by, binarise=binarise, ignore_labels=True)
        return tree, record[0][0], False

    for line_no, text in lines:
        if not records.open:
            body = text.strip(SEPARATORS)
            if not body:
                continue
            if not (input_format == "trees" or (input_format == "auto" and body.startswith("("))):
                yield sentence_tree(body, source, line_no, tokenize), line_no, True
                continue
            record_bytes = 0
        done = records.feed(line_no, text)
        if done is not None:
            yield tree_of(done)
            if records.open:  # the line that cut the record off starts the next one
                record_bytes = 0
        if records.open:
            record_bytes += len(text.encode("utf-8")) + 1
            if record_bytes > TREE_LINES_FACTOR * max_line_bytes:
                first_line, first_text = records.lines[0]
                raise TreebankError(source, f"tree longer than {TREE_LINES_FACTOR * max_line_bytes} bytes over "
                                    f"its lines ({TREE_LINES_FACTOR} x --max-line-bytes): expected its closing ')' "
                                    "sooner", first_line,
                                    len(first_text) - len(first_text.lstrip(SEPARATORS)) + 1)
    done = records.finish()
    if done is not None:
        yield tree_of(done)


def predict_lines(checkpoint: Checkpoint, lines: Iterable[tuple[int, str]], source: str, input_format: str = "auto",
                  summary: PredictionSummary | None = None, threads: int = 1, tokenize: bool = True,
                  max_line_bytes: int = MAX_INPUT_LINE_BYTES) -> Iterator[PredictedTree]:
    """Predict every node of every input item, in input order, ``BLOCK_LINES`` items per forward pass.

    ``lines``: (line number, text) pairs, e.g. from :func:`input_lines`. ``threads`` worker
    threads share each block (the labels do not depend on it). An input error is raised after
    every item before it has been predicted and yielded.
    """
    summary = summary if summary is not None else PredictionSummary()
    objective = TreeModelObjective(checkpoint.params, threads=threads)
    items = iter_input_items(lines, source, input_format, checkpoint.config.binarise, tokenize, max_line_bytes)
    block: list[tuple[Tree, int, bool]] = []
    error: InputError | None = None
    try:
        while True:
            try:
                item = next(items, None)
            except InputError as exc:
                error, item = exc, None
            if item is None:
                break
            block.append(item)
            if len(block) >= BLOCK_LINES:
                yield from _predict_block(objective, checkpoint, block, summary, tokenize)
                block = []
        if block:
            yield from _predict_block(objective, checkpoint, block, summary, tokenize)
        if error is not None:
            raise error
    finally:
        objective.close()


def _predict_block(objective: TreeModelObjective, checkpoint: Checkpoint, block, summary: PredictionSummary,
                   tokenize: bool):
    trees = [t for t, _, _ in block]
    bank = encode_treebank(trees, checkpoint.vocabulary)
    # the same fixed split as scoring (run/evaluation.py), so both give the same labels
    chunks = split_into_chunks(bank, np.arange(len(trees)), PREDICT_CHUNKS)
    Y = np.concatenate([y for _, y in objective.forward_chunks(checkpoint.params, chunks)])  # a copy
    labels = np.argmax(Y, axis=1).astype(np.int32)
    for k, (tree, line_no, fallback) in enumerate(block):
        a, z = int(bank.start[k]), int(bank.start[k + 1])
        unknown = [w for w in tree.words if checkpoint.vocabulary.id_of(w) == 0]
        summary.count(tree, unknown, fallback, tokenize, z - a, line_no)
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
