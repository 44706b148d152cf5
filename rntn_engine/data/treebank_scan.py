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

Words are not decoded here: each distinct byte string of the block gets an id in a
word table of the block (see "The word table" below: open addressing, hashes, the bytes compared
on every hit, so two words never share an id), which starts small and doubles, so it
stays in cache. The caller merges each block's table into one for the whole file
(:func:`merge_words`, in file order, so ids are those of first appearance) and decodes
each word of the file once.

Outputs (preallocated by the caller, filled from index 0):

    node_word (2P,) int32   leaf position in its tree (Tree.word), -1 at internal nodes
    node_token (2P,) int32  block word id at leaves, -1 at internal nodes
    node_left (2P,) int32   left child, index local to its tree, -1 at leaves
    node_right (2P,) int32  right child, local index, -1 at leaves
    node_label (2P,) int32  class, -1 unlabelled
    leaf_token (P,) int32   block word id of each leaf, leaves in node order
    tree_nodes (P+1,) int64 first node of each tree (and the end)
    tree_leaves (P+1,) int64 first leaf of each tree (and the end)
    tree_line (P,) int64    line of each tree's first line, counted from the block's start (1-based)
    stack (P+1, 3) int32    open nodes: label, first kid slot, word id or -1
    kids (P+1,) int32       finished children of the open nodes, innermost last

