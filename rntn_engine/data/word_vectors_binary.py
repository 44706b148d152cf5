"""Streaming reader of word2vec binary rows (after the ``count dim`` header line).

Legend: d values per row, R = 4d bytes of float32 values per row.

A row is the word's bytes, one space, R bytes of little-endian float32 values,
and an optional line feed (line feeds before a word are skipped, as the original
C tool writes one after every row and gensim none). The file is read in blocks
of :data:`BLOCK_BYTES`; the reader finds each word's space with ``bytes.find``
and steps over the values by offset arithmetic, so a row nobody asked for costs
one search and one dictionary lookup and its values are never touched.

Every row is checked for a non-empty word that decodes (unless
``encoding_errors="replace"``) and for its R bytes being present. The values of
rows that are kept must be finite; those of other rows are not looked at (any 4
bytes are a float32). After the declared rows only whitespace may follow.
Errors give the byte offset in the (uncompressed) file.
"""

from __future__ import annotations

import numpy as np

from rntn_engine.data import word_vector_files as files
from rntn_engine.data.errors import VectorFileError
from rntn_engine.data.word_vector_files import FileStart, RowKeeper, VectorStream, decode_word

_FLOAT32_LE = np.dtype("<f4")


class BinaryRowReader:
    """Reads the rows of a word2vec binary file into a :class:`RowKeeper`."""

    def __init__(
        self, stream: VectorStream, start: FileStart, keeper: RowKeeper, *, encoding_errors: str, stop_after: int | None
    ) -> None:
        assert start.dim is not None and start.declared_rows is not None
        self.stream = stream
        self.path = stream.path
        self.keeper = keeper
        self.errors = encoding_errors
        self.dim = start.dim
        self.declared = start.declared_rows
        self.limit = self.declared if stop_after is None else min(self.declared, stop_after)
        self.rows = 0  # rows read so far
        self.buf = start.rest  # bytes in hand
        self.base = start.rest_offset  # file offset of buf[0]
        self.pos = 0  # next unread byte of buf
        self.kept: list[np.ndarray] = []  # float32 views of the rows kept from `buf`

    @property
    def offset(self) -> int:
        """File offset of the next unread byte."""
        return self.base + self.pos

    def read(self) -> None:
        """Read ``min(declared, stop_after)`` rows; if all were asked for, check nothing but whitespace follows."""
        row_bytes = 4 * self.dim
        keeper, errors, path = self.keeper, self.errors, self.path
        allowed = keeper.rows_allowed(self.dim)
        while self.rows < self.limit:
            buf, pos = self.buf, self.pos
            while buf[pos : pos + 1] == b"\n":
                pos += 1
            space = buf.find(b" ", pos, pos + files.MAX_WORD_BYTES + 1)
            end = space + 1 + row_bytes
            if space < 0 or end > len(buf):  # the row is not all in hand
                self.pos = pos
                if space < 0 and len(buf) - pos > files.MAX_WORD_BYTES:
                    raise VectorFileError(
                        path,
                        f"no space within {files.MAX_WORD_BYTES:,} bytes: expected a word, a space and "
                        f"{self.dim} float32 values",
                        byte_offset=self.offset,
                    )
                if self.stream.at_end:
                    self._raise_truncated(space)
                self._refill(max(files.BLOCK_BYTES, end - len(buf)))
                continue
            if space == pos:
                raise VectorFileError(
                    path, "empty word (a space where a word should start)", byte_offset=self.base + pos
                )
            word = decode_word(buf[pos:space], errors, path, byte_offset=self.base + pos)
            if keeper.wants(word, self.base + pos):
                if len(keeper.words) > allowed:
                    raise keeper.too_many_rows(self.dim, byte_offset=self.base + pos)
                vector = np.frombuffer(buf, dtype=_FLOAT32_LE, count=self.dim, offset=space + 1)
                if not np.isfinite(vector).all():
                    j = int(np.argmin(np.isfinite(vector)))
                    raise VectorFileError(
                        path,
                        f"value {j + 1} of {word!r} is {vector[j]}: expected finite float32 values",
                        byte_offset=self.base + space + 1 + 4 * j,
                    )
                self.kept.append(vector)
            self.rows += 1
            self.pos = end
        self._flush()
        if self.rows == self.declared:
            self._check_only_whitespace_follows()

    def _refill(self, size: int) -> None:
        """Drop the bytes already read, keep the rest and append ``size`` more from the file."""
        self._flush()
        self.buf = self.buf[self.pos :] + self.stream.read(size)
        self.base += self.pos
        self.pos = 0

    def _flush(self) -> None:
        if self.kept:
            self.keeper.add(np.array(self.kept, dtype=np.float32))
            self.kept = []

    def _raise_truncated(self, space: int) -> None:
        """At the end of the file inside row ``rows + 1`` (``space``: its word's space, or -1)."""
        rest = self.buf[self.pos :]
        if not rest.strip():
            raise VectorFileError(
                self.path,
                f"the file ends after {self.rows} rows; the header declares {self.declared}",
                byte_offset=self.base + len(self.buf),
            )
        if space < 0:
            raise VectorFileError(
                self.path,
                f"the file ends inside row {self.rows + 1}: expected a word, a space and {self.dim} float32 values",
                byte_offset=self.offset,
            )
        have = len(self.buf) - space - 1
        raise VectorFileError(
            self.path,
            f"truncated row {self.rows + 1}: its {self.dim} float32 values need {4 * self.dim} bytes, "
            f"the file ends after {have}",
            byte_offset=self.base + space + 1,
        )

    def _check_only_whitespace_follows(self) -> None:
        rest = self.buf[self.pos :]
        while True:
            text = rest.lstrip()
            if text:
                raise VectorFileError(
                    self.path,
                    f"data after the {self.declared} rows the header declares: expected the end of the file",
                    byte_offset=self.offset + len(rest) - len(text),
                )
            self.base += self.pos + len(rest)
            self.pos = 0
            self.buf = b""
            if self.stream.at_end:
                return
            rest = self.stream.read(files.BLOCK_BYTES)
