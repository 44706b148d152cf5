"""Streaming reader of text word vectors (GloVe, and word2vec text after its header).

Legend: d values per row.

A row is ``word v1 ... vd``: fields separated by single ASCII spaces; trailing
spaces, tabs and a CR before the line feed are ignored. The file is read in
blocks of whole lines (:data:`BLOCK_BYTES`) and each block is checked with a few
NumPy passes, never a Python loop over bytes:

1. the block must be UTF-8 (``bytes.isascii``, else one ``bytes.decode``; the
   first bad byte is located by line and column), unless ``encoding_errors="replace"``;
2. line ends, and spaces, are found with ``np.flatnonzero``; the spaces inside
   each line are counted with ``np.searchsorted``;
3. every row must hold a non-empty word and exactly d spaces (d values);
4. only then are the words cut out and looked up (as UTF-8 bytes), and the values of the rows
   to keep are parsed at once (``np.fromstring`` on the joined value texts), cast
   to float32 and checked to be finite. If that fails, the rows are parsed
   again one by one with ``float()`` to find the bad value's line and column.

So every row is checked for its word and its number of fields, but the values
of rows nobody asked for are never parsed: a non-numeric value, NaN or Inf in
such a row goes unnoticed (it is not used either).

A blank line is an error, except that blank lines (whitespace only) at the very
end of the file are accepted, also after the rows a word2vec header declares.
"""

from __future__ import annotations

import warnings

import numpy as np

from rntn_engine.data import word_vector_files as files
from rntn_engine.data.errors import VectorFileError
from rntn_engine.data.word_vector_files import FileStart, RowKeeper, VectorStream, check_dim, column_of, quote

_TRAILING = np.zeros(256, dtype=bool)  # bytes stripped from the end of a line
_TRAILING[[ord(" "), ord("\t"), ord("\r")]] = True
_STRIP = b" \t\r"


