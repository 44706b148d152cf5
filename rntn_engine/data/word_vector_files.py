"""What the word-vector readers share: opening (plain or gzip), the first line, format detection, row keeping.

Legend: d values per vector (the dimension), n rows kept.

The three formats
-----------------
* GloVe text: no header; every line ``word v1 ... vd``.
* word2vec text: a header line ``count dim``, then ``count`` lines like GloVe.
* word2vec binary: the header line ``count dim\\n``, then per row the word's UTF-8
  bytes, one space, ``d`` little-endian float32 values (4d bytes) and an optional
  ``\\n`` (the original C tool writes it, gensim does not).

Detection (``format="auto"``)
-----------------------------
The first line decides between the families: a line of exactly two non-negative
integers is a word2vec header, anything else is the first row of a GloVe file
(so a GloVe file of 1-dimensional vectors whose first word is a number needs
``format="glove"``). After a header, the first row decides text or binary
(:func:`first_row_is_binary`): binary if, where its values should be, the file
holds bytes that no text row has there: an ASCII control byte, a non-ASCII byte,
or no value before the line ends. Only a binary row whose bytes up to its first line
feed (at most 4d) are all printable ASCII (say d = 1 and a value whose four bytes are
letters) fools the test; force the format for such a file. A forced format that disagrees with
the test is an error that names the other format, so a binary file read as text
(and the reverse) gets one clear line instead of garbage.

Compression is recognised by the gzip magic bytes ``1f 8b``, never by the file name.
"""

from __future__ import annotations

import gzip
import io
import re
import zlib
from contextlib import contextmanager
from dataclasses import dataclass
from typing import BinaryIO, Iterator

import numpy as np

from rntn_engine.data.errors import VectorFileError

FORMATS = ("auto", "glove", "word2vec-text", "word2vec-binary")
ENCODING_ERRORS = ("strict", "replace")
BLOCK_BYTES = 16 * 1024 * 1024  # bytes read at a time (a module constant so tests can shrink it)
MAX_LINE_BYTES = 16 * 1024 * 1024  # longest accepted text line (a row of about 1.6 million values)
MAX_WORD_BYTES = 64 * 1024  # longest accepted word in a binary file
DEFAULT_MAX_BYTES = 8 * 1024**3  # float32 bytes a file may declare (8 GiB; 3 million x 300 is 3.6 GB)
MAX_DIM = 65_536  # values per vector a header may declare: a binary row is read whole, so this bounds its memory
DETECTION_WINDOW = 4096  # bytes of the first row's values looked at to tell text from binary

_GZIP_MAGIC = b"\x1f\x8b"
_GZIP_PIECE = 1024 * 1024  # gzip data is decompressed this much at a time, to locate corruption
_BOM = b"\xef\xbb\xbf"
_HEADER_RE = re.compile(rb"[ \t]*([0-9]{1,18})[ \t]+([0-9]{1,18})[ \t\r]*")
# ASCII control bytes that never occur in a text row (tab and CR are allowed; LF ends the region)
# bytes no text row has where its numbers are: ASCII controls (but tab and CR) and every non-ASCII byte
_NOT_NUMBER_TEXT_RE = re.compile(rb"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\xff]")


def quote(raw: bytes, limit: int = 40) -> str:
    """A short printable form of ``raw`` for error messages."""
    text = raw[:limit].decode("utf-8", "backslashreplace")
    return repr(text + ("..." if len(raw) > limit else ""))


def column_of(line: bytes, index: int) -> int:
    """1-based character column of byte ``index`` of ``line``."""
    return len(line[:index].decode("utf-8", "replace")) + 1


# --- opening -----------------------------------------------------------------------------------------


class VectorStream:
    """Uncompressed bytes of a vector file, read in blocks; gzip errors become VectorFileError."""

    def __init__(self, path: str, raw: io.BufferedReader) -> None:
        self.path = path
        self.compressed = raw.peek(2)[:2] == _GZIP_MAGIC
        self._file: BinaryIO = gzip.GzipFile(fileobj=raw, mode="rb") if self.compressed else raw
        self.offset = 0  # uncompressed bytes handed out so far
        self.at_end = False

    def read(self, size: int) -> bytes:
        """Up to ``size`` bytes; fewer only at the end of the data."""
        parts = []
        wanted = size
        while wanted > 0 and not self.at_end:
            try:
                part = self._file.read(min(wanted, _GZIP_PIECE) if self.compressed else wanted)
            except (EOFError, zlib.error, OSError) as exc:
                at = self.offset + size - wanted
                message = (
                    f"corrupt or truncated gzip data ({exc}) in the {_GZIP_PIECE:,} uncompressed bytes from here"
                    if self.compressed
                    else f"cannot read the file ({exc})"
                )
                raise VectorFileError(self.path, message, byte_offset=at) from None
            if not part:
                self.at_end = True
            parts.append(part)
            wanted -= len(part)
        data = b"".join(parts)
        self.offset += len(data)
        return data


