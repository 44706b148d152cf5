"""Read a bracketed treebank: phrase-labelled trees, one after another, into flat :class:`Tree` objects.

The format
----------
One tree per record, in Penn-Treebank-style brackets::

    (3 (2 The) (4 (3 roses) (2 bloomed)))

* ``(label left right)`` is an internal node, ``(label word)`` a leaf.
* A label is a class number ``0..C-1`` or ``_``, the placeholder for "unlabelled"
  (stored as ``UNLABELLED = -1``; such a node contributes no loss). Labels are
  ASCII digits only: ``-1`` is an error, and so is a label ``>= num_classes``
  when ``num_classes`` is given.
* Records: a tree usually fills one line, but it may be spread over several, as
  parsers' pretty printers write long trees. A tree starts on a line of its own
  and ends at the end of the line where its brackets balance. While a tree is
  open, every further line belongs to it, except that a line starting with ``(``
  in its first column always starts a new tree: the lines after the first of a
  multi-line tree must be indented (pretty printers indent them), so a tree
  missing its ``)`` is reported where it ends instead of swallowing the trees
  after it. After a tree's last ``)`` the rest of its line must be blank: text
  or a second tree there is an error.
* Between trees, blank lines and lines whose first non-blank character is ``#``
  are skipped. Inside an open tree a ``#`` is an ordinary word character.
* The line and token rule, shared by every text input (treebanks and ``rntn predict``'s
  input, through :class:`TextLines`): a line ends at LF (``\\n``) only, and CRs just
  before the LF belong to the line end, so CRLF files read like LF files. Tokens are
  separated by the ASCII separators space, tab, CR, FF and VT (``SEPARATORS``), and by
  line breaks inside a tree; so a lone CR is a space, not a line end. Every other
  character belongs to a word: a non-breaking space, NEL (U+0085) and the Unicode line
  and paragraph separators (U+2028, U+2029) are neither line ends nor separators.
  Missing spaces next to brackets (``(3(2 a)(1 b))``), a UTF-8 byte-order mark at the
  start and a missing final newline are accepted quietly.
* Words cannot hold ``(`` or ``)``: write ``-LRB-`` and ``-RRB-`` (likewise
  ``-LCB- -RCB- -LSB- -RSB-`` for ``{ } [ ]``); see :mod:`bracket_tokens`.
  A word glued to a ``(`` (``a(b``) is reported as a literal bracket in a word.
* A node holds either exactly one word or one or more child nodes. A node
  with two or more bare words, ``(3 a b)``, is the error "leaf with two tokens";
  a word beside child nodes, ``(3 a (2 b))``, is an error too.

Turning any tree into a binary one
----------------------------------
``binarise="right"`` (the default): a node with k > 2 children is right-factored,
``(l a b c d) -> (l a (_ b (_ c d)))``; ``binarise="left"`` left-factors it,
``(l (_ (_ a b) c) d)``. The new intermediate nodes are unlabelled. In both
modes unary chains collapse onto the lowest node: the label of the OUTERMOST
labelled node of the chain survives, and the chain is unlabelled only if all
its nodes are. This holds over leaves too: ``(3 (2 word))`` is the leaf
``word`` labelled 3, ``(_ (1 (2 word)))`` the leaf labelled 1.
``binarise="strict"`` refuses any node with more than two children and any
node with a single child node (an error naming line and column) instead.

Nodes come out in post-order whatever the mode (left factoring builds each new
node as soon as its two children are complete), so trees read from a binary
input and from its n-ary equivalent are :meth:`Tree.same_as` each other.

Two readers, one result
-----------------------
:func:`iter_trees` and :func:`read_trees` read a file in blocks with the bulk
scanner of :mod:`treebank_bulk` (tens of MB/s). Wherever that scanner meets
anything it does not accept, bad input included, the record is read again by
the exact reader of this module, which gives every message its location; the
trees are the same either way (tested). :func:`iter_trees_exact` is the exact
reader alone.

Errors
------
Every problem raises :class:`TreebankError` with one line
``FILE:LINE:COL: what was expected``; columns are 1-based and count characters,
and point at the offending character (or just past the end of the line when
something is missing there), on the line that holds it. The reader never raises
another exception type for bad file content and never recurses, so 10,000-deep
nesting is fine. Files are read as bytes and decoded line by line, so an invalid
UTF-8 byte is located exactly; a NUL byte, or a compression or HDF5 signature at
the start, is reported as a binary or compressed file. A file with no tree at
all is an error. Lines longer than :data:`MAX_LINE_BYTES` and trees longer than
:data:`MAX_TREE_BYTES` are refused (no parse tree is that long; such a "line" is
almost always a binary file, such a tree a missing ``)``).
"""

