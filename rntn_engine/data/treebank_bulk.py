"""Read a treebank file in blocks: the bulk scanner where it can, the exact reader where it cannot.

Legend: per block, N nodes, L leaves, T trees, W words (distinct within a scanned block).

A block is about :data:`BLOCK_BYTES` of the file cut at a line end. The numba scanner
(treebank_scan.py) reads every tree of the block into flat arrays at once; words
stay bytes until the end, when each distinct one is decoded once. Where the scanner
stops -- at bad input, or a rare form it leaves alone -- the exact reader
(treebank_reader.py) reads that one record from the same bytes and file, then the
scanner goes on after it. So errors carry the exact reader's FILE:LINE:COL, and
the trees are the same as the exact reader's (tests/test_treebank_bulk.py).

Memory is bounded by a block (and by the longest tree), not by the file.
"""

from __future__ import annotations

import codecs
import os
from dataclasses import dataclass
from typing import Callable, Iterator

import numpy as np

from rntn_engine.data import treebank_reader
from rntn_engine.data.bracket_tokens import unescape_token
from rntn_engine.data.errors import TreebankError
from rntn_engine.data.tree import Tree
from rntn_engine.data.treebank_reader import (
    BOM,
    ExactRecordReader,
    LabelReader,
    LineSource,
    check_options,
    check_signature,
    no_tree_error,
)
from rntn_engine.data.treebank_scan import MODE_CODES, STOPPED, count_opens_and_lines, scan_records

BLOCK_BYTES = 4 * 1024 * 1024  # bytes read per block (the scanner's share of memory grows with it)


@dataclass(frozen=True)
class TreeBlock:
    """Consecutive trees of one file as flat arrays, tree after tree, each in post-order."""

    path: str
    words: list[str]  # (W,) words, unescaped
    leaf_word: np.ndarray  # (L,) int32 index into ``words`` of each leaf, leaves in node order
    word: np.ndarray  # (N,) int32 position of a leaf in its tree's words (Tree.word), -1 at internal nodes
    left: np.ndarray  # (N,) int32 left child, index local to its tree, -1 at leaves
    right: np.ndarray  # (N,) int32 right child, local index, -1 at leaves
    label: np.ndarray  # (N,) int32 class, -1 unlabelled
    node_start: np.ndarray  # (T + 1,) int64 first node of each tree; node_start[T] = N
    leaf_start: np.ndarray  # (T + 1,) int64 first leaf of each tree; leaf_start[T] = L
    line: np.ndarray  # (T,) int64 the file line each tree starts on

    @property
    def n_trees(self) -> int:
        return int(self.line.shape[0])

    @property
    def n_nodes(self) -> int:
        return int(self.left.shape[0])

    def word_counts(self) -> np.ndarray:
        """(W,) int64 occurrences of each word of ``words`` in this block."""
        return np.bincount(self.leaf_word, minlength=len(self.words))


def iter_tree_blocks(
    path: str | os.PathLike,
    *,
    num_classes: int | None = None,
    binarise: str = "right",
    progress: Callable[[int], None] | None = None,
) -> Iterator[TreeBlock]:
    """Yield the trees of a treebank file as :class:`TreeBlock` s (module docstring).

    Same options, checks and errors as :func:`treebank_reader.iter_trees`; ``progress``
    gets the number of lines read since its previous call, after every block.
    """
    mode = check_options(num_classes, binarise)
    return _blocks(os.fspath(path), num_classes, mode, progress)


def trees_of_block(block: TreeBlock) -> Iterator[Tree]:
    """The trees of a block as :class:`Tree` objects (their arrays are views of the block's)."""
    words = block.words
    leaf_words = [words[k] for k in block.leaf_word.tolist()]
    nodes = block.node_start.tolist()
    leaves = block.leaf_start.tolist()
    prefix = block.path + ":"
    word, left, right, label = block.word, block.left, block.right, block.label
    for t, line in enumerate(block.line.tolist()):
        a, z = nodes[t], nodes[t + 1]
        yield Tree(tuple(leaf_words[leaves[t] : leaves[t + 1]]), word[a:z], left[a:z], right[a:z], label[a:z],
                   prefix + str(line))


def block_of_tree(tree: Tree, path: str, line: int) -> TreeBlock:
    """A one-tree block (for a tree the exact reader read)."""
    n = len(tree.words)
    return TreeBlock(path, list(tree.words), np.arange(n, dtype=np.int32), tree.word, tree.left, tree.right,
                     tree.label, np.array([0, tree.n_nodes], dtype=np.int64), np.array([0, n], dtype=np.int64),
                     np.array([line], dtype=np.int64))


# --- the block loop ------------------------------------------------------------------------------


