"""Read a treebank file in blocks: the bulk scanner where it can, the exact reader where it cannot.

Legend: per block, N nodes, L leaves, T trees; W words of the file so far.

A block is about :data:`BLOCK_BYTES` of the file, cut just before a line that starts with
``(`` (a record always starts there, so blocks can be scanned independently, up to
:data:`SCAN_THREADS` at once), or at a line end when no such line is near (then the next
block waits for this one). The numba scanner (treebank_scan.py) reads every tree of a
block into flat arrays at once, with its own word table; in file order, each block's
words are merged into the file's word table (ids in order of first appearance) and the
new ones decoded. Where the scanner stops -- at bad input, or a rare form it leaves
alone -- the exact reader (treebank_reader.py) reads that one record from the same bytes
and file, then the scanner goes on after it. So errors carry the exact reader's
FILE:LINE:COL, and the trees are the same as the exact reader's
(tests/test_treebank_bulk.py).

Memory is bounded by the blocks in flight (and by the longest tree), not by the file.
"""

from __future__ import annotations

import codecs
import os
from collections import deque
from concurrent.futures import Future, ThreadPoolExecutor
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
from rntn_engine.data.treebank_scan import (
    MODE_CODES,
    STOPPED,
    count_opens_and_lines,
    merge_words,
    new_word_table,
    scan_records,
)

BLOCK_BYTES = 4 * 1024 * 1024  # bytes read per block (the scanner's share of memory grows with it)
SCAN_THREADS = min(2, os.cpu_count() or 1)  # blocks scanned at once, on threads (the scanner releases the GIL)


@dataclass(frozen=True)
class TreeBlock:
    """Consecutive trees of one file as flat arrays, tree after tree, each in post-order.

    The arrays are only valid until the next block is asked for (their memory is reused):
    copy what you keep. ``words`` is the file's word list so far, shared by all blocks.
    """

    path: str
    words: list[str]  # (W,) the file's words so far, unescaped, in order of first appearance
    leaf_word: np.ndarray  # (L,) int32 index into ``words`` of each leaf, leaves in node order
    token: np.ndarray  # (N,) int32 index into ``words`` at leaves, -1 at internal nodes
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
    """The trees of a block as :class:`Tree` objects (with arrays of their own)."""
    words = block.words
    leaf_words = [words[k] for k in block.leaf_word.tolist()]
    nodes = block.node_start.tolist()
    leaves = block.leaf_start.tolist()
    prefix = block.path + ":"
    word, left, right, label = (a.copy() for a in (block.word, block.left, block.right, block.label))
    for t, line in enumerate(block.line.tolist()):
        a, z = nodes[t], nodes[t + 1]
        yield Tree(tuple(leaf_words[leaves[t] : leaves[t + 1]]), word[a:z], left[a:z], right[a:z], label[a:z],
                   prefix + str(line))


class _FileWords:
    """The word table of one file (treebank_scan.merge_words) and its words decoded."""

    def __init__(self) -> None:
        self.table, self.arena, self.arena_start = new_word_table(1 << 14, 1 << 18, 1 << 12)
        self.count = 0
        self.words: list[str] = []

    def merge(self, arena: np.ndarray, arena_start: np.ndarray, used: np.ndarray) -> np.ndarray:
        """(len(used) + 1,) int32: the file id of each word of a block's table (-1 if not used), then -1."""
        ids = np.empty(used.shape[0] + 1, dtype=np.int32)
        ids[-1] = -1  # what -1 (an internal node) maps to
        before = self.count
        self.table, self.arena, self.arena_start, self.count = merge_words(
            self.table, self.arena, self.arena_start, self.count, arena, arena_start, used, ids)
        starts = self.arena_start[before : self.count + 1].tolist()
        raw = self.arena[starts[0] : starts[-1]].tobytes() if starts else b""
        base = starts[0] if starts else 0
        for s, e in zip(starts[:-1], starts[1:]):
            word = raw[s - base : e - base].decode("utf-8")
            self.words.append(unescape_token(word) if "-" in word else word)
        return ids

    def ids_of(self, words: tuple[str, ...]) -> np.ndarray:
        """File ids of words given as text (a tree the exact reader read), by their UTF-8 bytes."""
        encoded = [w.encode("utf-8") for w in words]
        arena = np.frombuffer(b"".join(encoded), dtype=np.uint8)
        starts = np.zeros(len(encoded) + 1, dtype=np.int64)
        np.cumsum([len(e) for e in encoded], out=starts[1:])
        return self.merge(arena, starts, np.ones(len(encoded), dtype=np.bool_))[:-1]


