"""Read a bracketed treebank: one phrase-labelled tree per line, into flat :class:`Tree` objects.

The format
----------
One tree per line, in Penn-Treebank-style brackets::

    (3 (2 The) (4 (3 roses) (2 bloomed)))

* ``(label left right)`` is an internal node, ``(label word)`` a leaf.
* A label is a class number ``0..C-1`` or ``_``, the placeholder for "unlabelled"
  (stored as ``UNLABELLED = -1``; such a node contributes no loss). Labels are
  ASCII digits only: ``-1`` is an error, and so is a label ``>= num_classes``
  when ``num_classes`` is given.
* Blank lines, and lines whose first non-blank character is ``#``, are skipped.
  A comment after a tree on the same line is an error (text after the tree).
* Tokens are separated by ASCII spaces and tabs (also ``\\r \\f \\v``); every
  other character, a non-breaking space included, belongs to a word. Missing
  spaces next to brackets (``(3(2 a)(1 b))``), a UTF-8 byte-order mark, CRLF
  line ends and a missing final newline are accepted quietly.
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

Errors
------
Every problem raises :class:`TreebankError` with one line
``FILE:LINE:COL: what was expected``; columns are 1-based and count characters,
and point at the offending character (or just past the end of the line when
something is missing there). The reader never raises another exception type
for bad file content and never recurses, so 10,000-deep nesting is fine.
Files are read as bytes and decoded line by line, so an invalid UTF-8 byte is
located exactly; a NUL byte, or a compression or HDF5 signature at the start,
is reported as a binary or compressed file. A file with no tree at all is an
error. Lines longer than :data:`MAX_LINE_BYTES` are refused (no parse tree is
that long; such a "line" is almost always a binary file).
"""

from __future__ import annotations

import os
import re
from typing import Callable, Iterator

import numpy as np

from rntn_engine.data.bracket_tokens import SEPARATORS, unescape_token
from rntn_engine.data.errors import TreebankError
from rntn_engine.data.tree import UNLABELLED, Tree, tree_from_arrays

BINARISE_MODES = ("right", "left", "strict")
MAX_LINE_BYTES = 4 * 1024 * 1024  # longest accepted line, in bytes
MAX_LABEL = 2**31 - 1  # labels are stored as int32
PROGRESS_EVERY = 4096  # lines between two calls of the progress callback

_TOKEN_RE = re.compile(r"[()]|[^()" + re.escape(SEPARATORS) + r"]+")
_BOM = b"\xef\xbb\xbf"
_EXPECT_TEXT = "expected UTF-8 text with one bracketed tree per line"
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
    """Parse one tree written on one line; ``path`` and ``line`` only label errors and ``Tree.source``.

    ``ignore_labels=True`` accepts any label token (a class number, ``_``, or a parser's
    syntactic category such as ``NP``) and stores every node as unlabelled: the mode for
    trees whose labels are to be predicted.
    """
    mode = _check_options(num_classes, binarise)
    text = text.rstrip("\r\n")
    if "\n" in text:
        raise TreebankError(path, "a tree must fit on one line: found a line break", line, text.index("\n") + 1)
    body = text.lstrip(SEPARATORS)
    if not body or body[0] == "#":
        found = "a comment" if body else "an empty line"
        raise TreebankError(path, f"expected a bracketed tree, found {found}", line, len(text) - len(body) + 1)
    labels = _AnyLabel() if ignore_labels else _LabelReader(num_classes)
    return _parse_line(text, str(path), line, labels, mode)


def iter_trees(
    path: str | os.PathLike,
    *,
    num_classes: int | None = None,
    binarise: str = "right",
    progress: Callable[[int], None] | None = None,
) -> Iterator[Tree]:
    """Yield the trees of a treebank file one by one, reading it line by line.

    ``progress``, if given, is called with the number of lines read since its
    previous call (every :data:`PROGRESS_EVERY` lines and at the end). Raises
    TreebankError at the first bad line, or at the end if the file held no tree.
    """
    mode = _check_options(num_classes, binarise)  # now, not at the first next()
    return _iter_file(os.fspath(path), _LabelReader(num_classes), mode, progress)


def read_trees(
    path: str | os.PathLike,
    *,
    num_classes: int | None = None,
    binarise: str = "right",
    progress: Callable[[int], None] | None = None,
) -> list[Tree]:
    """All trees of a treebank file (see :func:`iter_trees`); TreebankError if it holds none."""
    return list(iter_trees(path, num_classes=num_classes, binarise=binarise, progress=progress))