from __future__ import annotations

import bisect
import os
import re
from typing import BinaryIO, Callable, Iterator

import numpy as np

from rntn_engine.data.bracket_tokens import SEPARATORS, unescape_token
from rntn_engine.data.errors import TreebankError
from rntn_engine.data.tree import UNLABELLED, Tree, tree_from_arrays

BINARISE_MODES = ("right", "left", "strict")
MAX_LINE_BYTES = 4 * 1024 * 1024  # longest accepted line, in bytes
MAX_TREE_BYTES = 16 * 1024 * 1024  # longest accepted tree, in bytes over all its lines
MAX_LABEL = 2**31 - 1  # labels are stored as int32
PROGRESS_EVERY = 4096  # lines between two calls of the progress callback (exact reader)

_TOKEN_RE = re.compile(r"[()]|[^()" + re.escape(SEPARATORS) + r"]+")
BOM = b"\xef\xbb\xbf"
_EXPECT_TEXT = "expected UTF-8 text with bracketed trees"
# Leading bytes of files that are certainly not a treebank, and what they are.
_SIGNATURES = (
    (re.compile(rb"\x1f\x8b"), "binary or compressed file (gzip data)"),
    (re.compile(rb"BZh[1-9]1AY&SY"), "binary or compressed file (bzip2 data)"),
    (re.compile(rb"\xfd7zXZ\x00"), "binary or compressed file (xz data)"),
    (re.compile(rb"\x28\xb5\x2f\xfd"), "binary or compressed file (zstd data)"),
    (re.compile(rb"PK\x03\x04"), "binary or compressed file (zip archive)"),
    (re.compile(rb"\x89HDF\r\n\x1a\n"), "binary or compressed file (HDF5, e.g. a checkpoint)"),
    (re.compile(rb"\x93NUMPY"), "binary or compressed file (NumPy array)"),
    (re.compile(rb"\xff\xfe|\xfe\xff"), "UTF-16 text (re-encode the file as UTF-8)"),
)


def parse_tree(
    text: str,
    *,
    path: str = "<string>",
    line: int = 1,
    num_classes: int | None = None,
    binarise: str = "right",
    ignore_labels: bool = False,
) -> Tree:
    """Parse one tree, on one line or spread over several; ``path`` and ``line`` (of the
    text's first line) only label errors and ``Tree.source``.

    The tree must start on the first line; blank lines may follow it, nothing else.
    ``ignore_labels=True`` accepts any label token (a class number, ``_``, or a parser's
    syntactic category such as ``NP``) and stores every node as unlabelled: the mode for
    trees whose labels are to be predicted.
    """
    mode = check_options(num_classes, binarise)
    labels = _AnyLabel() if ignore_labels else LabelReader(num_classes)
    lines = [t.rstrip("\r") for t in text.rstrip("\r\n").split("\n")]
    body = lines[0].lstrip(SEPARATORS)
    if not body or body[0] == "#":
        found = "a comment" if body else "an empty line"
        raise TreebankError(path, f"expected a bracketed tree, found {found}", line, len(lines[0]) - len(body) + 1)
    records = RecordAssembler()
    for k, piece in enumerate(lines):
        done = records.feed(line + k, piece)
        if done is not None:
            break
    else:
        done = records.finish()
    record, cut_by = done
    tree = _parse_record(record, str(path), labels, mode, cut_by, end="the end of the text")
    for extra_line, piece in enumerate(lines[len(record):], start=line + len(record)):
        rest = piece.lstrip(SEPARATORS)
        if rest:
            raise TreebankError(
                path, f"expected one tree, found more text after it: {_quote(rest)}", extra_line,
                len(piece) - len(rest) + 1,
            )
    return tree


