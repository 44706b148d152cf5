"""The slice options of `rntn evaluate` and `rntn report` (run/slice_definitions.py says what a slice is)."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer

SliceFilesOption = Annotated[
    Optional[list[Path]],
    typer.Option("--slices", help="Slice file (TOML, one table per slice: README \"Slices\"); repeat for several."),
]
SliceOption = Annotated[
    Optional[list[str]],
    typer.Option("--slice", metavar="NAME=KIND[:VALUE]",
                 help="A slice: KIND phrase-words:W1,W2 | tree-words:W1,W2 | phrase-length:N-M | "
                      "root-class:C1,C2 | opposite-children; repeat for several."),
]


def slices_from_options(slice_files: list[Path] | None, slice_options: list[str] | None) -> tuple:
    """The slices of every --slices file, then of every --slice option; names must differ."""
    from rntn_engine.run.slice_definitions import read_slice_file, slice_from_option

    slices = [s for path in slice_files or () for s in read_slice_file(path)]
    for text in slice_options or ():
        try:
            slices.append(slice_from_option(text))
        except ValueError as exc:
            raise typer.BadParameter(str(exc), param_hint="--slice") from None
    seen = set()
    for s in slices:
        if s.name in seen:
            raise typer.BadParameter(f"two slices are named {s.name!r}: give each slice a name of its own",
                                     param_hint="--slice/--slices")
        seen.add(s.name)
    return tuple(slices)
