"""`rntn export-vectors CHECKPOINT OUT`: the trained word vectors as a word2vec file."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer


def export_vectors(
    checkpoint: Annotated[Path, typer.Argument(help="A model.h5 or checkpoint file.")],
    out: Annotated[Path, typer.Argument(help="Vector file to write.")],
    binary: Annotated[bool, typer.Option("--binary", help="word2vec binary instead of word2vec text.")] = False,
    gzip_output: Annotated[bool, typer.Option("--gzip", help="Compress the output with gzip.")] = False,
) -> None:
    """Write the trained word vectors (row i of L for vocabulary word i, the unknown-word row
    `<unknown>` included) in word2vec text format (header `count dim`), or binary with --binary."""
    from rntn_engine.cli.output_guard import output_conflict
    from rntn_engine.data.errors import InputError
    from rntn_engine.data.word_vector_writers import write_word2vec_binary, write_word2vec_text
    from rntn_engine.run.checkpoints import load_checkpoint

    reason = output_conflict(out, [("the checkpoint being read", checkpoint)])
    if reason is not None:
        raise InputError(str(out), f"{reason}; choose another output file")
    model = load_checkpoint(checkpoint)
    write = write_word2vec_binary if binary else write_word2vec_text
    try:
        write(out, model.vocabulary.words, model.params.L, compress=gzip_output)
    except ValueError as exc:
        raise InputError(str(checkpoint), f"cannot export its vectors: {exc}") from None
    except OSError as exc:
        raise InputError(str(out), f"cannot write it: {exc.strerror or exc}") from None
    typer.echo(f"wrote {len(model.vocabulary):,} vectors of {model.config.dim} values to {out} "
               f"(word2vec {'binary' if binary else 'text'}{', gzip' if gzip_output else ''})")