def parse_record(
    record: list[tuple[int, str]],
    *,
    path: str = "<string>",
    cut_by: int | None = None,
    num_classes: int | None = None,
    binarise: str = "right",
    ignore_labels: bool = False,
) -> Tree:
    """Parse one record of lines as grouped by :class:`RecordAssembler` (``cut_by`` as it returned it).

    For readers of other line sources, such as standard input; options as in :func:`parse_tree`.
    """
    mode = check_options(num_classes, binarise)
    labels = _AnyLabel() if ignore_labels else LabelReader(num_classes)
    return _parse_record(record, str(path), labels, mode, cut_by, end="the end of the input")


def iter_trees(
    path: str | os.PathLike,
    *,
    num_classes: int | None = None,
    binarise: str = "right",
    progress: Callable[[int], None] | None = None,
) -> Iterator[Tree]:
    """Yield the trees of a treebank file one by one, reading it in blocks (module docstring).

    ``progress``, if given, is called with the number of lines read since its
    previous call, at least once per block and at the end. Raises TreebankError at
    the first bad record, or at the end if the file held no tree. Memory is bounded
    by one block, not by the file.
    """
    from rntn_engine.data.treebank_bulk import iter_tree_blocks, trees_of_block  # it builds on this module

    blocks = iter_tree_blocks(path, num_classes=num_classes, binarise=binarise, progress=progress)  # checks now
    return (tree for block in blocks for tree in trees_of_block(block))


def iter_trees_exact(
    path: str | os.PathLike,
    *,
    num_classes: int | None = None,
    binarise: str = "right",
    progress: Callable[[int], None] | None = None,
) -> Iterator[Tree]:
    """:func:`iter_trees` with the exact reader alone, line by line (``progress`` every
    :data:`PROGRESS_EVERY` lines): the reference the bulk reader is tested against."""
    mode = check_options(num_classes, binarise)
    return _iter_file(os.fspath(path), LabelReader(num_classes), mode, progress)


def read_trees(
    path: str | os.PathLike,
    *,
    num_classes: int | None = None,
    binarise: str = "right",
    progress: Callable[[int], None] | None = None,
) -> list[Tree]:
    """All trees of a treebank file (see :func:`iter_trees`); TreebankError if it holds none."""
    return list(iter_trees(path, num_classes=num_classes, binarise=binarise, progress=progress))


# --- records: which lines form one tree ----------------------------------------------------------


class RecordAssembler:
    """Groups lines into tree records by the rules of the module docstring.

    :meth:`feed` takes the lines one by one, without their line break, and returns
    ``(lines, cut_by)`` when a record is complete: ``lines`` is the record as a list
    of ``(line number, text)``; ``cut_by`` is None for a record whose brackets
    balanced, or the number of the line that started a new tree while this one was
    still open (parsing such a record always raises its error). :meth:`finish`
    returns what is still open at the end of the input, or None.
    """

    __slots__ = ("lines", "depth")

    def __init__(self) -> None:
        self.lines: list[tuple[int, str]] = []
        self.depth = 0  # '(' minus ')' so far in the open record

    @property
    def open(self) -> bool:
        return bool(self.lines)

    def feed(self, line_no: int, text: str) -> tuple[list[tuple[int, str]], int | None] | None:
        if not self.lines:
            body = text.lstrip(SEPARATORS)
            if not body or body[0] == "#":
                return None  # blank line or comment between trees
        elif text[:1] == "(":
            record, self.lines, self.depth = self.lines, [], 0
            return record, line_no
        self.lines.append((line_no, text))
        self.depth += text.count("(") - text.count(")")
        if self.depth > 0:
            return None
        record, self.lines, self.depth = self.lines, [], 0
        return record, None

    def finish(self) -> tuple[list[tuple[int, str]], int | None] | None:
        if not self.lines:
            return None
        record, self.lines, self.depth = self.lines, [], 0
        return record, None


