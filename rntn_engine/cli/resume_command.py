"""`rntn resume RUN_DIR`: continue a stopped or killed run exactly where it stopped."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer


def resume(
    run_dir: Annotated[Path, typer.Argument(help="Run directory made by `rntn train`.")],
    epochs: Annotated[Optional[int], typer.Option("--epochs", help="Raise (or lower) the total number of epochs.")] = None,
    time_limit: Annotated[Optional[str], typer.Option("--time-limit", help="Wall-clock budget of each session, e.g. 23h (exit code 75 when reached); 0 removes the stored one.")] = None,
    threads: Annotated[Optional[int], typer.Option("--threads", help="Worker threads (never changes results).")] = None,
    checkpoint_every_steps: Annotated[Optional[int], typer.Option("--checkpoint-every-steps", help="Also checkpoint every N steps (0: off).")] = None,
    checkpoint_every_minutes: Annotated[Optional[float], typer.Option("--checkpoint-every-minutes", help="Also checkpoint every this many minutes (0: off).")] = None,
    keep_checkpoints: Annotated[Optional[int], typer.Option("--keep-checkpoints", help="Newest checkpoints kept, besides the best.")] = None,
    patience: Annotated[Optional[int], typer.Option("--patience", help="Early-stopping patience in evaluations (0: never).")] = None,
    allow_changed_data: Annotated[bool, typer.Option("--allow-changed-data", help="Continue even though a data file's content changed since the checkpoint.")] = False,
    progress: Annotated[Optional[bool], typer.Option("--progress/--no-progress", help="Progress bar. [default: only on a terminal]")] = None,
) -> None:
    """Continue a run from its newest valid checkpoint, bit-identically to an uninterrupted run.

    Uses the configuration stored with the run; only the options above may change (none of them
    changes the numbers of the steps taken). A damaged newest checkpoint is reported and the
    previous good one used; a run killed before its first checkpoint starts from the beginning;
    a finished run is left as it is. Exit code 75 again means stopped cleanly and resumable.
    """
    from rntn_engine.run.trainer import resume_training

    overrides = {"epochs": epochs, "time_limit": time_limit, "threads": threads,
                 "checkpoint_every_steps": checkpoint_every_steps,
                 "checkpoint_every_minutes": checkpoint_every_minutes, "keep_checkpoints": keep_checkpoints,
                 "patience": patience}
    overrides = {k: v for k, v in overrides.items() if v is not None}
    code = resume_training(run_dir, overrides, echo=typer.echo, show_progress=progress,
                           allow_changed_data=allow_changed_data)
    if code:
        raise typer.Exit(code)
