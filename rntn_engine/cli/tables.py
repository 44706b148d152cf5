"""Plain-text tables for the terminal: aligned columns, no colours, no box drawing.

Used by every command that prints numbers (``stats`` now, evaluation later)::

    label  roots  share
    0          3  30.0%
    1          7  70.0%
"""

from __future__ import annotations

from typing import Iterable, Sequence


def render_table(
    header: Sequence[str],
    rows: Iterable[Sequence[object]],
    *,
    align: str | None = None,
    indent: int = 0,
) -> str:
    """Columns separated by two spaces, a header line first; no trailing spaces or newline.

    ``align`` has one letter per column, ``l`` (left) or ``r`` (right); by default
    the first column is left-aligned and the others right-aligned (numbers).
    Cells are shown with ``str``: format numbers before passing them.
    """
    cells = [[str(c) for c in header]] + [[str(c) for c in row] for row in rows]
    n_columns = len(header)
    if any(len(row) != n_columns for row in cells):
        raise ValueError(f"every row needs {n_columns} cells")
    align = align or "l" + "r" * (n_columns - 1)
    if len(align) != n_columns or set(align) - {"l", "r"}:
        raise ValueError(f"align needs one of 'l'/'r' per column, got {align!r}")
    widths = [max(len(row[j]) for row in cells) for j in range(n_columns)]
    lines = []
    for row in cells:
        padded = [c.ljust(w) if a == "l" else c.rjust(w) for c, w, a in zip(row, widths, align)]
        lines.append((" " * indent + "  ".join(padded)).rstrip())
    return "\n".join(lines)


def render_pairs(pairs: Iterable[tuple[str, object]], *, indent: int = 0) -> str:
    """``name  value`` lines with the values lined up, e.g. a summary block."""
    pairs = [(str(k), str(v)) for k, v in pairs]
    width = max((len(k) for k, _ in pairs), default=0)
    return "\n".join((" " * indent + f"{k.ljust(width)}  {v}").rstrip() for k, v in pairs)


def format_count(n: int) -> str:
    """An integer with thousands separators: 1234567 -> '1,234,567'."""
    return f"{n:,}"


def format_share(fraction: float, digits: int = 1) -> str:
    """A fraction as a percentage: 0.4 -> '40.0%'."""
    return f"{100 * fraction:.{digits}f}%"


def format_number(x: float | None, digits: int = 2) -> str:
    """A float with fixed digits, integers without decimals, None as '-'."""
    if x is None:
        return "-"
    if float(x).is_integer():
        return format_count(int(x))
    return f"{x:,.{digits}f}"
