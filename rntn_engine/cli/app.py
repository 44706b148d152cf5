"""The ``rntn`` command: joins one typer command per module and maps errors to exit codes.

Exit codes (documented in README):
    0  success
    1  bad input or failed check (one line on stderr: FILE:LINE:COL: what was expected)
    2  bad usage (unknown option, missing argument, invalid value)
    75 training stopped cleanly by a signal or --time-limit, with a checkpoint: resumable
    130 interrupted by the user before anything resumable existed
"""

from __future__ import annotations

import sys
from typing import Annotated, Optional

import typer

try:  # recent typer releases vendor click as typer._click; older ones use click itself
    from typer._click import exceptions as click_exceptions
except ImportError:  # pragma: no cover
    from click import exceptions as click_exceptions

from rntn_engine import __version__
from rntn_engine.cli.app_exit import EXIT_BAD_INPUT, EXIT_INTERRUPTED, EXIT_OK, EXIT_USAGE
from rntn_engine.data.errors import InputError
from rntn_engine.run.run_config import ConfigError
from rntn_engine.run.run_errors import RunDirectoryError, TrainingError

app = typer.Typer(
    name="rntn",
    help="Train and apply recursive tree models (RNN, MV-RNN, RNTN) over phrase-labelled treebanks, on CPUs.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
)


def _version_callback(value: bool) -> None:
    if value:
        typer.echo(f"rntn_engine {__version__}")
        raise typer.Exit()


@app.callback()
def _root(
    version: Annotated[
        Optional[bool],
        typer.Option("--version", callback=_version_callback, is_eager=True, help="Print the version and exit."),
    ] = None,
) -> None:
    """Train and apply recursive tree models (RNN, MV-RNN, RNTN) over phrase-labelled treebanks, on CPUs."""


def _register_commands() -> None:
    # Each command lives in its own module; importing them here keeps `app` the one entry point.
    from rntn_engine.cli import stats_command

    app.command("stats")(stats_command.stats)
    from rntn_engine.cli import (
        convert_command,
        evaluate_command,
        export_vectors_command,
        gradcheck_command,
        inspect_command,
        predict_command,
        report_command,
        resume_command,
        status_command,
        train_command,
    )

    app.command("train")(train_command.train)
    app.command("resume")(resume_command.resume)
    app.command("status")(status_command.status)
    app.command("inspect")(inspect_command.inspect)
    app.command("evaluate")(evaluate_command.evaluate)
    app.command("predict")(predict_command.predict)
    app.command("report")(report_command.report)
    app.command("export-vectors")(export_vectors_command.export_vectors)
    app.command("gradcheck")(gradcheck_command.gradcheck)
    app.command("convert-labelled-sentences")(convert_command.convert_labelled_sentences)


_register_commands()


def main(argv: list[str] | None = None) -> int:
    """Console entry point: run the app, turning every known error into one line and an exit code."""
    command = typer.main.get_command(app)
    args = sys.argv[1:] if argv is None else argv
    try:
        result = command.main(args=args, prog_name="rntn", standalone_mode=False)
    except click_exceptions.NoArgsIsHelpError as exc:  # `rntn` alone: help, exit 2 like other usage errors
        typer.echo(exc.ctx.get_help() if exc.ctx else str(exc))
        return EXIT_USAGE
    except click_exceptions.UsageError as exc:
        ctx = exc.ctx
        where = f"rntn {ctx.info_name}" if ctx is not None and ctx.parent is not None else "rntn"
        typer.echo(f"rntn: error: {exc.format_message()} (see '{where} --help')", err=True)
        return EXIT_USAGE
    except ConfigError as exc:
        typer.echo(f"rntn: error: {exc}", err=True)
        return EXIT_USAGE
    except (InputError, TrainingError, RunDirectoryError) as exc:
        typer.echo(str(exc), err=True)
        return EXIT_BAD_INPUT
    except typer.Exit as exc:
        return int(getattr(exc, "exit_code", 0) or 0)
    except (typer.Abort, KeyboardInterrupt):
        typer.echo("rntn: interrupted", err=True)
        return EXIT_INTERRUPTED
    except click_exceptions.ClickException as exc:
        typer.echo(f"rntn: error: {exc.format_message()}", err=True)
        return exc.exit_code
    return result if isinstance(result, int) else EXIT_OK


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
