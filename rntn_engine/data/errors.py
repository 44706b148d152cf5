"""Error types for bad input, each carrying the place where the problem is.

Every reader raises a subclass of :class:`InputError`; its message is one line,
``FILE:LINE:COL: what was expected`` (line and column are 1-based; a byte offset
replaces them for binary files). The command line prints that line and exits
with status 1, never a traceback.
"""

from __future__ import annotations


class InputError(Exception):
    """A malformed input file, located to file, line and column (or byte offset)."""

    def __init__(
        self,
        path: str,
        message: str,
        line: int | None = None,
        column: int | None = None,
        byte_offset: int | None = None,
    ) -> None:
        self.path = str(path)
        self.message = message
        self.line = line
        self.column = column
        self.byte_offset = byte_offset
        super().__init__(self.location() + ": " + message)

    def location(self) -> str:
        """``FILE:LINE:COL``, ``FILE:LINE``, ``FILE:byte N`` or ``FILE``."""
        if self.line is not None and self.column is not None:
            return f"{self.path}:{self.line}:{self.column}"
        if self.line is not None:
            return f"{self.path}:{self.line}"
        if self.byte_offset is not None:
            return f"{self.path}:byte {self.byte_offset}"
        return self.path


class TreebankError(InputError):
    """A bracketed treebank file that does not follow the tree format."""


class VectorFileError(InputError):
    """A word-vector file (GloVe text, word2vec text or binary) that is malformed."""
