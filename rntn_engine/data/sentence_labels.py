"""Sentence-labelled corpora as root-labelled trees.

Many sentiment corpora label whole sentences only, one per line::

    3<TAB>The palm house was lovely, but the café wasn't.
    1<TAB>(S (NP the queue) (VP was (ADJP far too long)))

Each line becomes one tree whose root carries the line's label and whose other nodes are
unlabelled (they add no loss), so the tree models can train on such data: the root's
error reaches every phrase through the composition. A text starting with ``(`` is a
parse (any labels in it, class numbers or a parser's categories, are dropped; n-ary nodes
are binarised and unary chains collapsed as for any treebank); any other text is a
sentence, cut into tokens by treebank conventions (data/sentence_tokens.py) and given a
right-branching tree. Blank lines and lines starting with ``#`` are skipped. A line that
does not hold ``LABEL<TAB>TEXT`` with a class label 0..C-1 stops the conversion with
one error naming its file, line and column.
"""

from __future__ import annotations

import os
from typing import Iterator

import numpy as np

from rntn_engine.data.errors import TreebankError
from rntn_engine.data.sentence_tokens import treebank_tokens
from rntn_engine.data.tree import UNLABELLED, Tree, right_branching_tree
from rntn_engine.data.treebank_reader import parse_tree


def root_labelled_tree(line: str, path: str, line_no: int, num_classes: int, binarise: str = "right",
                       tokenize: bool = True) -> Tree:
    """The tree of one ``LABEL<TAB>TEXT`` line (module docstring)."""
    label_text, tab, text = line.partition("\t")
    if not tab:
        raise TreebankError(path, "expected LABEL<TAB>sentence or LABEL<TAB>(tree): no tab on this line", line_no, 1)
    label_field = label_text.strip()
    if not label_field.isdigit() or not 0 <= int(label_field) < num_classes:
        raise TreebankError(path, f"expected a class label 0..{num_classes - 1} before the tab, found "
                                  f"{label_field!r}", line_no, 1 + len(label_text) - len(label_text.lstrip()))
    column = len(label_text) + 2  # where the text starts
    if not text.strip():
        raise TreebankError(path, "expected a sentence or a tree after the tab, found nothing", line_no, column)
    if text.lstrip().startswith("("):
        padding = len(text) - len(text.lstrip())
        tree = parse_tree(" " * (column - 1 + padding) + text.strip(), path=path, line=line_no, binarise=binarise,
                          ignore_labels=True)
    else:
        words = treebank_tokens(text) if tokenize else text.split()
        tree = right_branching_tree(words, f"{path}:{line_no}")
    labels = np.full(tree.n_nodes, UNLABELLED, dtype=np.int32)
    labels[tree.root] = int(label_field)
    return Tree(tree.words, tree.word, tree.left, tree.right, labels, f"{path}:{line_no}")


def read_sentence_labels(path: str | os.PathLike, num_classes: int, binarise: str = "right",
                         tokenize: bool = True) -> Iterator[Tree]:
    """Every tree of a sentence-labelled file, in order (module docstring)."""
    name = os.fspath(path)
    try:
        with open(path, "rb") as fh:
            for line_no, raw in enumerate(fh, start=1):
                try:
                    line = raw.decode("utf-8-sig" if line_no == 1 else "utf-8").rstrip("\r\n")
                except UnicodeDecodeError as exc:
                    raise TreebankError(name, f"not UTF-8 text ({exc.reason})", line_no, exc.start + 1) from None
                if not line.strip() or line.lstrip().startswith("#"):
                    continue
                yield root_labelled_tree(line, name, line_no, num_classes, binarise, tokenize)
    except OSError as exc:
        raise TreebankError(name, f"cannot read it: {exc.strerror or exc}") from None