# --- checks on whole lines and files -------------------------------------------------------------


class LineSource:
    """Raw lines of a binary file, optionally after bytes already read from it (``prefix``)."""

    __slots__ = ("f", "buffer", "pos")

    def __init__(self, f: BinaryIO, prefix: bytes = b"") -> None:
        self.f = f
        self.buffer = prefix
        self.pos = 0

    def readline(self, limit: int) -> bytes:
        if self.pos >= len(self.buffer):
            return self.f.readline(limit)
        end = self.buffer.find(b"\n", self.pos, self.pos + limit)
        stop = end + 1 if end >= 0 else min(self.pos + limit, len(self.buffer))
        piece = self.buffer[self.pos : stop]
        self.pos = stop
        if end < 0 and stop == len(self.buffer) and len(piece) < limit:
            piece += self.f.readline(limit - len(piece))  # the line goes on in the file
        return piece

    def unread(self) -> bytes:
        """The part of ``prefix`` not read yet."""
        return self.buffer[self.pos :]


class TextLines:
    """The lines of a binary stream as text, by the line rule of the module docstring.

    :meth:`next` returns the next line without its line end, or None at the end of the stream.
    A line ends at LF only; the CRs just before it belong to the line end; a lone CR is a
    token separator inside the line, not a line end. A UTF-8 byte-order mark at the very start
    is dropped. A line longer than ``limit`` bytes (default :data:`MAX_LINE_BYTES`), a NUL byte
    and an invalid UTF-8 sequence raise :class:`TreebankError` at their line and column,
    worded with ``expect`` (what the input should be). ``line_no`` and ``offset``: the number
    of the last line read and the stream offset just past it; ``last_bytes``: its length in bytes.
    The treebank reader and ``rntn predict`` both read their input through this class.
    """

    __slots__ = ("source", "name", "line_no", "offset", "last_bytes", "limit", "expect", "limit_hint")

    def __init__(self, source: LineSource, name: str, line_no: int = 0, offset: int = 0,
                 limit: int | None = None, expect: str = _EXPECT_TEXT, limit_hint: str = "") -> None:
        self.source = source
        self.name = name
        self.line_no = line_no
        self.offset = offset
        self.last_bytes = 0
        self.limit = limit
        self.expect = expect
        self.limit_hint = limit_hint  # after the limit in the message, e.g. the option that sets it

    def next(self) -> str | None:
        limit = MAX_LINE_BYTES if self.limit is None else self.limit  # read at call time (tests patch it)
        bom = len(BOM) if self.line_no == 0 and self.offset == len(BOM) else 0  # read past already
        raw = self.source.readline(limit + 1 - bom)
        if not raw:
            return None
        self.line_no += 1
        if len(raw) + bom > limit and raw[-1:] != b"\n":
            raise TreebankError(self.name, f"line longer than {limit} bytes{self.limit_hint}: {self.expect}", self.line_no, 1)
        if self.offset == 0 and raw.startswith(BOM):
            raw = raw[len(BOM) :]
            self.offset = len(BOM)
        text = _decode_line(raw, self.name, self.line_no, self.offset, self.expect).rstrip("\r\n")
        self.offset += len(raw)
        self.last_bytes = len(raw)
        return text