# --- checks on whole lines and files -------------------------------------------------------------


def _iter_file(name: str, labels: _LabelReader, mode: str, progress: Callable[[int], None] | None) -> Iterator[Tree]:
    """The generator behind :func:`iter_trees`: bytes line by line, decoded, checked and parsed."""
    try:
        with open(name, "rb") as f:
            _check_signature(name, f.peek(16)[:16])
            line_no = 0
            offset = 0  # bytes of the file before this line
            n_trees = 0
            unreported = 0  # lines not yet passed to `progress`
            while True:
                raw = f.readline(MAX_LINE_BYTES + 1)
                if not raw:
                    break
                line_no += 1
                if len(raw) > MAX_LINE_BYTES and raw[-1:] != b"\n":
                    raise TreebankError(
                        name, f"line longer than {MAX_LINE_BYTES} bytes: {_EXPECT_TEXT}", line_no, 1
                    )
                if line_no == 1 and raw.startswith(_BOM):
                    raw = raw[len(_BOM) :]
                    offset = len(_BOM)
                text = _decode_line(raw, name, line_no, offset).rstrip("\r\n")
                offset += len(raw)
                body = text.lstrip(SEPARATORS)
                if body and body[0] != "#":
                    yield _parse_line(text, name, line_no, labels, mode)
                    n_trees += 1
                unreported += 1
                if progress is not None and unreported == PROGRESS_EVERY:
                    progress(unreported)
                    unreported = 0
    except OSError as exc:
        raise TreebankError(name, f"cannot read the file: {exc.strerror or exc}") from None
    if progress is not None and unreported:
        progress(unreported)
    if n_trees == 0:
        what = "empty file" if line_no == 0 else f"no tree in {line_no} line(s) (all blank or comments)"
        raise TreebankError(name, f"{what}: expected one bracketed tree per line", 1, 1)


def _check_options(num_classes: int | None, binarise: str) -> str:
    if binarise not in BINARISE_MODES:
        raise ValueError(f"binarise must be one of {BINARISE_MODES}, not {binarise!r}")
    if num_classes is not None and (not isinstance(num_classes, int) or num_classes < 1):
        raise ValueError(f"num_classes must be a positive integer or None, not {num_classes!r}")
    return binarise


def _check_signature(name: str, head: bytes) -> None:
    for signature, what in _SIGNATURES:
        if signature.match(head):
            raise TreebankError(name, f"{what}: {_EXPECT_TEXT}", 1, 1)


def _decode_line(raw: bytes, name: str, line_no: int, offset: int) -> str:
    """The line as text; TreebankError at a NUL byte or an invalid UTF-8 sequence."""
    nul = raw.find(b"\x00")
    if nul >= 0:
        column = len(raw[:nul].decode("utf-8", "replace")) + 1
        message = f"binary or compressed file: NUL byte at byte {offset + nul} of the file; {_EXPECT_TEXT}"
        raise TreebankError(name, message, line_no, column)
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        column = len(raw[: exc.start].decode("utf-8")) + 1
        raise TreebankError(
            name,
            f"invalid UTF-8 byte 0x{raw[exc.start]:02x} (byte {offset + exc.start} of the file): {_EXPECT_TEXT}",
            line_no,
            column,
        ) from None


# --- labels --------------------------------------------------------------------------------------


class _LabelReader:
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
        return f"{self.expected}; found {_quote(token)}"


class _AnyLabel(_LabelReader):
    """Every label token reads as unlabelled (see ``ignore_labels``)."""

    def __init__(self) -> None:
        super().__init__(None)
        self.known = {}
        self.expected = "expected a label token (any label is accepted and ignored)"

    def read(self, token: str) -> int | str:
        return UNLABELLED


# --- the line parser -----------------------------------------------------------------------------