def _block_of_tree(tree: Tree, path: str, line: int, words: _FileWords) -> TreeBlock:
    """A one-tree block (for a tree the exact reader read)."""
    n = len(tree.words)
    leaf_word = words.ids_of(tree.words)
    token = np.where(tree.word >= 0, leaf_word[np.maximum(tree.word, 0)], -1).astype(np.int32)
    return TreeBlock(path, words.words, leaf_word, token, tree.word, tree.left, tree.right, tree.label,
                     np.array([0, tree.n_nodes], dtype=np.int64), np.array([0, n], dtype=np.int64),
                     np.array([line], dtype=np.int64))


# --- the block loop ------------------------------------------------------------------------------


class _Workspace:
    """The arrays one block's scan writes into, kept for a later block: fresh memory costs a page fault
    per page touched, which on a virtual machine was measured at several microseconds."""

    def __init__(self) -> None:
        self.arrays: dict[str, np.ndarray] = {}

    def get(self, name: str, size: int, dtype, columns: int = 0) -> np.ndarray:
        """An array of at least ``size`` rows (grown only), cut to ``size``."""
        array = self.arrays.get(name)
        if array is None or array.shape[0] < size:
            array = np.empty((size, columns) if columns else size, dtype=dtype)
            self.arrays[name] = array
        return array[:size]


@dataclass
class _Scanned:
    """What the scanner found in one block, in its workspace (word ids local to the block)."""

    status: int
    consumed: int  # bytes of the block done with
    lines: int  # lines of the block done with
    bad: bool  # a NUL byte or invalid UTF-8 stopped the scan
    n_trees: int = 0
    arrays: tuple = ()  # node_word, node_token, left, right, label, leaf_token, tree_nodes, tree_leaves, tree_line
    arena: np.ndarray | None = None  # the block's words (treebank_scan)
    arena_start: np.ndarray | None = None
    used: np.ndarray | None = None  # (block words,) bool: the word occurs in a tree read


@dataclass
class _InFlight:
    """A block handed to a scanner thread."""

    data: bytes
    independent: bool  # the bytes after it start a record: a '(' in the first column (module docstring)
    future: Future | None  # None: left to the exact reader without a scan (a line longer than the limit)
    workspace: _Workspace | None