@contextmanager
def open_vector_stream(path: str) -> Iterator[VectorStream]:
    """Open ``path`` for reading, decompressing gzip data; an unreadable path is a VectorFileError."""
    try:
        raw = open(path, "rb")
    except OSError as exc:
        raise VectorFileError(path, f"cannot open the file: {exc.strerror or exc}") from None
    with raw:
        yield VectorStream(path, raw)


# --- the first line and the format ----------------------------------------------------------------


@dataclass
class FileStart:
    """What the first line says, and the bytes read so far that follow it."""

    format: str  # "glove", "word2vec-text" or "word2vec-binary"
    dim: int | None  # from the header; None for GloVe (the first row decides)
    declared_rows: int | None  # the header's count; None for GloVe
    rest: bytes  # bytes already read after the header (GloVe: from the first row on)
    rest_offset: int  # file offset (uncompressed) of rest[0]
    first_row_line: int  # line number of the first row (1 for GloVe, 2 after a header)


def read_file_start(stream: VectorStream, fmt: str, max_bytes: int, expected_dim: int | None) -> FileStart:
    """Read the header (if any), check it and decide the format (see the module docstring)."""
    path = stream.path
    data = stream.read(BLOCK_BYTES)
    start = len(_BOM) if data.startswith(_BOM) else 0
    while data.find(b"\n", start) < 0 and not stream.at_end and len(data) <= MAX_LINE_BYTES:
        data += stream.read(BLOCK_BYTES)
    binary_forced = fmt == "word2vec-binary"
    if len(data) == start:
        raise _error_at_start(
            path, binary_forced, "empty file: expected word vectors (GloVe text, word2vec text or binary)"
        )
    end = data.find(b"\n", start)
    first_line = data[start : end if end >= 0 else len(data)]
    header = _HEADER_RE.fullmatch(first_line)
    if fmt == "glove" or (fmt == "auto" and header is None):
        return FileStart("glove", None, None, data[start:], start, 1)
    if header is None:
        raise _error_at_start(
            path, binary_forced, f"expected a header 'count dim' (two integers), found {quote(first_line)}"
        )
    count, dim = int(header.group(1)), int(header.group(2))
    rest_start = end + 1 if end >= 0 else len(data)
    rest = data[rest_start:]
    while len(rest) < DETECTION_WINDOW + MAX_WORD_BYTES and not stream.at_end:
        rest += stream.read(BLOCK_BYTES)
    is_binary = count > 0 and dim > 0 and first_row_is_binary(rest, dim)
    if fmt == "auto":
        fmt = "word2vec-binary" if is_binary else "word2vec-text"
    elif fmt == "word2vec-text" and is_binary:
        raise VectorFileError(
            path,
            "found binary data where the first row's numbers should be: this looks like a "
            "word2vec binary file (read it with format='word2vec-binary' or 'auto')",
            line=2,
        )
    elif fmt == "word2vec-binary" and count > 0 and rest.strip() and not is_binary:
        raise VectorFileError(
            path,
            "found text where the first row's float32 values should be: this looks like a "
            "word2vec text file (read it with format='word2vec-text' or 'auto')",
            byte_offset=rest_start,
        )
    binary = fmt == "word2vec-binary"
    if dim < 1:
        raise _error_at_start(path, binary, "the header declares dimension 0: expected at least 1 value per vector")
    if dim > MAX_DIM:
        raise _error_at_start(
            path, binary, f"the header declares {dim:,} values per vector, more than the {MAX_DIM:,} a vector file "
                          f"of ours may have (word vectors have hundreds); the header is wrong or the file is not one"
        )
    if count * dim * 4 > max_bytes:
        raise _error_at_start(
            path,
            binary,
            f"the header declares {count:,} rows of {dim:,} values, {count * dim * 4:,} bytes as float32, "
            f"more than the limit of {max_bytes:,} (max_bytes); raise the limit if the file is genuine",
        )
    check_dim(path, dim, expected_dim, binary)
    return FileStart(fmt, dim, count, rest, rest_start, 2)


