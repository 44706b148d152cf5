"""`rntn convert-labelled-sentences INPUT OUTPUT`: a sentence-labelled corpus as root-labelled trees."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer


def convert_labelled_sentences(
    input_file: Annotated[Path, typer.Argument(metavar="INPUT", help="Lines of LABEL<TAB>sentence or LABEL<TAB>(tree).")],
    output: Annotated[Path, typer.Argument(metavar="OUTPUT", help="Treebank to write: one bracketed tree per line.")],
    num_classes: Annotated[int, typer.Option("--num-classes", min=2, help="Number of classes C; labels are 0..C-1.")] = 5,
    binarise: Annotated[str, typer.Option("--binarise", help="Nodes of a parse with more than two children: right, left or strict (refuse).")] = "right",
    tokenize: Annotated[bool, typer.Option("--tokenize/--split-on-spaces", help="Cut plain sentences into tokens by treebank conventions (punctuation, clitics such as n't, escaped brackets), or only at spaces.")] = True,
) -> None:
    """Turn a corpus labelled per sentence into trees that `rntn train` reads: the root of each tree
    carries the line's label, every other node is unlabelled (no loss). A text starting with "(" is a
    parse (its own labels or categories are dropped); any other text is a sentence and gets a
    right-branching tree. Training on such trees works: the root's error reaches every phrase."""
    from rntn_engine.data.atomic_files import atomic_output
    from rntn_engine.data.errors import InputError
    from rntn_engine.data.sentence_labels import read_sentence_labels
    from rntn_engine.data.treebank_writer import format_tree

    if binarise not in ("right", "left", "strict"):
        raise typer.BadParameter("expected right, left or strict", param_hint="--binarise")
    if output.exists() and input_file.exists() and output.resolve() == input_file.resolve():
        raise InputError(str(output), "is the input file; choose another output file")
    count = 0
    try:
        with atomic_output(output) as out:
            for tree in read_sentence_labels(input_file, num_classes, binarise, tokenize):
                out.write((format_tree(tree) + "\n").encode("utf-8"))
                count += 1
    except OSError as exc:
        raise InputError(str(output), f"cannot write it: {exc.strerror or exc}") from None
    typer.echo(f"wrote {count:,} root-labelled trees to {output}")
