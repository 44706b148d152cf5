"""Options that several commands share, each declared once here.

Settings of a training run are declared in run/run_config.py and turned into options
by cli/config_options.py; these are the per-invocation options of the other commands.
"""

from __future__ import annotations

from typing import Annotated, Optional

import typer

ProgressOption = Annotated[
    Optional[bool],
    typer.Option("--progress/--no-progress", show_default=False,
                 help="Show a progress bar. [default: only when standard error is a terminal]"),
]
JsonOption = Annotated[bool, typer.Option("--json", help="Print JSON instead of tables.")]
ThreadsOption = Annotated[
    int, typer.Option("--threads", min=1, help="Worker threads; the results do not depend on it.")
]
JobsOption = Annotated[
    Optional[int],
    typer.Option("--jobs", "-j", min=1, show_default=False, help="Worker processes. [default: all cores]"),
]
