"""The ``rntn`` command: joins one typer command per module and maps errors to exit codes.

Exit codes (documented in README):
    0  success
    1  bad input or failed check (one line on stderr: FILE:LINE:COL: what was expected)
    2  bad usage (unknown option, missing argument, invalid value)
    130 interrupted by the user before anything resumable existed
"""

from __future__ import annotations

import sys
from typing import Annotated, Optional

import click
import typer

from rntn_engine import __version__
from rntn_engine.data.errors import InputError

EXIT_OK = 0
EXIT_BAD_INPUT = 1
EXIT_USAGE = 2
EXIT_INTERRUPTED = 130

app = typer.Typer(
    name="rntn",
    help="Train and apply recursive tree models (RNN, RNTN) over phrase-labelled treebanks, on CPUs.",
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
    """Train and apply recursive tree models over phrase-labelled treebanks, on CPUs."""


def _register_commands() -> None:
    # Each command lives in its own module; importing them here keeps `app` the one entry point.
    from rntn_engine.cli import stats_command

    app.command("stats")(stats_command.stats)
    try:
        from rntn_engine.cli import train_command, gradcheck_command
    except ImportError:  # pragma: no cover - engine commands arrive with the engine
        return
    app.command("train")(train_command.train)
    app.command("gradcheck")(gradcheck_command.gradcheck)


_register_commands()


def fail(message: str, code: int = EXIT_BAD_INPUT) -> "typer.Exit":
    """Print one line to stderr and return the Exit to raise."""
    typer.echo(message, err=True)
    return typer.Exit(code)


def main(argv: list[str] | None = None) -> int:
    """Console entry point: run the app, turning every known error into one line and an exit code."""
    command = typer.main.get_command(app)
    args = sys.argv[1:] if argv is None else argv
    try:
        command.main(args=args, prog_name="rntn", standalone_mode=False)
    except click.exceptions.NoArgsIsHelpError as exc:  # `rntn` alone: help, exit 2 like other usage errors
        typer.echo(exc.ctx.get_help() if exc.ctx else str(exc))
        return EXIT_USAGE
    except click.UsageError as exc:
        where = f" (see 'rntn {exc.ctx.info_name} --help')" if exc.ctx and exc.ctx.parent else " (see 'rntn --help')"
        typer.echo(f"rntn: error: {exc.format_message()}{where}", err=True)
        return EXIT_USAGE
    except InputError as exc:
        typer.echo(str(exc), err=True)
        return EXIT_BAD_INPUT
    except click.exceptions.Exit as exc:
        return exc.exit_code
    except click.exceptions.Abort:
        typer.echo("rntn: interrupted", err=True)
        return EXIT_INTERRUPTED
    except click.ClickException as exc:
        typer.echo(f"rntn: error: {exc.format_message()}", err=True)
        return exc.exit_code
    except KeyboardInterrupt:
        typer.echo("rntn: interrupted", err=True)
        return EXIT_INTERRUPTED
    return EXIT_OK


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
