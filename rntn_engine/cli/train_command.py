"""`rntn train`: train a model on a treebank and save it in a run directory.

Every training setting is an option, made from its one declaration in run/run_config.py.
"""

from __future__ import annotations

from dataclasses import fields
from pathlib import Path
from typing import Annotated, Any, Optional

import typer

from rntn_engine.cli.config_options import command_with_settings, keyword
from rntn_engine.cli.shared_options import ProgressOption
from rntn_engine.run.run_config import TrainConfig, config_from_mapping, load_config_file


def _train(given: dict[str, Any], config_file: Optional[Path], print_config: bool, progress: Optional[bool]) -> None:
    """Train an RNN, RNTN or MV-RNN on a phrase-labelled treebank in a new run directory.

    Prints per-epoch loss and dev accuracy; checkpoints by time, steps and epoch. SIGTERM,
    SIGHUP, SIGINT or --time-limit stop it at the next minibatch with a checkpoint and exit
    code 75; `rntn resume RUN_DIR` continues exactly where it stopped.
    """
    from rntn_engine.run.trainer import start_training

    config = TrainConfig()
    if config_file is not None:
        config = config_from_mapping(load_config_file(config_file), config, source=str(config_file))
    config = config_from_mapping(given, config)
    if print_config:
        config.validate(require_data=False)
        typer.echo(config.to_toml(), nl=False)
        return
    config.validate()
    code = start_training(config, echo=typer.echo, show_progress=progress)
    if code:
        raise typer.Exit(code)


train = command_with_settings(
    _train,
    tuple(f.name for f in fields(TrainConfig)),
    before=[],
    after=[
        keyword("config_file", Annotated[Optional[Path], typer.Option(
            "--config", help="TOML file with any of these settings, named as in --print-config (flags override it).")],
            None),
        keyword("print_config", Annotated[bool, typer.Option(
            "--print-config", help="Print the resolved configuration as TOML and exit.")], False),
        keyword("progress", ProgressOption, None),
    ],
)