def first_row_is_binary(rest: bytes, dim: int) -> bool:
    """Does the row starting ``rest`` hold binary float32 values rather than text numbers?

    Looks at up to ``min(4d, DETECTION_WINDOW)`` bytes after the word's space, up to
    the first line feed: binary if that region is empty, or holds an ASCII control byte or
    any non-ASCII byte (a text row's numbers are ASCII: a float32 such as 9754250833821696.0,
    bytes c2 9d 0a 5a, is valid UTF-8 before its line feed but not number text).
    A row whose line ends before any space is text (a word without values).
    """
    start = len(rest) - len(rest.lstrip(b"\n"))  # binary rows may begin with the previous row's \n
    space = rest.find(b" ", start, start + MAX_WORD_BYTES)
    newline = rest.find(b"\n", start, space if space >= 0 else start + MAX_WORD_BYTES)
    if space < 0 or newline >= 0:
        return False
    region = rest[space + 1 : space + 1 + min(4 * dim, DETECTION_WINDOW)].split(b"\n", 1)[0]
    return not region or _NOT_NUMBER_TEXT_RE.search(region) is not None


def check_dim(path: str, dim: int, expected_dim: int | None, binary: bool) -> None:
    """VectorFileError at the start of the file when ``dim`` is not the expected one."""
    if expected_dim is not None and dim != expected_dim:
        raise _error_at_start(
            path, binary, f"the vectors have {dim} values, expected {expected_dim} (the model's dimension)"
        )


def _error_at_start(path: str, binary: bool, message: str) -> VectorFileError:
    return VectorFileError(path, message, byte_offset=0) if binary else VectorFileError(path, message, line=1)


# --- which rows to keep ------------------------------------------------------------------------------


class RowKeeper:
    """Decides which rows to keep (first occurrence wins) and gathers their vectors.

    ``keys`` is the set of words to keep, or None to keep every row. A kept word
    seen again is counted in ``duplicates`` and skipped; only kept words are
    remembered, so repeats of words nobody asked for go uncounted.
    ``place`` says how readers locate rows: "line" (text) or "byte" (binary).
    """

    def __init__(self, path: str, keys: set[str] | None, max_bytes: int, place: str) -> None:
        self.path = path
        self.keys = keys
        self.max_bytes = max_bytes
        self.place = place
        self.index: dict[str, int] = {}  # kept word -> its row in the result
        self.words: list[str] = []
        self.blocks: list[np.ndarray] = []  # (n, d) float32 pieces, in file order
        self.duplicates = 0
        self.first_duplicate: str | None = None  # "'word' at line 7" for the warning

    def wants(self, word: str, where: int) -> bool:
        """True if the row of ``word`` (at line or byte ``where``) is to be kept."""
        if self.keys is not None and word not in self.keys:
            return False
        if word in self.index:
            self.duplicates += 1
            if self.first_duplicate is None:
                self.first_duplicate = f"{word!r} at {self.place} {where}"
            return False
        self.index[word] = len(self.words)
        self.words.append(word)
        return True

    def rows_allowed(self, dim: int) -> int:
        """How many rows of ``dim`` float32 values fit in ``max_bytes``."""
        return self.max_bytes // (4 * dim)

    def too_many_rows(self, dim: int, line: int | None = None, byte_offset: int | None = None) -> VectorFileError:
        """The error for a row that would take the kept vectors past ``max_bytes``."""
        return VectorFileError(
            self.path,
            f"keeping more than {self.rows_allowed(dim)} vectors of {dim} values would pass the limit of "
            f"{self.max_bytes:,} bytes (max_bytes); raise the limit or ask for fewer words",
            line=line,
            byte_offset=byte_offset,
        )

    def add(self, vectors: np.ndarray) -> None:
        """Append the (n, d) vectors of the last n rows accepted by :meth:`wants`."""
        self.blocks.append(vectors)

    def matrix(self, dim: int) -> np.ndarray:
        """All kept vectors as one (n, d) float32 array, in file order."""
        if not self.blocks:
            return np.zeros((0, dim), dtype=np.float32)
        return np.ascontiguousarray(np.concatenate(self.blocks, axis=0), dtype=np.float32)


def decode_word(raw: bytes, errors: str, path: str, *, line: int | None = None, byte_offset: int = 0) -> str:
    """The word as text; VectorFileError at the first bad byte when ``errors`` is "strict"."""
    try:
        return raw.decode("utf-8", errors)
    except UnicodeDecodeError as exc:
        message = (
            f"bytes that are not UTF-8 ({quote(raw[exc.start : exc.end])}) in the word; "
            "choose the 'replace' encoding-error mode (rntn train --vectors-encoding-errors replace) to substitute U+FFFD"
        )
        if line is not None:
            raise VectorFileError(path, message, line=line, column=column_of(raw, exc.start)) from None
        raise VectorFileError(path, message, byte_offset=byte_offset + exc.start) from None
