"""``rntn stats``: check treebank files and describe what they hold."""

from __future__ import annotations

import json
import sys
from enum import Enum
from pathlib import Path
from typing import Annotated, Optional

import typer
from tqdm import tqdm

import rntn_engine.kernels  # noqa: F401  guards numba's on-disk cache, which also holds the treebank scanner
from rntn_engine.cli.shared_options import JsonOption
from rntn_engine.cli.tables import format_count, format_number, format_share, render_pairs, render_table
from rntn_engine.data.treebank_bulk import iter_tree_blocks
from rntn_engine.data.treebank_stats import LabelDistribution, StatsAccumulator, TreebankStats


class BinariseMode(str, Enum):
    right = "right"
    left = "left"
    strict = "strict"


def stats(
    treebanks: Annotated[
        list[Path],
        typer.Argument(help="Treebank files: bracketed trees, one per line (or spread over several).", metavar="TREEBANK", show_default=False),
    ],
    json_output: JsonOption = False,
    num_classes: Annotated[
        Optional[int],
        typer.Option(
            "--num-classes",
            min=1,
            metavar="C",
            help="Number of classes: refuse labels outside 0..C-1 and list every class, even unused ones.",
        ),
    ] = None,
    binarise: Annotated[
        BinariseMode,
        typer.Option(
            "--binarise",
            case_sensitive=False,
            help="How to make nodes with more than two children binary: 'right' (l a (_ b c)), "
            "'left' (l (_ a b) c), or 'strict' to refuse them and unary chains.",
        ),
    ] = BinariseMode.right,
) -> None:
    """Check treebank files and print their statistics.

    Reads each TREEBANK in full, as training would (same binarisation and label
    checks), and prints per file, and for several files their total: numbers of
    trees, nodes, words and distinct words; sentence lengths; the labels at the
    roots and at all nodes; and the labels by phrase length (words spanned by a
    node: 1, 2, 3-5, 6-10, 11-20, 21+).

    \b
    Tree format, one tree per line (or spread over several, indented after the first):
      (3 (2 The) (4 (3 roses) (2 bloomed)))
      labels are class numbers 0..C-1, or _ for an unlabelled node;
      write brackets inside words as -LRB- -RRB- -LCB- -RCB- -LSB- -RSB-;
      blank lines and lines starting with # are skipped;
      unary chains collapse (the outermost label wins).

    Exit status: 0 when every file is well formed, 1 on the first malformed
    tree (reported as FILE:LINE:COL: what was expected), 2 on bad usage.
    A progress bar appears on stderr when it is a terminal.
    """
    accumulators = [StatsAccumulator(num_classes) for _ in treebanks]
    several = len(treebanks) > 1
    total = StatsAccumulator(num_classes) if several else accumulators[0]
    show_progress = sys.stderr.isatty()
    for path, accumulator in zip(treebanks, accumulators):
        sinks = (accumulator, total) if several else (accumulator,)
        with tqdm(desc=path.name, unit=" lines", disable=not show_progress, leave=False, file=sys.stderr) as bar:
            for block in iter_tree_blocks(path, num_classes=num_classes, binarise=binarise.value,
                                          progress=bar.update):
                for sink in sinks:
                    sink.add_block(block)
    per_file = [(str(path), accumulator.result()) for path, accumulator in zip(treebanks, accumulators)]
    if json_output:
        report = {
            "files": [{"path": path, **result.as_dict()} for path, result in per_file],
            "total": total.result().as_dict(),  # the single file's numbers when there is one file
        }
        typer.echo(json.dumps(report, indent=2))
        return
    sections = [render_stats(f"treebank {path}", result) for path, result in per_file]
    if several:
        sections.append(render_stats(f"total of {len(per_file)} files", total.result()))
    typer.echo("\n\n".join(sections))


def render_stats(title: str, result: TreebankStats) -> str:
    """The plain-text report of one treebank (or of a total)."""
    length = result.sentence_length
    summary = render_pairs(
        [
            ("trees", format_count(result.n_trees)),
            ("nodes", format_count(result.n_nodes)),
            ("words", format_count(result.n_tokens)),
            ("distinct words", format_count(result.n_word_types)),
            (
                "sentence length",
                f"min {format_number(length.min)}, median {format_number(length.median)}, "
                f"mean {format_number(length.mean)}, max {format_number(length.max)}",
            ),
        ],
        indent=2,
    )
    lengths = render_table(
        ["sentence length", "trees", "share"],
        [
            (bucket, format_count(count), format_share(count / result.n_trees if result.n_trees else 0.0))
            for bucket, count in length.histogram.items()
        ],
        indent=2,
    )
    labels = render_table(
        ["label", "roots", "share", "all nodes", "share"],
        [
            (
                key,
                format_count(result.root_labels.counts[key]),
                format_share(result.root_labels.fractions[key]),
                format_count(result.node_labels.counts[key]),
                format_share(result.node_labels.fractions[key]),
            )
            for key in result.node_labels.counts
        ],
        indent=2,
    )
    by_length = render_table(
        ["phrase length", "nodes", *result.node_labels.counts],
        [_share_row(bucket, d) for bucket, d in result.labels_by_phrase_length.items()],
        indent=2,
    )
    return "\n\n".join(
        [
            f"== {title} ==",
            summary,
            lengths,
            labels,
            "  labels by phrase length (share of the nodes spanning that many words)\n" + by_length,
        ]
    )


def _share_row(name: str, distribution: LabelDistribution) -> list[str]:
    return [name, format_count(distribution.total), *(format_share(f) for f in distribution.fractions.values())]
