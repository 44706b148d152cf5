"""`rntn resume RUN_DIR`: continue a stopped or killed run exactly where it stopped.

Its options are the settings a resume may change (declared resume=True in run/run_config.py).
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Any, Optional

import typer

from rntn_engine.cli.config_options import command_with_settings, keyword
from rntn_engine.cli.shared_options import ProgressOption
from rntn_engine.run.run_config import RESUME_CHANGEABLE


def _resume(given: dict[str, Any], run_dir: Path, allow_changed_data: bool, progress: Optional[bool]) -> None:
    """Continue a run from its newest valid checkpoint, bit-identically to an uninterrupted run.

    Uses the configuration stored with the run; only the options below may change (none of them
    changes the numbers of the steps taken). A damaged newest checkpoint is reported and the
    previous good one used; a run killed before its first checkpoint starts from the beginning;
    a finished run is left as it is. Exit code 75 again means stopped cleanly and resumable.
    """
    from rntn_engine.run.trainer import resume_training

    code = resume_training(run_dir, given, echo=typer.echo, show_progress=progress,
                           allow_changed_data=allow_changed_data)
    if code:
        raise typer.Exit(code)


resume = command_with_settings(
    _resume,
    RESUME_CHANGEABLE,
    before=[keyword("run_dir", Annotated[Path, typer.Argument(metavar="RUN_DIR", help="Run directory made by `rntn train`.")])],
    after=[
        keyword("allow_changed_data", Annotated[bool, typer.Option(
            "--allow-changed-data", help="Continue even though a data file's content changed since the checkpoint.")],
            False),
        keyword("progress", ProgressOption, None),
    ],
    default_label="the run's",
)