def _blocks(name: str, num_classes: int | None, mode: str, progress: Callable[[int], None] | None) -> Iterator[TreeBlock]:
    """Blocks in file order. Up to SCAN_THREADS blocks are scanned at once: a block is cut just before a
    line starting with '(', where a record always starts, so its scan needs nothing from the blocks before
    it. Where no such line is near, a block is cut at a line end and the next one waits for its result."""
    n_trees = 0
    lines = 0  # lines of the file consumed
    offset = 0  # bytes of the file consumed
    words = _FileWords()
    spare: list[_Workspace] = []
    try:
        with open(name, "rb") as f, ThreadPoolExecutor(SCAN_THREADS, thread_name_prefix="treebank-scan") as pool:
            check_signature(name, f.peek(16)[:16])
            buffer, eof = _read_more(f, b"", len(BOM))
            bom = len(BOM) if buffer.startswith(BOM) else 0
            buffer, offset = buffer[bom:], bom
            pending: deque[_InFlight] = deque()
            want = BLOCK_BYTES  # bytes to have in ``buffer`` before cutting the next block
            try:
                while True:
                    # --- keep the scanners busy: cut and submit blocks ---------------------------------------
                    while (not pending or pending[-1].independent) and len(pending) <= SCAN_THREADS:
                        if not eof and len(buffer) < want:
                            buffer, eof = _read_more(f, buffer, want)
                        if not buffer:
                            break
                        cut, independent = _cut(buffer, eof)
                        if cut == 0:  # no line end yet
                            if len(buffer) <= treebank_reader.MAX_LINE_BYTES + 1:
                                want = len(buffer) + BLOCK_BYTES
                                continue
                            pending.append(_InFlight(buffer, False, None, None))  # a line too long: exact reader
                            buffer = b""
                            break
                        data, buffer = buffer[:cut], buffer[cut:]
                        want = BLOCK_BYTES
                        extra = bom if not pending and lines == 0 and offset == bom else 0
                        at_eof = eof and not buffer
                        workspace = spare.pop() if spare else _Workspace()
                        pending.append(_InFlight(data, independent or at_eof, pool.submit(
                            _scan, data, at_eof, extra, num_classes, mode, workspace), workspace))
                    if not pending:
                        break
                    # --- take the oldest block's trees ---------------------------------------------------------
                    item = pending.popleft()
                    scanned = item.future.result() if item.future is not None else _Scanned(STOPPED, 0, 0, False)
                    if scanned.n_trees:
                        n_trees += scanned.n_trees
                        yield _block_of_scan(name, scanned, words, item.workspace, lines)
                    if item.workspace is not None:
                        spare.append(item.workspace)  # the consumer is done with the block
                    lines += scanned.lines
                    offset += scanned.consumed
                    if progress is not None and scanned.lines:
                        progress(scanned.lines)
                    status, consumed = scanned.status, scanned.consumed
                    if consumed == len(item.data) and status != STOPPED and not scanned.bad:
                        continue
                    longest = treebank_reader.MAX_TREE_BYTES + treebank_reader.MAX_LINE_BYTES + 2
                    if not (item.independent or status == STOPPED or scanned.bad
                            or (consumed == 0 and len(item.data) + len(buffer) > longest)):
                        buffer = item.data[consumed:] + buffer  # a record goes on in the next bytes
                        want = len(buffer) + BLOCK_BYTES
                        continue
                    # --- the exact reader takes the record the scanner left, and the scanners start again after it
                    rest = b"".join([item.data[consumed:], *(later.data for later in pending), buffer])
                    for later in pending:
                        later.future is None or later.future.cancel()
                    pending.clear()  # (a cancelled scan's workspace is not reused: it may still be running)
                    source = LineSource(f, rest)
                    exact = ExactRecordReader(source, name, LabelReader(num_classes), mode, lines, offset)
                    tree = exact.next_tree()
                    if progress is not None and exact.line_no > lines:
                        progress(exact.line_no - lines)
                    lines, offset = exact.line_no, exact.offset
                    if tree is None:
                        break
                    n_trees += 1
                    yield _block_of_tree(tree, name, exact.record_line, words)
                    buffer = source.unread()
            finally:
                for later in pending:
                    later.future is None or later.future.cancel()
    except OSError as exc:
        raise TreebankError(name, f"cannot read the file: {exc.strerror or exc}") from None
    if n_trees == 0:
        raise no_tree_error(name, max(lines, int(offset > 0)))  # a byte-order mark alone is one line


