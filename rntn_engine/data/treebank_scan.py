"""The bulk tree scanner: one numba pass over a block of treebank bytes -> flat post-order arrays.

Legend: B bytes in the block, N nodes, L leaves, T trees, D distinct words (byte strings)
of the block; P = number of '(' bytes in the block bounds all of them (N <= 2P,
L, T, D <= P).

It accepts exactly the input the exact reader (treebank_reader.py) accepts, and builds
the same trees: the same tokens (separators `` \\t\\r\\f\\v``, brackets, everything
else a word byte), the same record rules, the same binarisation and unary collapse.
Anything else -- bad input, and a few rare valid forms it leaves to the exact reader
(a label of more than 9 digits) -- stops it at the start of that record, with status
:data:`STOPPED`; the caller reads that record with the exact reader, which gives the
error its location. The block must be valid UTF-8 without NUL bytes (the caller
checks; the scanner stops at a NUL too).

Words are not decoded here: each distinct byte string of the block gets an id (an
open-addressing hash table with FNV-1a hashes, bytes compared on every hit, so two
words never share an id), and the caller decodes each distinct word once. The table
starts small and doubles when half full, so it stays in cache (a table sized for the
worst case was measured 1.5x slower for the scan as a whole).

Outputs (preallocated by the caller, filled from index 0):

    node_word (2P,) int32   leaf position in its tree (Tree.word), -1 at internal nodes
    node_left (2P,) int32   left child, index local to its tree, -1 at leaves
    node_right (2P,) int32  right child, local index, -1 at leaves
    node_label (2P,) int32  class, -1 unlabelled
    leaf_token (P,) int32   distinct-word id of each leaf, leaves in node order
    tree_nodes (P+1,) int64 first node of each tree (and the end)
    tree_leaves (P+1,) int64 first leaf of each tree (and the end)
    tree_line (P,) int64    line of each tree's first line, counted from the block's start (1-based)
    word_start, word_end (P,) int32  bytes [start, end) of each distinct word's first occurrence
    stack (P+1, 3) int32    open nodes: label, first kid slot, word id or -1
    kids (P+1,) int32       finished children of the open nodes, innermost last
"""

from __future__ import annotations

import numpy as np
from numba import njit

FINISHED = 0  # every complete record before ``consumed`` is read; the rest needs more bytes (or is empty)
STOPPED = 1  # the record starting at ``consumed`` is left to the exact reader

MODE_CODES = {"right": 0, "left": 1, "strict": 2}
MAX_LABEL_DIGITS = 9  # longer labels (leading zeros, out of range) are left to the exact reader

_OPEN, _CLOSE, _NEWLINE, _HASH, _UNDERSCORE, _ZERO, _NINE = 40, 41, 10, 35, 95, 48, 57
_FNV_OFFSET = np.uint64(14695981039346656037)
_FNV_PRIME = np.uint64(1099511628211)


@njit(cache=True, nogil=True, inline="always")
def _is_separator(c):
    return c == 32 or c == 9 or c == 13 or c == 12 or c == 11


@njit(cache=True, nogil=True, inline="always")
def _ends_token(c):
    return c == 32 or c == 9 or c == 13 or c == 12 or c == 11 or c == 10 or c == 40 or c == 41


@njit(cache=True, nogil=True)
def count_opens_and_lines(data, end):
    """(number of '(' bytes, number of line breaks) in ``data[:end]``."""
    opens = 0
    breaks = 0
    for k in range(end):
        c = data[k]
        opens += c == _OPEN
        breaks += c == _NEWLINE
    return opens, breaks


@njit(cache=True, nogil=True)
def _grown_table(table_id, table_hash, n_distinct):
    """The hash table at twice the size, every id re-inserted."""
    size = 2 * table_id.shape[0]
    new_id = np.full(size, -1, dtype=np.int32)
    new_hash = np.empty(size, dtype=np.uint64)
    mask = np.uint64(size - 1)
    for slot in range(table_id.shape[0]):
        d = table_id[slot]
        if d >= 0:
            h = table_hash[slot]
            k = np.int64(h & mask)
            while new_id[k] >= 0:
                k = (k + 1) & (size - 1)
            new_id[k] = d
            new_hash[k] = h
    return new_id, new_hash