def _blocks(name: str, num_classes: int | None, mode: str, progress: Callable[[int], None] | None) -> Iterator[TreeBlock]:
    n_trees = 0
    lines = 0  # lines of the file before ``data``
    offset = 0  # file offset of ``data``
    try:
        with open(name, "rb") as f:
            check_signature(name, f.peek(16)[:16])
            data = f.read(BLOCK_BYTES)
            eof = not data
            while len(data) < len(BOM) and not eof:
                more = f.read(BLOCK_BYTES)
                eof = not more
                data += more
            if data.startswith(BOM):
                data, offset = data[len(BOM) :], len(BOM)
            while data or not eof:
                if not eof and (not data or len(data) < BLOCK_BYTES // 2):
                    more = f.read(BLOCK_BYTES)
                    eof = not more
                    data += more
                    continue
                usable = len(data) if eof else data.rfind(b"\n") + 1
                bad, text = _check_text(data, usable)
                scan_end = usable if bad < 0 else data.rfind(b"\n", 0, bad) + 1
                at_eof = eof and bad < 0 and scan_end == len(data)
                extra = len(BOM) if lines == 0 and offset == len(BOM) else 0
                block, status, consumed, used_lines = _scan(name, data, text, scan_end, at_eof, extra, num_classes,
                                                            mode, lines)
                if block is not None:
                    n_trees += block.n_trees
                    yield block
                lines += used_lines
                offset += consumed
                if progress is not None and used_lines:
                    progress(used_lines)
                longest = treebank_reader.MAX_TREE_BYTES + treebank_reader.MAX_LINE_BYTES + 2
                stuck = consumed == 0 and (eof or len(data) > longest)
                if status != STOPPED and bad < 0 and not stuck:
                    data = data[consumed:]
                    if consumed == 0 and not eof:  # one record longer than the bytes so far
                        more = f.read(max(BLOCK_BYTES, len(data)))
                        eof = not more
                        data += more
                    continue
                # the exact reader takes the record the scanner left, from the same bytes and file
                source = LineSource(f, data[consumed:])
                exact = ExactRecordReader(source, name, LabelReader(num_classes), mode, lines, offset)
                tree = exact.next_tree()
                if progress is not None and exact.line_no > lines:
                    progress(exact.line_no - lines)
                if tree is None:
                    break
                n_trees += 1
                yield block_of_tree(tree, name, exact.record_line)
                lines, offset = exact.line_no, exact.offset
                data = source.unread()
    except OSError as exc:
        raise TreebankError(name, f"cannot read the file: {exc.strerror or exc}") from None
    if n_trees == 0:
        raise no_tree_error(name, max(lines, int(offset > 0)))  # a byte-order mark alone is one line


def _check_text(data: bytes, end: int) -> tuple[int, str | None]:
    """(offset of the first NUL byte or invalid UTF-8 sequence in ``data[:end]`` or -1,
    the decoded text when it is all ASCII, else None)."""
    bad = data.find(b"\x00", 0, end)
    try:
        text, _ = codecs.utf_8_decode(memoryview(data)[: end if bad < 0 else bad], "strict", True)
    except UnicodeDecodeError as exc:
        return exc.start, None
    return bad, text if bad < 0 and len(text) == end else None


def _scan(name: str, data: bytes, text: str | None, end: int, at_eof: bool, extra: int, num_classes: int | None, mode: str,
          lines_before: int) -> tuple[TreeBlock | None, int, int, int]:
    """Run the scanner over ``data[:end]``; (block or None, status, bytes consumed, lines consumed)."""
    buffer = np.frombuffer(data, dtype=np.uint8)
    opens, breaks = count_opens_and_lines(buffer, end)
    node_word = np.empty(2 * opens + 1, dtype=np.int32)
    node_left = np.empty(2 * opens + 1, dtype=np.int32)
    node_right = np.empty(2 * opens + 1, dtype=np.int32)
    node_label = np.empty(2 * opens + 1, dtype=np.int32)
    leaf_token = np.empty(opens + 1, dtype=np.int32)
    max_trees = min(opens, breaks + 1) + 1
    tree_nodes = np.empty(max_trees + 1, dtype=np.int64)
    tree_leaves = np.empty(max_trees + 1, dtype=np.int64)
    tree_line = np.empty(max_trees, dtype=np.int64)
    word_start = np.empty(opens + 1, dtype=np.int32)
    word_end = np.empty(opens + 1, dtype=np.int32)
    stack = np.empty((opens + 1, 3), dtype=np.int32)
    kids = np.empty(opens + 1, dtype=np.int32)
    status, n_trees, n_nodes, n_leaves, n_words, consumed, used_lines = scan_records(
        buffer, end, at_eof, extra, MODE_CODES[mode], num_classes or 0, treebank_reader.MAX_LINE_BYTES,
        treebank_reader.MAX_TREE_BYTES, node_word, node_left, node_right, node_label, leaf_token, tree_nodes,
        tree_leaves, tree_line, word_start, word_end, stack, kids)
    if n_trees == 0:
        return None, status, consumed, used_lines
    starts, ends = word_start[:n_words].tolist(), word_end[:n_words].tolist()
    if text is not None:  # ASCII: byte offsets are character offsets
        words = [text[s:e] for s, e in zip(starts, ends)]
    else:
        words = [data[s:e].decode("utf-8") for s, e in zip(starts, ends)]
    words = [unescape_token(w) if "-" in w else w for w in words]
    block = TreeBlock(
        name, words, leaf_token[:n_leaves].copy(), node_word[:n_nodes].copy(), node_left[:n_nodes].copy(),
        node_right[:n_nodes].copy(), node_label[:n_nodes].copy(), tree_nodes[: n_trees + 1].copy(),
        tree_leaves[: n_trees + 1].copy(), tree_line[:n_trees] + lines_before,
    )
    return block, status, consumed, used_lines
