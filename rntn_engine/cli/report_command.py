"""`rntn report RUN_DIR`: PNG figures of a run (needs the optional matplotlib extra)."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import numpy as np
import typer

from rntn_engine.cli.app_exit import EXIT_BAD_INPUT
from rntn_engine.cli.slice_options import SliceFilesOption, SliceOption, slices_from_options


def report(
    run_dir: Annotated[Path, typer.Argument(help="Run directory made by `rntn train`.")],
    out_dir: Annotated[Optional[Path], typer.Option("--out-dir", help="Where to write the PNG files. [default: RUN_DIR/report]")] = None,
    treebank: Annotated[Optional[Path], typer.Option("--treebank", "-t", help="Treebank for the confusion matrices and slice scores. [default: the run's dev file]")] = None,
    slice_files: SliceFilesOption = None,
    slice_options: SliceOption = None,
) -> None:
    """Write learning curves (training and dev loss, dev scores, the best checkpoint marked), the
    confusion matrices of the best checkpoint (roots and all nodes, with the run's class names) and,
    with --slices or --slice, its scores per slice as a bar chart, as PNG files.
    Needs matplotlib: pip install 'rntn_engine[plot]'."""
    from rntn_engine.run.checkpoint_evaluation import detail_report
    from rntn_engine.run.checkpoints import load_checkpoint, newest_valid_checkpoint
    from rntn_engine.run.report_figures import (
        MissingPlotLibrary,
        plot_confusions,
        plot_learning_curves,
        plot_slice_scores,
        require_matplotlib,
    )
    from rntn_engine.run.trainer import stored_config

    try:
        require_matplotlib()
    except MissingPlotLibrary as exc:
        typer.echo(f"rntn: {exc}", err=True)
        raise typer.Exit(EXIT_BAD_INPUT)
    stored_config(run_dir)  # a clear error if this is not a run directory
    slices = slices_from_options(slice_files, slice_options)
    newest, damaged = newest_valid_checkpoint(run_dir)
    for _, exc in damaged:
        typer.echo(f"warning: {exc}; using the previous checkpoint", err=True)
    if newest is None:
        raise typer.BadParameter(f"{run_dir}: no valid checkpoint to report on", param_hint="RUN_DIR")
    out_dir = out_dir or run_dir / "report"
    out_dir.mkdir(parents=True, exist_ok=True)
    config = newest.config
    best_name = newest.state.get("best_checkpoint")
    best_step = int(best_name[len("checkpoint-step"):-3]) if best_name else None
    written = [plot_learning_curves(newest.metrics, out_dir / "learning_curves.png",
                                    f"{config.model} d={config.dim}: {run_dir.name}", best_step, config.best_metric)]
    best_path = run_dir / best_name if best_name and (run_dir / best_name).exists() else Path(newest.path)
    book = treebank or (Path(config.dev_file) if config.dev_file else None)
    if book is None:
        typer.echo("no dev file in the run and no --treebank: confusion matrices and slices skipped", err=True)
    else:
        best = load_checkpoint(best_path)
        try:
            detail = detail_report(best, str(book), binarise=config.binarise, slices=slices)
        except ValueError as exc:  # a root-class slice naming a class the model does not have
            raise typer.BadParameter(str(exc), param_hint="--slice/--slices") from None
        confusions = {f"roots: fine-grained accuracy {detail['scores']['fine_root']:.3f}":
                      np.array(detail["roots"]["confusion"]),
                      f"all nodes: fine-grained accuracy {detail['scores']['fine_all']:.3f}":
                      np.array(detail["all_nodes"]["confusion"])}
        written.append(plot_confusions(confusions, config.names_of_classes(), out_dir / "confusion_best.png",
                                       f"best checkpoint {best_path.name} on {book.name}"))
        if slices:
            rows = [{"slice": "whole treebank", "nodes": detail["scores"]["labelled_nodes"], **detail["scores"]}]
            rows += [{"slice": part["slice"], "nodes": part["scores"]["labelled_nodes"], **part["scores"]}
                     for part in detail["slices"]]
            written.append(plot_slice_scores(rows, out_dir / "slice_scores.png",
                                             f"best checkpoint {best_path.name} on {book.name}: scores per slice",
                                             scores=("fine_all", "fine_root", "binary_all", "macro_f1_all")))
    for path in written:
        typer.echo(f"wrote {path}")