@njit(cache=True, nogil=True, inline="always")
def _word_id(data, s, e, table_id, table_hash, word_start, word_end, n_distinct):
    """(id of the byte string data[s:e], new number of distinct words); -1 when the table must grow first."""
    h = _FNV_OFFSET
    for k in range(s, e):
        h = (h ^ np.uint64(data[k])) * _FNV_PRIME
    mask = table_id.shape[0] - 1
    slot = np.int64(h & np.uint64(mask))
    n = e - s
    while True:
        d = table_id[slot]
        if d < 0:
            if 2 * (n_distinct + 1) > table_id.shape[0]:
                return -1, n_distinct
            table_id[slot] = n_distinct
            table_hash[slot] = h
            word_start[n_distinct] = s
            word_end[n_distinct] = e
            return n_distinct, n_distinct + 1
        if table_hash[slot] == h and word_end[d] - word_start[d] == n:
            a = word_start[d]
            same = True
            for k in range(n):
                if data[a + k] != data[s + k]:
                    same = False
                    break
            if same:
                return d, n_distinct
        slot = (slot + 1) & mask


@njit(cache=True, nogil=True)
def scan_records(data, end, at_eof, first_line_extra, mode, num_classes, max_line, max_tree,
                 node_word, node_left, node_right, node_label, leaf_token, tree_nodes, tree_leaves, tree_line,
                 word_start, word_end, stack, kids):
    """Scan ``data[:end]`` record by record (module docstring).

    ``at_eof``: ``data[:end]`` runs to the end of the file (the last line may lack its
    newline). ``first_line_extra``: bytes before ``data`` that belong to its first line
    (a byte-order mark). ``mode``: 0 right, 1 left, 2 strict. ``num_classes``: 0 for no
    limit. ``max_line``, ``max_tree``: the exact reader's limits in bytes.

    Returns (status, n_trees, n_nodes, n_leaves, n_distinct, consumed, lines): ``consumed``
    bytes and ``lines`` lines of ``data`` are done with; the outputs hold the trees read.
    """
    n_trees = 0
    n_nodes = 0
    n_leaves = 0
    n_distinct = 0
    table_id = np.full(1 << 12, -1, dtype=np.int32)  # open addressing, at most half full
    table_hash = np.empty(1 << 12, dtype=np.uint64)
    tree_nodes[0] = 0
    tree_leaves[0] = 0
    pos = 0
    line = 0  # lines finished before ``pos``
    consumed = 0
    consumed_lines = 0
    while pos < end:
        line_start = pos
        extra = first_line_extra if line == 0 else 0
        p = pos
        while p < end and _is_separator(data[p]):
            p += 1
        c = data[p] if p < end else _NEWLINE
        if c == _NEWLINE or c == _HASH:  # blank line or comment between trees
            while p < end and data[p] != _NEWLINE:
                p += 1
            if p == end and not at_eof:
                break
            if p - line_start + extra > max_line:
                return STOPPED, n_trees, n_nodes, n_leaves, n_distinct, line_start, line
            pos = p + 1
            line += 1
            consumed = min(pos, end)
            consumed_lines = line
            continue
        if c != _OPEN:
            return STOPPED, n_trees, n_nodes, n_leaves, n_distinct, line_start, line
        # --- one record: a tree from this '(' to the end of the line where it closes --------------
        first_node = n_nodes
        first_leaf = n_leaves
        record_line = line
        depth = 0
        ktop = 0
        root_done = False
        need_more = False
        failed = False
        this_line_start = line_start
        while True:
            if p >= end:
                if at_eof and p - this_line_start + (first_line_extra if line == 0 else 0) > max_line:
                    failed = True
                    break
                need_more = not at_eof
                failed = at_eof and not root_done
                break
            c = data[p]
            if c == _NEWLINE:
                if p - this_line_start + (first_line_extra if line == 0 else 0) > max_line:
                    failed = True
                    break
                line += 1
                p += 1
                this_line_start = p
                if root_done:
                    break
                if p - line_start > max_tree:  # the exact reader's limit on an open tree
                    failed = True
                    break
                if p < end and data[p] == _OPEN:  # a '(' in the first column starts a new tree
                    failed = True
                    break
                continue
            if _is_separator(c):
                p += 1
                continue
            if root_done:  # text after the tree on its line
                failed = True
                break
            if c == _OPEN:
                if depth > 0:
                    parent = depth - 1
                    if stack[parent, 2] >= 0:
                        failed = True  # '(' after a leaf's word
                        break
                    kb = stack[parent, 1]
                    if ktop - kb == 2 and mode != 0:
                        if mode == 2:
                            failed = True
                            break
                        node_word[n_nodes] = -1
                        node_left[n_nodes] = kids[kb]
                        node_right[n_nodes] = kids[kb + 1]
                        node_label[n_nodes] = -1
                        kids[kb] = n_nodes - first_node
                        n_nodes += 1
                        ktop = kb + 1
                p += 1
                # the label token: next token of the record, possibly on a later line
                while True:
                    while p < end and _is_separator(data[p]):
                        p += 1
                    if p < end and data[p] == _NEWLINE:
                        if p - this_line_start + (first_line_extra if line == 0 else 0) > max_line:
                            failed = True
                            break
                        line += 1
                        p += 1
                        this_line_start = p
                        if p - line_start > max_tree or (p < end and data[p] == _OPEN):
                            failed = True
                            break
                        continue
                    break
                if failed:
                    break
                if p >= end:
                    need_more = not at_eof
                    failed = at_eof
                    break
                s = p
                while p < end and not _ends_token(data[p]):
                    p += 1
                if p == end and not at_eof:
                    need_more = True
                    break
                n = p - s
                if n == 0:
                    failed = True  # '(' or ')' where the label should be
                    break
                if n == 1 and data[s] == _UNDERSCORE:
                    value = -1
                else:
                    if n > MAX_LABEL_DIGITS:
                        failed = True
                        break
                    value = 0
                    for k in range(s, p):
                        d = data[k]
                        if d < _ZERO or d > _NINE:
                            failed = True
                            break
                        value = value * 10 + (d - _ZERO)
                    if failed:
                        break
                    if num_classes > 0 and value >= num_classes:
                        failed = True
                        break
                stack[depth, 0] = value
                stack[depth, 1] = ktop
                stack[depth, 2] = -1
                depth += 1
                continue
            if c == _CLOSE:
                if depth == 0:
                    failed = True
                    break
                p += 1
                depth -= 1
                value = stack[depth, 0]
                kb = stack[depth, 1]
                word = stack[depth, 2]
                nk = ktop - kb
                if word >= 0:  # a leaf
                    node = n_nodes - first_node
                    node_word[n_nodes] = n_leaves - first_leaf
                    node_left[n_nodes] = -1
                    node_right[n_nodes] = -1
                    node_label[n_nodes] = value
                    leaf_token[n_leaves] = word
                    n_leaves += 1
                    n_nodes += 1
                elif nk == 2:
                    node = n_nodes - first_node
                    node_word[n_nodes] = -1
                    node_left[n_nodes] = kids[kb]
                    node_right[n_nodes] = kids[kb + 1]
                    node_label[n_nodes] = value
                    n_nodes += 1
                elif nk == 1:  # unary: the child stands for the chain; the outermost label wins
                    if mode == 2:
                        failed = True
                        break
                    node = kids[kb]
                    if value != -1:
                        node_label[first_node + node] = value
                elif nk == 0:
                    failed = True  # empty node
                    break
                else:  # right factoring: (l a b c d) -> (l a (_ b (_ c d)))
                    node = kids[ktop - 1]
                    for j in range(ktop - 2, kb, -1):
                        node_word[n_nodes] = -1
                        node_left[n_nodes] = kids[j]
                        node_right[n_nodes] = node
                        node_label[n_nodes] = -1
                        node = n_nodes - first_node
                        n_nodes += 1
                    node_word[n_nodes] = -1
                    node_left[n_nodes] = kids[kb]
                    node_right[n_nodes] = node
                    node_label[n_nodes] = value
                    node = n_nodes - first_node
                    n_nodes += 1
                ktop = kb
                if depth > 0:
                    kids[ktop] = node
                    ktop += 1
                else:
                    root_done = True
                continue
            # a word
            if depth == 0:
                failed = True
                break
            s = p
            while p < end and not _ends_token(data[p]):
                if data[p] == 0:
                    failed = True
                    break
                p += 1
            if failed:
                break
            if p == end and not at_eof:
                need_more = True
                break
            parent = depth - 1
            if stack[parent, 2] >= 0 or ktop > stack[parent, 1]:
                failed = True  # two words in a leaf, or a word beside child nodes
                break
            word, n_distinct = _word_id(data, s, p, table_id, table_hash, word_start, word_end, n_distinct)
            if word < 0:
                table_id, table_hash = _grown_table(table_id, table_hash, n_distinct)
                word, n_distinct = _word_id(data, s, p, table_id, table_hash, word_start, word_end, n_distinct)
            stack[parent, 2] = word
        if failed or need_more:
            n_nodes = first_node
            n_leaves = first_leaf
            status = STOPPED if failed else FINISHED
            return status, n_trees, n_nodes, n_leaves, n_distinct, line_start, record_line
        tree_line[n_trees] = record_line + 1
        n_trees += 1
        tree_nodes[n_trees] = n_nodes
        tree_leaves[n_trees] = n_leaves
        pos = p
        consumed = min(pos, end)
        consumed_lines = line
        if p >= end and at_eof and data[end - 1] != _NEWLINE:
            consumed_lines = line + 1  # the last line has no newline
    return FINISHED, n_trees, n_nodes, n_leaves, n_distinct, consumed, consumed_lines