class ExactRecordReader:
    """The exact reader: decodes and checks line by line, assembles records, parses each.

    Used on its own (:func:`iter_trees_exact`) and by the bulk reader for every record
    it leaves to this one; ``line_no`` and ``offset`` are the line number and file byte
    offset just before the first line of ``source``.
    """

    def __init__(self, source: LineSource, name: str, labels: "LabelReader", mode: str,
                 line_no: int = 0, offset: int = 0) -> None:
        self.lines = TextLines(source, name, line_no, offset)
        self.name = name
        self.labels = labels
        self.mode = mode
        self.records = RecordAssembler()
        self.record_bytes = 0  # bytes of the lines of the open record so far
        self.record_line = 0  # first line of the last record read
        self.unreported = 0  # lines read and not yet passed to a progress callback

    @property
    def line_no(self) -> int:
        return self.lines.line_no

    @property
    def offset(self) -> int:
        return self.lines.offset

    def next_tree(self) -> Tree | None:
        """The next tree, or None at the end of the file."""
        name, records, lines = self.name, self.records, self.lines
        while True:
            text = lines.next()
            if text is None:
                done = records.finish()
                if done is None:
                    return None
                self.record_line = done[0][0][0]
                return _parse_record(done[0], name, self.labels, self.mode, None, end="the end of the file")
            self.unreported += 1
            was_open = records.open
            done = records.feed(lines.line_no, text)
            if done is not None:
                self.record_line = done[0][0][0]
                return _parse_record(done[0], name, self.labels, self.mode, done[1], end="the end of the file")
            if not records.open:
                continue
            self.record_bytes = (self.record_bytes if was_open else 0) + lines.last_bytes
            if self.record_bytes > MAX_TREE_BYTES:
                first_line, first_text = records.lines[0]
                column = len(first_text) - len(first_text.lstrip(SEPARATORS)) + 1
                raise TreebankError(
                    name, f"tree still open after {MAX_TREE_BYTES} bytes: expected its closing ')' "
                    "(a missing ')' makes the lines after it part of this tree)", first_line, column,
                )


def _iter_file(name: str, labels: LabelReader, mode: str, progress: Callable[[int], None] | None) -> Iterator[Tree]:
    """The generator behind :func:`iter_trees_exact`."""
    n_trees = 0
    try:
        with open(name, "rb") as f:
            check_signature(name, f.peek(16)[:16])
            reader = ExactRecordReader(LineSource(f), name, labels, mode)
            while True:
                tree = reader.next_tree()
                if progress is not None and (reader.unreported >= PROGRESS_EVERY or tree is None):
                    while reader.unreported >= PROGRESS_EVERY:
                        progress(PROGRESS_EVERY)
                        reader.unreported -= PROGRESS_EVERY
                    if tree is None and reader.unreported:
                        progress(reader.unreported)
                        reader.unreported = 0
                if tree is None:
                    break
                n_trees += 1
                yield tree
    except OSError as exc:
        raise TreebankError(name, f"cannot read the file: {exc.strerror or exc}") from None
    if n_trees == 0:
        raise no_tree_error(name, reader.line_no)


def no_tree_error(name: str, n_lines: int) -> TreebankError:
    what = "empty file" if n_lines == 0 else f"no tree in {n_lines} line(s) (all blank or comments)"
    return TreebankError(name, f"{what}: expected bracketed trees", 1, 1)


def check_options(num_classes: int | None, binarise: str) -> str:
    if binarise not in BINARISE_MODES:
        raise ValueError(f"binarise must be one of {BINARISE_MODES}, not {binarise!r}")
    if num_classes is not None and (not isinstance(num_classes, int) or num_classes < 1):
        raise ValueError(f"num_classes must be a positive integer or None, not {num_classes!r}")
    return binarise


def check_signature(name: str, head: bytes) -> None:
    """TreebankError when the first bytes of a file show it is binary, compressed or UTF-16."""
    for signature, what in _SIGNATURES:
        if signature.match(head):
            raise TreebankError(name, f"{what}: {_EXPECT_TEXT}", 1, 1)