and, returned, the block's words: word i is ``arena[arena_start[i]:arena_start[i + 1]]``.
"""

from __future__ import annotations

import numpy as np

from rntn_engine.jit_setup import byte_scanner

FINISHED = 0  # every complete record before ``consumed`` is read; the rest needs more bytes (or is empty)
STOPPED = 1  # the record starting at ``consumed`` is left to the exact reader

MODE_CODES = {"right": 0, "left": 1, "strict": 2}
MAX_LABEL_DIGITS = 9  # longer labels (leading zeros, out of range) are left to the exact reader

_OPEN, _CLOSE, _NEWLINE, _HASH, _UNDERSCORE, _ZERO, _NINE = 40, 41, 10, 35, 95, 48, 57
_FNV_OFFSET = np.uint64(14695981039346656037)
_FNV_PRIME = np.uint64(1099511628211)


@byte_scanner(inline=True)
def _is_separator(c):
    return c == 32 or c == 9 or c == 13 or c == 12 or c == 11


@byte_scanner(inline=True)
def _ends_token(c):
    return c == 32 or c == 9 or c == 13 or c == 12 or c == 11 or c == 10 or c == 40 or c == 41


@byte_scanner
def count_opens_and_lines(data, end):
    """(number of '(' bytes, number of line breaks) in ``data[:end]``."""
    opens = 0
    breaks = 0
    for k in range(end):
        c = data[k]
        opens += c == _OPEN
        breaks += c == _NEWLINE
    return opens, breaks


@byte_scanner
def new_word_table(slots, arena_bytes, words):
    """An empty word table: (slots, arena, arena_start), see "The word table" below."""
    arena_start = np.empty(words + 1, dtype=np.int64)
    arena_start[0] = 0
    return np.zeros((slots, 3), dtype=np.uint64), np.empty(arena_bytes, dtype=np.uint8), arena_start


@byte_scanner
def _grown(table, arena, arena_start, n_words, extra_bytes):
    """The word table with room for one more word of ``extra_bytes`` bytes (arrays doubled as needed)."""
    if 10 * (n_words + 1) > 6 * table.shape[0]:  # at most 60% of the slots in use
        size = 2 * table.shape[0]
        mask = size - 1
        new = np.zeros((size, 3), dtype=np.uint64)
        for slot in range(table.shape[0]):
            if table[slot, 1] != 0:
                k = np.int64(table[slot, 0] & np.uint64(mask))
                while new[k, 1] != 0:
                    k = (k + 1) & mask
                new[k, 0] = table[slot, 0]
                new[k, 1] = table[slot, 1]
                new[k, 2] = table[slot, 2]
        table = new
    if arena_start[n_words] + extra_bytes > arena.shape[0]:
        bigger = np.empty(2 * arena.shape[0] + extra_bytes, dtype=np.uint8)
        bigger[: arena.shape[0]] = arena
        arena = bigger
    if n_words + 2 > arena_start.shape[0]:
        longer = np.empty(2 * arena_start.shape[0] + 2, dtype=np.int64)
        longer[: arena_start.shape[0]] = arena_start
        arena_start = longer
    return table, arena, arena_start


# The word table: ``table`` (slots, 3) uint64, a slot being (FNV-1a hash, id + 1 | length << 32, the
# first 8 bytes), 0 in the middle column for an empty slot; open addressing, linear probing, at most 60%
# full. Word i's bytes are ``arena[arena_start[i]:arena_start[i + 1]]``. A word of up to 8 bytes is
# compared within its slot (one cache line), a longer one against the arena too, so two different words
# never share an id. The lookup is written out where it is used (scan_records, merge_words) rather than
# called: a call between compiled functions with array arguments was measured at about 100 ns (reference
# counts), four times the lookup itself.


@byte_scanner
def merge_words(table, arena, arena_start, n_words, block_arena, block_start, used, ids):
    """Look up (or add) each used word of a block's word table in a file-wide one; ``ids[d]`` gets word d's
    id in the file table, or -1 when ``used[d]`` is false (a word only of a record left to the exact reader).

    Returns the file table (arrays possibly grown) and its new number of words.
    """
    for d in range(used.shape[0]):
        if not used[d]:
            ids[d] = -1
            continue
        s, e = block_start[d], block_start[d + 1]
        n = e - s
        while True:  # the lookup (see the word table above); grows the table and tries again when full
            h = _FNV_OFFSET
            prefix = np.uint64(0)
            for k in range(s, e):
                c = np.uint64(block_arena[k])
                h = (h ^ c) * _FNV_PRIME
                if k - s < 8:
                    prefix |= c << np.uint64(8 * (k - s))
            mask = table.shape[0] - 1
            slot = np.int64(h & np.uint64(mask))
            word = -1
            while True:
                packed = table[slot, 1]
                if packed == 0:
                    if (10 * (n_words + 1) > 6 * table.shape[0] or arena_start[n_words] + n > arena.shape[0]
                            or n_words + 2 > arena_start.shape[0]):
                        break
                    table[slot, 0] = h
                    table[slot, 1] = (np.uint64(n) << np.uint64(32)) | np.uint64(n_words + 1)
                    table[slot, 2] = prefix
                    a = arena_start[n_words]
                    for k in range(n):
                        arena[a + k] = block_arena[s + k]
                    arena_start[n_words + 1] = a + n
                    word = n_words
                    n_words += 1
                    break
                if table[slot, 0] == h and table[slot, 2] == prefix and (packed >> np.uint64(32)) == np.uint64(n):
                    word = np.int64(packed & np.uint64(0xFFFFFFFF)) - 1
                    a = arena_start[word]
                    for k in range(8, n):
                        if arena[a + k] != block_arena[s + k]:
                            word = -1
                            break
                    if word >= 0:
                        break
                slot = (slot + 1) & mask
            if word >= 0:
                break
            table, arena, arena_start = _grown(table, arena, arena_start, n_words, n)
        ids[d] = word
    return table, arena, arena_start, n_words


@byte_scanner
def scan_records(data, end, at_eof, first_line_extra, mode, num_classes, max_line, max_tree,
                 node_word, node_token, node_left, node_right, node_label, leaf_token, tree_nodes, tree_leaves,
                 tree_line, stack, kids):
    """Scan ``data[:end]`` record by record (module docstring).

    ``at_eof``: ``data[:end]`` runs to the end of the file (the last line may lack its
    newline). ``first_line_extra``: bytes before ``data`` that belong to its first line
    (a byte-order mark). ``mode``: 0 right, 1 left, 2 strict. ``num_classes``: 0 for no
    limit. ``max_line``, ``max_tree``: the exact reader's limits in bytes.

    Returns (status, n_trees, n_nodes, n_leaves, n_words, consumed, lines, arena, arena_start):
    ``consumed`` bytes and ``lines`` lines of ``data`` are done with; the outputs hold the
    trees read, ``arena``/``arena_start`` the block's words (module docstring).
    """
    n_trees = 0
    n_nodes = 0
    n_leaves = 0
    n_distinct = 0
    table, arena, arena_start = new_word_table(1 << 12, 1 << 16, 1 << 10)
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
                return STOPPED, n_trees, n_nodes, n_leaves, n_distinct, line_start, line, arena, arena_start
            pos = p + 1
            line += 1
            consumed = min(pos, end)
            consumed_lines = line
            continue
        if c != _OPEN:
            return STOPPED, n_trees, n_nodes, n_leaves, n_distinct, line_start, line, arena, arena_start
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
                        node_token[n_nodes] = -1
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
                    node_token[n_nodes] = word
                    node_left[n_nodes] = -1
                    node_right[n_nodes] = -1
                    node_label[n_nodes] = value
                    leaf_token[n_leaves] = word
                    n_leaves += 1
                    n_nodes += 1
                elif nk == 2:
                    node = n_nodes - first_node
                    node_word[n_nodes] = -1
                    node_token[n_nodes] = -1
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
                        node_token[n_nodes] = -1
                        node_left[n_nodes] = kids[j]
                        node_right[n_nodes] = node
                        node_label[n_nodes] = -1
                        node = n_nodes - first_node
                        n_nodes += 1
                    node_word[n_nodes] = -1
                    node_token[n_nodes] = -1
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
            h0 = _FNV_OFFSET
            prefix0 = np.uint64(0)
            while p < end:
                c = data[p]
                if _ends_token(c):
                    break
                if c == 0:
                    failed = True
                    break
                cc = np.uint64(c)
                h0 = (h0 ^ cc) * _FNV_PRIME
                if p - s < 8:
                    prefix0 |= cc << np.uint64(8 * (p - s))
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
            n = p - s
            h = h0
            prefix = prefix0
            while True:  # the lookup (see the word table above); grows the table and tries again when full
                mask = table.shape[0] - 1
                slot = np.int64(h & np.uint64(mask))
                word = -1
                while True:
                    packed = table[slot, 1]
                    if packed == 0:
                        if (10 * (n_distinct + 1) > 6 * table.shape[0] or arena_start[n_distinct] + n > arena.shape[0]
                                or n_distinct + 2 > arena_start.shape[0]):
                            break
                        table[slot, 0] = h
                        table[slot, 1] = (np.uint64(n) << np.uint64(32)) | np.uint64(n_distinct + 1)
                        table[slot, 2] = prefix
                        a = arena_start[n_distinct]
                        for k in range(n):
                            arena[a + k] = data[s + k]
                        arena_start[n_distinct + 1] = a + n
                        word = n_distinct
                        n_distinct += 1
                        break
                    if table[slot, 0] == h and table[slot, 2] == prefix and (packed >> np.uint64(32)) == np.uint64(n):
                        word = np.int64(packed & np.uint64(0xFFFFFFFF)) - 1
                        a = arena_start[word]
                        for k in range(8, n):
                            if arena[a + k] != data[s + k]:
                                word = -1
                                break
                        if word >= 0:
                            break
                    slot = (slot + 1) & mask
                if word >= 0:
                    break
                table, arena, arena_start = _grown(table, arena, arena_start, n_distinct, n)
            stack[parent, 2] = word
        if failed or need_more:
            n_nodes = first_node
            n_leaves = first_leaf
            status = STOPPED if failed else FINISHED
            return status, n_trees, n_nodes, n_leaves, n_distinct, line_start, record_line, arena, arena_start
        tree_line[n_trees] = record_line + 1
        n_trees += 1
        tree_nodes[n_trees] = n_nodes
        tree_leaves[n_trees] = n_leaves
        pos = p
        consumed = min(pos, end)
        consumed_lines = line
        if p >= end and at_eof and data[end - 1] != _NEWLINE:
            consumed_lines = line + 1  # the last line has no newline
    return FINISHED, n_trees, n_nodes, n_leaves, n_distinct, consumed, consumed_lines, arena, arena_start