def _block_of_scan(name: str, scanned: _Scanned, words: _FileWords, workspace: _Workspace, lines: int) -> TreeBlock:
    """The block with file word ids (merged here, in file order) and file line numbers."""
    node_word, node_token, left, right, label, leaf_token, tree_nodes, tree_leaves, tree_line = scanned.arrays
    ids = words.merge(scanned.arena, scanned.arena_start, scanned.used)
    leaf_word = np.take(ids, leaf_token, out=workspace.get("leaf_word", leaf_token.shape[0], np.int32))
    token = np.take(ids, node_token, out=workspace.get("token", node_token.shape[0], np.int32))  # -1 stays -1
    return TreeBlock(name, words.words, leaf_word, token, node_word, left, right, label, tree_nodes, tree_leaves,
                     tree_line + lines)


def _read_more(f, buffer: bytes, at_least: int) -> tuple[bytes, bool]:
    """``buffer`` with more of the file, up to ``at_least`` bytes or the end; (bytes, end of file reached)."""
    pieces = [buffer]
    size = len(buffer)
    while size < at_least:
        more = f.read(at_least - size)
        if not more:
            return b"".join(pieces), True
        pieces.append(more)
        size += len(more)
    return b"".join(pieces), False


def _cut(buffer: bytes, eof: bool) -> tuple[int, bool]:
    """(bytes of ``buffer`` for the next block, whether the rest starts a record); 0 bytes: no line end yet."""
    if eof:
        return len(buffer), True
    start_of_tree = buffer.rfind(b"\n(")
    if start_of_tree >= 0:
        return start_of_tree + 1, True
    return buffer.rfind(b"\n") + 1, False


def _first_bad_byte(data: bytes, end: int) -> int:
    """Offset of the first NUL byte or invalid UTF-8 sequence in ``data[:end]``, or -1."""
    bad = data.find(b"\x00", 0, end)
    try:
        codecs.utf_8_decode(memoryview(data)[: end if bad < 0 else bad], "strict", True)
    except UnicodeDecodeError as exc:
        return exc.start
    return bad


def _scan(data: bytes, at_eof: bool, extra: int, num_classes: int | None, mode: str,
          workspace: _Workspace) -> _Scanned:
    """Scan one block (in a scanner thread) into ``workspace``. The block's lines count from its start."""
    usable = len(data) if at_eof else data.rfind(b"\n") + 1
    bad = _first_bad_byte(data, usable)
    end = usable if bad < 0 else data.rfind(b"\n", 0, bad) + 1
    at_eof = at_eof and bad < 0
    buffer = np.frombuffer(data, dtype=np.uint8)
    opens, breaks = count_opens_and_lines(buffer, end)
    nodes, trees = 2 * opens + 1, min(opens, breaks + 1) + 1
    get = workspace.get
    node_arrays = [get(k, nodes, np.int32) for k in ("node_word", "node_token", "left", "right", "label")]
    leaf_token = get("leaf_token", opens + 1, np.int32)
    tree_nodes, tree_leaves = get("tree_nodes", trees + 1, np.int64), get("tree_leaves", trees + 1, np.int64)
    tree_line = get("tree_line", trees, np.int64)
    status, n_trees, n_nodes, n_leaves, n_words, consumed, used_lines, arena, arena_start = scan_records(
        buffer, end, at_eof, extra, MODE_CODES[mode], num_classes or 0, treebank_reader.MAX_LINE_BYTES,
        treebank_reader.MAX_TREE_BYTES, *node_arrays, leaf_token, tree_nodes, tree_leaves, tree_line,
        get("stack", opens + 1, np.int32, 3), get("kids", opens + 1, np.int32))
    scanned = _Scanned(status, consumed, used_lines, bad >= 0)
    if n_trees:
        leaf_token = leaf_token[:n_leaves]
        scanned.n_trees = n_trees
        scanned.arrays = (*(a[:n_nodes] for a in node_arrays), leaf_token, tree_nodes[: n_trees + 1],
                          tree_leaves[: n_trees + 1], tree_line[:n_trees])
        scanned.arena, scanned.arena_start = arena, arena_start[: n_words + 1]
        scanned.used = np.bincount(leaf_token, minlength=n_words) > 0
    return scanned