def _decode_line(raw: bytes, name: str, line_no: int, offset: int, expect: str = _EXPECT_TEXT) -> str:
    """The line as text; TreebankError at a NUL byte or an invalid UTF-8 sequence."""
    nul = raw.find(b"\x00")
    if nul >= 0:
        column = len(raw[:nul].decode("utf-8", "replace")) + 1
        message = f"binary or compressed file: NUL byte at byte {offset + nul} of the file; {expect}"
        raise TreebankError(name, message, line_no, column)
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        column = len(raw[: exc.start].decode("utf-8")) + 1
        raise TreebankError(
            name,
            f"invalid UTF-8 byte 0x{raw[exc.start]:02x} (byte {offset + exc.start} of the file): {expect}",
            line_no,
            column,
        ) from None


# --- labels --------------------------------------------------------------------------------------


class LabelReader:
    """Label token -> class number, with a cache of the tokens already seen (a few at most)."""

    __slots__ = ("known", "num_classes", "expected")

    def __init__(self, num_classes: int | None) -> None:
        self.num_classes = num_classes
        self.known: dict[str, int] = {"_": UNLABELLED}
        if num_classes is not None:
            self.known.update((str(c), c) for c in range(min(num_classes, 256)))
        last = "C-1" if num_classes is None else str(num_classes - 1)
        self.expected = f"expected a label: an integer 0..{last}, or '_' for unlabelled"

    def read(self, token: str) -> int | str:
        """The class number of a label token, or the error message (a str) when it is not one."""
        if token.isascii() and token.isdigit():
            value = int(token)
            if self.num_classes is not None and value >= self.num_classes:
                return f"label {_quote(token)} out of range (num_classes={self.num_classes}): {self.expected}"
            if value > MAX_LABEL:
                return f"label {_quote(token)} is too large: {self.expected}"
            if len(self.known) < 4096:
                self.known[token] = value
            return value
        if token[:1] == "-" and token[1:].isascii() and token[1:].isdigit():
            return f"negative label {_quote(token)}: {self.expected}"
        return (f"{self.expected}; found {_quote(token)}: a category label (as parsers write) is accepted only "
                "for prediction (`rntn predict`, predict() in Python), which ignores labels; training and scoring "
                "need class numbers")


class _AnyLabel(LabelReader):
    """Every label token reads as unlabelled (see ``ignore_labels``)."""

    def __init__(self) -> None:
        super().__init__(None)
        self.known = {}
        self.expected = "expected a label token (any label is accepted and ignored)"

    def read(self, token: str) -> int | str:
        return UNLABELLED


# --- the record parser ---------------------------------------------------------------------------


