"""`rntn report RUN_DIR`: PNG figures of a run (needs the optional matplotlib extra)."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import numpy as np
import typer

from rntn_engine.cli.app_exit import EXIT_BAD_INPUT


def report(
    run_dir: Annotated[Path, typer.Argument(help="Run directory made by `rntn train`.")],
    out_dir: Annotated[Optional[Path], typer.Option("--out-dir", help="Where to write the PNG files. [default: RUN_DIR/report]")] = None,
    treebank: Annotated[Optional[Path], typer.Option("--treebank", "-t", help="Treebank for the confusion matrix. [default: the run's dev file]")] = None,
) -> None:
    """Write learning curves (training and dev loss, dev scores, the best checkpoint marked) and the
    confusion matrices of the best checkpoint (roots and all nodes, with the run's class names) as
    PNG files. Needs matplotlib: pip install 'rntn_engine[plot]'."""
    from rntn_engine.run.checkpoint_evaluation import detail_report
    from rntn_engine.run.checkpoints import load_checkpoint, newest_valid_checkpoint
    from rntn_engine.run.report_figures import (
        MissingPlotLibrary,
        plot_confusions,
        plot_learning_curves,
        require_matplotlib,
    )
    from rntn_engine.run.trainer import stored_config

    try:
        require_matplotlib()
    except MissingPlotLibrary as exc:
        typer.echo(f"rntn: {exc}", err=True)
        raise typer.Exit(EXIT_BAD_INPUT)
    stored_config(run_dir)  # a clear error if this is not a run directory
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
        typer.echo("no dev file in the run and no --treebank: confusion matrices skipped", err=True)
    else:
        best = load_checkpoint(best_path)
        detail = detail_report(best, str(book), binarise=config.binarise)
        confusions = {f"roots: fine-grained accuracy {detail['scores']['fine_root']:.3f}":
                      np.array(detail["roots"]["confusion"]),
                      f"all nodes: fine-grained accuracy {detail['scores']['fine_all']:.3f}":
                      np.array(detail["all_nodes"]["confusion"])}
        written.append(plot_confusions(confusions, config.names_of_classes(), out_dir / "confusion_best.png",
                                       f"best checkpoint {best_path.name} on {book.name}"))
    for path in written:
        typer.echo(f"wrote {path}")
