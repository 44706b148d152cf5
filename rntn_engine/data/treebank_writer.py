"""Write flat :class:`Tree` objects back as bracketed lines, one tree per line.

The output is the canonical form of the format read by :mod:`treebank_reader`:
single spaces, ``(label left right)`` and ``(label word)``, ``_`` for an
unlabelled node, and bracket characters in words escaped (``-LRB-`` and the
rest, see :mod:`bracket_tokens`). Reading a written tree gives the same tree
back. Traversal uses an explicit stack, so any depth can be written.
"""

from __future__ import annotations

import os
from typing import IO, Iterable

import numpy as np

from rntn_engine.data.bracket_tokens import escape_word
from rntn_engine.data.tree import UNLABELLED, Tree


def format_tree(tree: Tree, labels: np.ndarray | None = None) -> str:
    """One line (no newline) for ``tree``; ``labels`` (N,) replaces ``tree.label``, e.g. predictions.

    A label of -1 is written ``_``. ValueError for a label array of the wrong
    shape or type, a label below -1, or a word that cannot be written.
    """
    if tree.n_nodes == 0:
        raise ValueError("cannot write a tree with no nodes")
    values = tree.label if labels is None else np.asarray(labels)
    if values.shape != (tree.n_nodes,):
        raise ValueError(f"labels must have shape ({tree.n_nodes},), not {values.shape}")
    if not np.issubdtype(values.dtype, np.integer):
        raise ValueError(f"labels must be integers, not {values.dtype}")
    if values.min() < UNLABELLED:
        raise ValueError(f"labels must be >= {UNLABELLED} (-1 writes '_'), found {values.min()}")
    label_text = ["_" if v == UNLABELLED else str(v) for v in values.tolist()]
    tokens = [escape_word(w) for w in tree.words]
    word, left, right = tree.word.tolist(), tree.left.tolist(), tree.right.tolist()

    # pre-order walk: a stack of node ids (int) and text still to emit (str)
    parts: list[str] = []
    todo: list[int | str] = [tree.root]
    while todo:
        item = todo.pop()
        if isinstance(item, str):
            parts.append(item)
        elif left[item] < 0:
            parts.append(f"({label_text[item]} {tokens[word[item]]})")
        else:
            parts.append(f"({label_text[item]} ")
            todo += (")", right[item], " ", left[item])
    return "".join(parts)


def write_trees(trees: Iterable[Tree], path_or_textfile: str | os.PathLike | IO[str]) -> int:
    """Write one line per tree to a path (UTF-8, ``\\n`` line ends) or an open text file; return the count."""
    if hasattr(path_or_textfile, "write"):
        return _write_lines(trees, path_or_textfile)
    with open(path_or_textfile, "w", encoding="utf-8", newline="\n") as f:
        return _write_lines(trees, f)


def _write_lines(trees: Iterable[Tree], f: IO[str]) -> int:
    count = 0
    for tree in trees:
        f.write(format_tree(tree) + "\n")
        count += 1
    return count