def _parse_line(text: str, path: str, line_no: int, labels: _LabelReader, mode: str) -> Tree:
    """Parse one line holding one tree, binarising and collapsing as it goes (no recursion).

    A stack holds the open nodes; a node is appended to the flat arrays when its
    ``)`` is read, so the arrays come out in post-order.
    """
    tokens = _TOKEN_RE.findall(text)
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
                    raise _node_after_word(text, path, line_no, i)
                kids = parent[3]
                if len(kids) == 2 and mode != "right":
                    if mode == "strict":
                        raise _error(
                            text, path, line_no, i,
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
                raise _error(
                    text, path, line_no, i, "a second tree starts on the same line: expected one tree per line"
                )
            if i + 1 == n_tokens:
                raise _error(text, path, line_no, i + 1, f"{labels.expected}; found end of line")
            label_token = tokens[i + 1]
            value = known_labels.get(label_token)
            if value is None:
                if label_token == "(" or label_token == ")":
                    what = "missing label" if label_token == "(" else "empty node '()'"
                    raise _error(text, path, line_no, i + 1, f"{what}: {labels.expected}; found {label_token!r}")
                value = labels.read(label_token)
                if isinstance(value, str):
                    hint = " (a '(' inside a word is written -LRB-)" if stack else ""
                    raise _error(text, path, line_no, i + 1, value + hint)
            stack.append([value, i, -1, []])
            i += 2
        elif token == ")":
            if not stack:
                if root >= 0:
                    message = "extra ')' after the end of the tree (a ')' inside a word is written -RRB-)"
                else:
                    message = "expected '(' to start a tree, found ')'"
                raise _error(text, path, line_no, i, message)
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
                    raise _error(
                        text, path, line_no, opened,
                        "node with a single child in strict mode: expected two children or one word "
                        "(binarise 'right' or 'left' collapses unary chains)",
                    )
                node = kids[0]
                if value != UNLABELLED:
                    label[node] = value
            elif n_kids == 0:
                raise _error(
                    text, path, line_no, i, "empty node: expected a word or child nodes after the label, found ')'"
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
                        "(one tree per line; a comment needs a line of its own starting with '#')"
                    )
                else:
                    message = f"expected '(' to start a tree, found {_quote(token)}"
                raise _error(text, path, line_no, i, message)
            parent = stack[-1]
            if parent[2] >= 0:
                raise _error(
                    text, path, line_no, i,
                    f"leaf with two tokens {_quote(tokens[parent[2]])} and {_quote(token)}: "
                    "a leaf is (label word) with exactly one word; give each word a node of its own",
                )
            if parent[3]:
                raise _word_after_node(text, path, line_no, i)
            parent[2] = i
            i += 1
    if stack:
        opened = _column(text, stack[-1][1])
        raise _error(
            text, path, line_no, n_tokens,
            f"expected ')' to close the node opened at column {opened}, found end of line "
            f"({len(stack)} node(s) still open)",
        )
    if root < 0:
        raise _error(text, path, line_no, 0, "expected a bracketed tree, found an empty line")
    columns = np.array((word_of, left, right, label), dtype=np.int32)
    return tree_from_arrays(words, columns[0], columns[1], columns[2], columns[3], source=f"{path}:{line_no}")


# --- error messages (only built when a line is bad) ----------------------------------------------


def _token_spans(text: str) -> list[tuple[int, int]]:
    return [m.span() for m in _TOKEN_RE.finditer(text)]


def _column(text: str, token_index: int) -> int:
    """1-based column of a token; one past the end of the line for the index after the last token."""
    spans = _token_spans(text)
    return spans[token_index][0] + 1 if token_index < len(spans) else len(text) + 1


def _glued(text: str, token_index: int) -> bool:
    """Whether a token touches the one before it, with no space in between."""
    spans = _token_spans(text)
    return token_index > 0 and spans[token_index - 1][1] == spans[token_index][0]


def _error(text: str, path: str, line_no: int, token_index: int, message: str) -> TreebankError:
    return TreebankError(path, message, line_no, _column(text, token_index))


def _node_after_word(text: str, path: str, line_no: int, i: int) -> TreebankError:
    """A '(' after a leaf's word: a literal bracket when glued to the word, else a word beside a node."""
    word = _TOKEN_RE.findall(text)[i - 1]
    if _glued(text, i):
        message = f"literal '(' inside the word {_quote(word + '(')}: write '(' as -LRB- and ')' as -RRB-"
    else:
        message = f"expected ')' after the word {_quote(word)}, found '(': a node holds either one word or child nodes"
    return _error(text, path, line_no, i, message)


def _word_after_node(text: str, path: str, line_no: int, i: int) -> TreebankError:
    word = _TOKEN_RE.findall(text)[i]
    message = (
        f"expected '(' or ')' after a child node, found the word {_quote(word)}: "
        "a node holds either one word or child nodes"
    )
    if _glued(text, i):
        message += " (a ')' inside a word is written -RRB-)"
    return _error(text, path, line_no, i, message)


def _quote(text: str, limit: int = 40) -> str:
    """A token for an error message: shortened, with unprintable characters escaped, in quotes."""
    if len(text) > limit:
        text = text[:limit] + "..."
    if not text.isprintable():
        text = "".join(c if c.isprintable() else repr(c)[1:-1] for c in text)
    return f"'{text}'"