def _parse_record(lines: list[tuple[int, str]], path: str, labels: LabelReader, mode: str,
                  cut_by: int | None, end: str) -> Tree:
    """Parse one record (its lines, see :class:`RecordAssembler`) holding one tree, binarising
    and collapsing as it goes (no recursion).

    A stack holds the open nodes; a node is appended to the flat arrays when its
    ``)`` is read, so the arrays come out in post-order. ``cut_by`` and ``end`` only
    word the error for a tree still open at the end of the record.
    """
    if len(lines) == 1:
        tokens = _TOKEN_RE.findall(lines[0][1])
        record = _Record(path, lines, None, len(tokens))
    else:
        tokens, first_token = [], []
        for _, text in lines:
            first_token.append(len(tokens))
            tokens.extend(_TOKEN_RE.findall(text))
        record = _Record(path, lines, first_token, len(tokens))
    n_tokens = len(tokens)
    known_labels = labels.known
    word_of: list[int] = []  # the four columns of the Tree, in post-order
    left: list[int] = []
    right: list[int] = []
    label: list[int] = []
    words: list[str] = []
    # open nodes: [label, index of its "(" token, index of its word token or -1, ids of finished children]
    stack: list[list] = []
    root = -1
    i = 0
    while i < n_tokens:
        token = tokens[i]
        if token == "(":
            if stack:
                parent = stack[-1]
                if parent[2] >= 0:
                    raise record.node_after_word(tokens, i)
                kids = parent[3]
                if len(kids) == 2 and mode != "right":
                    if mode == "strict":
                        raise record.error(
                            i,
                            "node with more than two children in strict mode: expected ')' "
                            "(binarise 'right' or 'left' accepts n-ary nodes)",
                        )
                    # left factoring: the first two children become one unlabelled node right away
                    word_of.append(-1)
                    left.append(kids[0])
                    right.append(kids[1])
                    label.append(UNLABELLED)
                    kids[0] = len(label) - 1
                    kids.pop()
            elif root >= 0:
                raise record.error(
                    i, "a second tree starts on the same line: after a tree's last ')' the rest of its line "
                    "must be blank; start each tree on a line of its own",
                )
            if i + 1 == n_tokens:
                raise record.error(i + 1, f"{labels.expected}; found {_end_of_record(cut_by, end)}")
            label_token = tokens[i + 1]
            value = known_labels.get(label_token)
            if value is None:
                if label_token == "(" or label_token == ")":
                    what = "missing label" if label_token == "(" else "empty node '()'"
                    raise record.error(i + 1, f"{what}: {labels.expected}; found {label_token!r}")
                value = labels.read(label_token)
                if isinstance(value, str):
                    hint = " (a '(' inside a word is written -LRB-)" if stack else ""
                    raise record.error(i + 1, value + hint)
            stack.append([value, i, -1, []])
            i += 2
        elif token == ")":
            if not stack:
                if root >= 0:
                    message = "extra ')' after the end of the tree (a ')' inside a word is written -RRB-)"
                else:
                    message = "expected '(' to start a tree, found ')'"
                raise record.error(i, message)
            value, opened, word_token, kids = stack.pop()
            n_kids = len(kids)
            if word_token >= 0:  # leaf
                node = len(label)
                word_of.append(len(words))
                words.append(unescape_token(tokens[word_token]))
                left.append(-1)
                right.append(-1)
                label.append(value)
            elif n_kids == 2:
                node = len(label)
                word_of.append(-1)
                left.append(kids[0])
                right.append(kids[1])
                label.append(value)
            elif n_kids == 1:  # unary: the child stands for the chain; the outermost label wins
                if mode == "strict":
                    raise record.error(
                        opened,
                        "node with a single child in strict mode: expected two children or one word "
                        "(binarise 'right' or 'left' collapses unary chains)",
                    )
                node = kids[0]
                if value != UNLABELLED:
                    label[node] = value
            elif n_kids == 0:
                raise record.error(
                    i, "empty node: expected a word or child nodes after the label, found ')'"
                )
            else:  # right factoring: (l a b c d) -> (l a (_ b (_ c d)))
                node = kids[-1]
                for kid in kids[-2:0:-1]:
                    word_of.append(-1)
                    left.append(kid)
                    right.append(node)
                    label.append(UNLABELLED)
                    node = len(label) - 1
                word_of.append(-1)
                left.append(kids[0])
                right.append(node)
                label.append(value)
                node = len(label) - 1
            if stack:
                stack[-1][3].append(node)
            else:
                root = node
            i += 1
        else:  # a word
            if not stack:
                if root >= 0:
                    message = (
                        f"unexpected text after the end of the tree: {_quote(token)} "
                        "(after a tree's last ')' the rest of its line must be blank; a comment needs a line of its own "
                        "starting with '#')"
                    )
                else:
                    message = f"expected '(' to start a tree, found {_quote(token)}"
                raise record.error(i, message)
            parent = stack[-1]
            if parent[2] >= 0:
                raise record.error(
                    i,
                    f"leaf with two tokens {_quote(tokens[parent[2]])} and {_quote(token)}: "
                    "a leaf is (label word) with exactly one word; give each word a node of its own",
                )
            if parent[3]:
                raise record.word_after_node(tokens, i)
            parent[2] = i
            i += 1
    if stack:
        raise record.unclosed(n_tokens, stack[-1][1], len(stack), cut_by, end)
    if root < 0:
        raise record.error(0, "expected a bracketed tree, found an empty line")
    columns = np.array((word_of, left, right, label), dtype=np.int32)
    return tree_from_arrays(words, columns[0], columns[1], columns[2], columns[3], source=f"{path}:{lines[0][0]}")


