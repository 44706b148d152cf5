"""`rntn predict CHECKPOINT INPUT`: a label for every phrase of new sentences."""

from __future__ import annotations

import json
import sys
from pathlib import Path
from typing import Annotated

import typer

from rntn_engine.cli.shared_options import ProgressOption, ThreadsOption

def predict(
    checkpoint: Annotated[Path, typer.Argument(help="A model.h5 or checkpoint file.")],
    input_file: Annotated[str, typer.Argument(metavar="INPUT", help="File of bracketed trees (each on one line or spread over several) or tokenised sentences, one per line; - for standard input.")],
    output_format: Annotated[str, typer.Option("--format", help="trees: bracketed trees with predicted labels; jsonl: per sentence, every node's span text, label and class probabilities.")] = "trees",
    input_format: Annotated[str, typer.Option("--input-format", help="auto (a line starting with '(' is a tree, any other a sentence), trees, or sentences.")] = "auto",
    output: Annotated[str, typer.Option("--output", "-o", help="Write here instead of standard output.")] = "-",
    threads: ThreadsOption = 1,
    progress: ProgressOption = None,
) -> None:
    """Predict a label for every node of every input tree or sentence, streaming any size of input.

    Trees may carry any labels (class numbers, '_', or a parser's categories): they are ignored.
    No parser is bundled: a plain sentence gets a right-branching tree, with a warning, since a
    real parse gives better results. Unknown words use the unknown-word vector and are counted
    in the summary printed on standard error.
    """
    from tqdm import tqdm

    from rntn_engine.data.treebank_writer import format_tree
    from rntn_engine.run.checkpoints import load_checkpoint
    from rntn_engine.run.prediction import PredictionSummary, predict_lines, prediction_record

    if output_format not in ("trees", "jsonl"):
        raise typer.BadParameter("expected trees or jsonl", param_hint="--format")
    if input_format not in ("auto", "trees", "sentences"):
        raise typer.BadParameter("expected auto, trees or sentences", param_hint="--input-format")
    model = load_checkpoint(checkpoint)
    source = "<stdin>" if input_file == "-" else input_file
    try:
        stream = sys.stdin if input_file == "-" else open(input_file, encoding="utf-8", errors="strict", newline="")
    except OSError as exc:
        raise typer.BadParameter(f"{input_file}: {exc.strerror}", param_hint="INPUT") from None
    sink = sys.stdout if output == "-" else open(output, "w", encoding="utf-8")
    summary = PredictionSummary()
    if progress is None:
        progress = sys.stderr.isatty() and not (sink is sys.stdout and sys.stdout.isatty())
    bar = tqdm(unit="tree", disable=not progress, leave=False, file=sys.stderr)
    try:
        for predicted in predict_lines(model, _lines(stream, source), source, input_format, summary, threads):
            bar.update(1)
            if output_format == "trees":
                sink.write(format_tree(predicted.tree, predicted.labels) + "\n")
            else:
                sink.write(json.dumps(prediction_record(predicted), ensure_ascii=False) + "\n")
    finally:
        bar.close()
        if stream is not sys.stdin:
            stream.close()
        if sink is not sys.stdout:
            sink.close()
        else:
            sink.flush()
    share = summary.unknown_tokens / summary.tokens if summary.tokens else 0.0
    typer.echo(f"predicted {summary.sentences} sentences, {summary.nodes} nodes; unknown words: "
               f"{summary.unknown_tokens} of {summary.tokens} tokens ({100 * share:.1f}%), "
               f"{len(summary.unknown_types)} distinct", err=True)
    if summary.fallback_trees:
        typer.echo(f"warning: {summary.fallback_trees} plain sentences got a right-branching fallback tree; "
                   f"parse them into bracketed trees for better phrase labels", err=True)


def _lines(stream, source: str):
    """Lines of the input; undecodable bytes become a one-line error with the line number."""
    from rntn_engine.data.errors import InputError

    line_no = 0
    try:
        for line_no, line in enumerate(stream, start=1):
            yield line
    except UnicodeDecodeError as exc:
        raise InputError(source, f"invalid UTF-8 byte 0x{exc.object[exc.start]:02x}: expected UTF-8 text",
                         line_no + 1, None) from None
