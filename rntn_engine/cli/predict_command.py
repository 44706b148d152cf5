"""`rntn predict CHECKPOINT INPUT`: a label for every phrase of new sentences."""

from __future__ import annotations

import io
import json
import os
import sys
from pathlib import Path
from typing import Annotated

import typer

from rntn_engine.cli.output_guard import output_conflict
from rntn_engine.cli.shared_options import ProgressOption, ThreadsOption
from rntn_engine.run.prediction import MAX_INPUT_LINE_BYTES, UNKNOWN_SHARE_WARNING

# Characters JSON may leave raw that some line splitters (Python's str.splitlines among them) take for a
# line end: escaped, so every JSON-lines record stays one line for any reader. JSON escapes the C0 controls.
_LINE_BREAKS_ESCAPED = str.maketrans({"\x85": "\\u0085", "\u2028": "\\u2028", "\u2029": "\\u2029"})


def predict(
    checkpoint: Annotated[Path, typer.Argument(help="A model.h5 or checkpoint file.")],
    input_file: Annotated[str, typer.Argument(metavar="INPUT", help="File of bracketed trees (each on one line or spread over several) or plain sentences, one per line; - for standard input.")],
    output_format: Annotated[str, typer.Option("--format", help="trees: bracketed trees with predicted labels; jsonl: per sentence, every node's span text, label and class probabilities.")] = "trees",
    input_format: Annotated[str, typer.Option("--input-format", help="auto (a line starting with '(' is a tree, any other a sentence), trees, or sentences.")] = "auto",
    output: Annotated[str, typer.Option("--output", "-o", help="Write here instead of standard output (never the input, the checkpoint or another HDF5 file).")] = "-",
    tokenize: Annotated[bool, typer.Option("--tokenize/--no-tokenize", help="Cut plain sentences into tokens by treebank conventions (punctuation split off, wasn't -> was n't, brackets escaped); --no-tokenize splits them only at spaces, tabs and lone CRs, for text tokenised already.")] = True,
    max_line_bytes: Annotated[int, typer.Option("--max-line-bytes", min=64, help="Refuse an input line longer than this many bytes, and a tree spread over lines longer than 16 times it: it bounds the memory one sentence takes.")] = MAX_INPUT_LINE_BYTES,
    warn_unknown_share: Annotated[float, typer.Option("--warn-unknown-share", min=0.0, max=1.0, help="Warn when more than this share of the input's tokens are words the model does not know (1 never warns).")] = UNKNOWN_SHARE_WARNING,
    threads: ThreadsOption = 1,
    progress: ProgressOption = None,
) -> None:
    """Predict a label for every node of every input tree or sentence, streaming any size of input.

    Trees may carry any labels (class numbers, '_', or a parser's categories): they are ignored.
    Plain sentences are tokenised by treebank conventions. No parser is bundled: a plain sentence
    gets a right-branching tree, with a warning, since a real parse gives better results. Unknown
    words use the unknown-word vector and are counted in the summary printed on standard error,
    with a warning when input looks untokenised or holds many unknown words.
    """
    from tqdm import tqdm

    from rntn_engine.data.errors import InputError
    from rntn_engine.data.treebank_writer import format_tree
    from rntn_engine.run.checkpoints import load_checkpoint
    from rntn_engine.run.prediction import PredictionSummary, input_lines, predict_lines, prediction_record

    if output_format not in ("trees", "jsonl"):
        raise typer.BadParameter("expected trees or jsonl", param_hint="--format")
    if input_format not in ("auto", "trees", "sentences"):
        raise typer.BadParameter("expected auto, trees or sentences", param_hint="--input-format")
    _refuse_output_over_inputs(output, input_file, checkpoint)
    model = load_checkpoint(checkpoint)
    source = "<stdin>" if input_file == "-" else input_file
    try:
        stream = _stdin_bytes() if input_file == "-" else open(input_file, "rb")
    except OSError as exc:
        raise typer.BadParameter(f"{input_file}: {exc.strerror}", param_hint="INPUT") from None
    try:
        sink = sys.stdout if output == "-" else open(output, "w", encoding="utf-8")
    except OSError as exc:
        if input_file != "-":
            stream.close()
        raise InputError(output, f"cannot write the predictions there: {exc.strerror or exc}") from None
    summary = PredictionSummary()
    if progress is None:
        progress = sys.stderr.isatty() and not (sink is sys.stdout and sys.stdout.isatty())
    bar = tqdm(unit="tree", disable=not progress, leave=False, file=sys.stderr)
    lines = input_lines(stream, source, max_line_bytes)
    try:
        for predicted in predict_lines(model, lines, source, input_format, summary, threads, tokenize, max_line_bytes):
            bar.update(1)
            try:
                if output_format == "trees":
                    text = format_tree(predicted.tree, predicted.labels)
                else:
                    text = json.dumps(prediction_record(predicted), ensure_ascii=False).translate(_LINE_BREAKS_ESCAPED)
            except ValueError as exc:  # a word no tree can hold, e.g. one whose escapes would read back otherwise
                raise InputError(source, f"cannot write this item's tree: {exc}", predicted.line, None) from None
            try:
                sink.write(text + "\n")
            except BrokenPipeError:
                if output != "-":
                    raise
                # the reader of our standard output went away (e.g. `| head -1`): stop quietly, as
                # command-line filters do; later flushes go to /dev/null instead of failing again
                os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
                raise typer.Exit(0) from None
            except OSError as exc:
                raise InputError("<stdout>" if output == "-" else output,
                                 f"cannot write the predictions: {exc.strerror or exc}") from None
    finally:
        bar.close()
        if input_file != "-":
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
    for line in summary.warnings(warn_unknown_share):
        typer.echo(line, err=True)


def _stdin_bytes():
    """Standard input as bytes, so it is decoded and checked line by line as a file is."""
    binary = getattr(sys.stdin, "buffer", None)
    if binary is not None:
        return binary
    return io.BytesIO(sys.stdin.read().encode("utf-8", "surrogateescape"))  # a text stream without bytes


def _refuse_output_over_inputs(output: str, input_file: str, checkpoint: Path) -> None:
    """A usage error when the output file is the input, the checkpoint or any HDF5 file (cli/output_guard.py)."""
    if output == "-":
        return
    inputs = [("the checkpoint", str(checkpoint))] + ([("the input", input_file)] if input_file != "-" else [])
    reason = output_conflict(output, inputs, reads_stdin=input_file == "-")
    if reason is not None:
        raise typer.BadParameter(f"{output} {reason}; choose another output file", param_hint="--output")