class TextRowReader:
    """Reads the rows of a text vector file into a :class:`RowKeeper`, block by block."""

    def __init__(
        self,
        stream: VectorStream,
        start: FileStart,
        keeper: RowKeeper,
        *,
        encoding_errors: str,
        expected_dim: int | None,
        stop_after: int | None,
    ) -> None:
        self.stream = stream
        self.path = stream.path
        self.keeper = keeper
        self.errors = encoding_errors
        self.expected_dim = expected_dim
        self.declared = start.declared_rows  # None for GloVe
        self.stop_after = stop_after  # read no more than this many rows (None: all)
        self.dim = start.dim
        self.line_no = start.first_row_line  # line number of the next row
        self.rows = 0  # rows read so far
        self.offset = start.rest_offset  # file offset just past the last row read
        self.pending = start.rest
        # the wanted words as UTF-8 bytes (a word with a lone surrogate can match no UTF-8 text)
        self.byte_keys = None if keeper.keys is None else {k.encode("utf-8", "surrogatepass") for k in keeper.keys}

    # --- the loop over blocks ------------------------------------------------------------------------

    def read(self) -> None:
        """Read rows until the end of the file (or ``stop_after`` rows); then check the row count."""
        if self.dim is None:
            self.dim = self._dim_from_first_row()
        while (block := self._next_block()) is not None:
            if self._read_block(block):
                break
        if self.declared is not None and self.rows < self.declared and not self._stopped():
            raise VectorFileError(
                self.path,
                f"the file ends after {self.rows} rows; the header on line 1 declares {self.declared}",
                line=self.line_no,
            )

    def _next_block(self) -> bytes | None:
        """The next run of whole lines (the file's last line may lack its line feed); None at the end."""
        while True:
            if self.stream.at_end:
                block, self.pending = self.pending, b""
                return block or None
            chunk = self.stream.read(files.BLOCK_BYTES)
            cut = chunk.rfind(b"\n") + 1
            if cut == 0:  # no line ends in this chunk
                self.pending += chunk
                if len(self.pending) <= files.MAX_LINE_BYTES:
                    continue
                cut = self.pending.rfind(b"\n") + 1
                if cut == 0:
                    raise VectorFileError(
                        self.path,
                        f"line longer than {files.MAX_LINE_BYTES:,} bytes: expected one word vector per line",
                        line=self.line_no,
                    )
                block, self.pending = self.pending[:cut], self.pending[cut:]
                return block
            block = b"".join((self.pending, memoryview(chunk)[:cut]))
            self.pending = chunk[cut:]
            return block

    def _stopped(self) -> bool:
        return self.stop_after is not None and self.rows >= self.stop_after

    def _rows_left(self) -> int | None:
        """Rows still to read before the header's count or ``stop_after`` is reached (None: no limit)."""
        limits = [limit - self.rows for limit in (self.declared, self.stop_after) if limit is not None]
        return min(limits) if limits else None

    def _dim_from_first_row(self) -> int:
        """GloVe: d is the number of values on the first line."""
        end = self.pending.find(b"\n")
        first = self.pending[: end if end >= 0 else len(self.pending)]
        content = first.rstrip(_STRIP)
        if not content or content[:1] == b" " or b" " not in content or b"  " in content:
            self._raise_bad_row(first, self.line_no, dim=None)
        dim = content.count(b" ")
        check_dim(self.path, dim, self.expected_dim, binary=False)
        return dim

    # --- one block of whole lines ------------------------------------------------------------------

    def _read_block(self, block: bytes) -> bool:
        """Check and read the rows of ``block``; True when the reading is over."""
        utf8 = block.isascii()
        if not utf8 and self._rows_left() != 0:
            try:
                block.decode("utf-8")
                utf8 = True
            except UnicodeDecodeError as exc:
                if self.errors == "strict":
                    line_start = block.rfind(b"\n", 0, exc.start) + 1
                    if line_start > 0:  # read the lines before the bad one first; it starts the next block
                        self.pending = block[line_start:] + self.pending
                        return self._read_lines(block[:line_start], utf8=True)
                    line_end = block.find(b"\n")
                    raise VectorFileError(
                        self.path,
                        f"bytes that are not UTF-8 ({quote(block[exc.start : exc.end])}); "
                        "choose the 'replace' encoding-error mode (rntn train --vectors-encoding-errors replace) to substitute U+FFFD",
                        line=self.line_no,
                        column=column_of(block[: line_end if line_end >= 0 else len(block)], exc.start),
                    ) from None
        return self._read_lines(block, utf8)

    def _read_lines(self, block: bytes, utf8: bool) -> bool:
        """Rows of ``block`` (whole lines, the last one may lack its line feed; ``utf8``: it all decodes)."""
        dim = self.dim
        a = np.frombuffer(block, dtype=np.uint8)
        ends = np.flatnonzero(a == 10)
        if block[-1:] != b"\n":
            ends = np.append(ends, len(block))
        n_lines = len(ends)
        rows_left = self._rows_left()
        n = n_lines if rows_left is None else min(n_lines, rows_left)
        ends = ends[:n]
        starts = np.empty_like(ends)
        starts[:1] = 0
        starts[1:] = ends[:-1] + 1

        # content ends: strip trailing spaces, tabs and CRs
        content_ends = ends.copy()
        todo = np.arange(n)
        while todo.size:
            todo = todo[content_ends[todo] > starts[todo]]
            todo = todo[_TRAILING[a[content_ends[todo] - 1]]]
            content_ends[todo] -= 1

        # spaces inside each line's content; the word ends at the first one
        spaces = np.flatnonzero(a == 32)
        first_space = np.searchsorted(spaces, starts)
        n_spaces = np.searchsorted(spaces, content_ends) - first_space
        word_ends = content_ends.copy()
        has_space = n_spaces > 0
        word_ends[has_space] = spaces[first_space[has_space]]
        bad = (n_spaces != dim) | (word_ends == starts)
        good = int(np.argmax(bad)) if bad.any() else n

        self._keep_rows(block, utf8, starts[:good].tolist(), word_ends[:good].tolist(), content_ends[:good].tolist())
        self.rows += good
        self.line_no += good
        self.offset += min(int(ends[good - 1]) + 1, len(block)) if good else 0

        if good < n:  # a malformed row, or blank lines (accepted only at the end of the file)
            s, e = int(starts[good]), int(ends[good])
            if content_ends[good] == starts[good] and self._text_after(block, s) is None:
                return True
            self._raise_bad_row(block[s:e], self.line_no, dim)
        if n < n_lines:  # stop_after reached, or lines beyond the header's count
            if self._stopped():
                return True
            blank_lines = self._text_after(block, int(ends[n - 1]) + 1 if n else 0)
            if blank_lines is None:
                return True
            raise VectorFileError(
                self.path,
                f"more rows than the {self.declared} the header on line 1 declares",
                line=self.line_no + blank_lines,
            )
        return False

    def _keep_rows(
        self, block: bytes, utf8: bool, starts: list[int], word_ends: list[int], content_ends: list[int]
    ) -> None:
        """Look the words of well-formed rows up; parse and keep the values of the wanted ones.

        When the block is valid UTF-8 the words are looked up as bytes (UTF-8 is one-to-one,
        so that is the same as comparing text) and only the candidates are decoded.
        """
        keeper = self.keeper
        words = [block[s:w] for s, w in zip(starts, word_ends)]
        if not utf8:
            words = [w.decode("utf-8", self.errors) for w in words]
            keys = keeper.keys
        else:
            keys = self.byte_keys
        candidates = range(len(words)) if keys is None else [i for i, w in enumerate(words) if w in keys]
        if utf8:
            picked = [i for i in candidates if keeper.wants(words[i].decode("utf-8"), self.line_no + i)]
        else:
            picked = [i for i in candidates if keeper.wants(words[i], self.line_no + i)]
        if not picked:
            return
        allowed = keeper.rows_allowed(self.dim)
        if len(keeper.words) > allowed:
            over = picked[allowed - (len(keeper.words) - len(picked))]
            raise keeper.too_many_rows(self.dim, line=self.line_no + over)
        joined = b" ".join([block[word_ends[i] + 1 : content_ends[i]] for i in picked])
        values = _parse_numbers(joined, len(picked) * self.dim)
        if values is None:  # something did not parse or is not finite: find it row by row
            rows = [
                self._parse_row(block[starts[i] : content_ends[i]], word_ends[i] - starts[i], self.line_no + i)
                for i in picked
            ]
            values = np.concatenate(rows)
        keeper.add(values.reshape(len(picked), self.dim))

    # --- slow paths: locating problems -----------------------------------------------------------

    def _parse_row(self, content: bytes, word_end: int, line_no: int) -> np.ndarray:
        """The d values of one row (float32), parsed as ``float()`` does; VectorFileError at a bad one."""
        values = np.empty(self.dim, dtype=np.float64)
        pos = word_end + 1
        for j, token in enumerate(content[pos:].split(b" ")):
            try:
                values[j] = float(token)
            except ValueError:
                found = f"found {quote(token)}" if token else "found two spaces in a row"
                raise VectorFileError(
                    self.path, f"expected a number, {found}", line=line_no, column=column_of(content, pos)
                ) from None
            if not np.isfinite(_to_float32(values[j : j + 1]))[0]:
                what = "is not a finite number"
                if np.isfinite(values[j]):
                    what = "is beyond the float32 range (about 3.4e38)"
                raise VectorFileError(
                    self.path, f"value {quote(token)} {what}", line=line_no, column=column_of(content, pos)
                )
            pos += len(token) + 1
        return _to_float32(values)

    def _raise_bad_row(self, line: bytes, line_no: int, dim: int | None) -> None:
        """Raise the error that describes a row without a word or with the wrong number of fields."""
        content = line.rstrip(_STRIP)
        expected = "a word followed by its values" if dim is None else f"a word followed by {dim} values"
        if not content:
            raise VectorFileError(self.path, f"blank line: expected {expected}", line=line_no, column=1)
        if content[:1] == b" ":
            raise VectorFileError(
                self.path, f"empty word (the line starts with a space): expected {expected}", line=line_no, column=1
            )
        fields = content.split(b" ")
        found = len(fields) - 1
        if b"" in fields:
            column = column_of(content, content.index(b"  ") + 1)
            message = f"two spaces in a row: expected {expected}, separated by single spaces"
        elif dim is None or found < dim:
            column = column_of(content, len(content))
            message = f"expected {expected}, found {found} value{'s' if found != 1 else ''}"
            if b"\t" in content:
                message += "; values must be separated by spaces, not tabs"
        else:
            column = column_of(content, len(b" ".join(fields[: dim + 1])) + 1)
            message = f"expected {expected}, found {found} values"
        raise VectorFileError(self.path, message, line=line_no, column=column)

    def _text_after(self, block: bytes, start: int) -> int | None:
        """Line feeds before the first non-blank byte after ``block[start]`` (the rest of the file
        included), or None if only whitespace is left; consumes what it looks at."""
        rest, skipped = block[start:], 0
        while True:
            text = rest.lstrip()
            if text:
                return skipped + rest.count(b"\n", 0, len(rest) - len(text))
            skipped += rest.count(b"\n")
            if self.pending:
                rest, self.pending = self.pending, b""
            elif self.stream.at_end:
                return None
            else:
                rest = self.stream.read(files.BLOCK_BYTES)


def _to_float32(values: np.ndarray) -> np.ndarray:
    with np.errstate(over="ignore", invalid="ignore"):
        return values.astype(np.float32)


def _parse_numbers(text: bytes, count: int) -> np.ndarray | None:
    """``count`` space-separated numbers as finite float32, or None if that is not what ``text`` holds."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", DeprecationWarning)  # NumPy < 2.4 warns and stops at bad data
            values = np.fromstring(text, dtype=np.float64, sep=" ")
    except ValueError:
        return None
    if values.size != count:
        return None
    values = _to_float32(values)
    return values if np.isfinite(values).all() else None