# --- error messages (only built when a record is bad) --------------------------------------------


def _end_of_record(cut_by: int | None, end: str) -> str:
    return end if cut_by is None else f"a new tree starting in the first column of line {cut_by}"


class _Record:
    """The lines of one record, to place a token (by its index in the record) on its line and column."""

    __slots__ = ("path", "lines", "first_token", "n_tokens")

    def __init__(self, path: str, lines: list[tuple[int, str]], first_token: list[int] | None, n_tokens: int) -> None:
        self.path = path
        self.lines = lines
        self.first_token = first_token  # index of each line's first token; None for a one-line record
        self.n_tokens = n_tokens

    def locate(self, token_index: int) -> tuple[int, int, str, int]:
        """(line number, 1-based column, line text, index of the token in its line) of a token; for
        the index after the last token, one past the end of the last line that holds a token."""
        if self.first_token is None:
            k = 0
        else:
            k = bisect.bisect_right(self.first_token, token_index) - 1
            while k > 0 and self.first_token[k] >= self.n_tokens:  # past the end: back to the last token
                k -= 1
        local = token_index - (0 if self.first_token is None else self.first_token[k])
        line_no, text = self.lines[k]
        spans = _token_spans(text)
        if local < len(spans):
            return line_no, spans[local][0] + 1, text, local
        return line_no, len(text) + 1, text, len(spans)

    def error(self, token_index: int, message: str) -> TreebankError:
        line_no, column, _, _ = self.locate(token_index)
        return TreebankError(self.path, message, line_no, column)

    def glued(self, token_index: int) -> bool:
        """Whether a token touches the one before it on its line, with no space in between."""
        _, _, text, local = self.locate(token_index)
        spans = _token_spans(text)
        return 0 < local < len(spans) and spans[local - 1][1] == spans[local][0]

    def unclosed(self, n_tokens: int, opened: int, still_open: int, cut_by: int | None, end: str) -> TreebankError:
        line_no, column, _, _ = self.locate(n_tokens)
        open_line, open_column, _, _ = self.locate(opened)
        where = f"column {open_column}" if open_line == line_no else f"line {open_line}, column {open_column}"
        message = f"expected ')' to close the node opened at {where}, found {_end_of_record(cut_by, end)} " \
                  f"({still_open} node(s) still open)"
        if cut_by is not None:
            message += "; the lines of a tree after its first must be indented"
        return TreebankError(self.path, message, line_no, column)

    def node_after_word(self, tokens: list[str], i: int) -> TreebankError:
        """A '(' after a leaf's word: a literal bracket when glued to the word, else a word beside a node."""
        word = tokens[i - 1]
        if self.glued(i):
            message = f"literal '(' inside the word {_quote(word + '(')}: write '(' as -LRB- and ')' as -RRB-"
        else:
            message = f"expected ')' after the word {_quote(word)}, found '(': a node holds either one word or child nodes"
        return self.error(i, message)

    def word_after_node(self, tokens: list[str], i: int) -> TreebankError:
        message = (
            f"expected '(' or ')' after a child node, found the word {_quote(tokens[i])}: "
            "a node holds either one word or child nodes"
        )
        if self.glued(i):
            message += " (a ')' inside a word is written -RRB-)"
        return self.error(i, message)


def _token_spans(text: str) -> list[tuple[int, int]]:
    return [m.span() for m in _TOKEN_RE.finditer(text)]


def _quote(text: str, limit: int = 40) -> str:
    """A token for an error message: shortened, with unprintable characters escaped, in quotes."""
    if len(text) > limit:
        text = text[:limit] + "..."
    if not text.isprintable():
        text = "".join(c if c.isprintable() else repr(c)[1:-1] for c in text)
    return f"'{text}'"
