"""Command-line options made from the one declaration of each training setting (run/run_config.py).

``rntn train`` offers every setting; ``rntn resume`` offers the settings a resume may
change. Each option's flag, type, help and shown default come from the setting's
declaration, so the two commands, the TOML file and the validation cannot drift apart.
Every option defaults to None here, meaning "not given": the command then keeps the
value from the configuration file, the stored run or the declaration.
"""

from __future__ import annotations

import inspect
from dataclasses import MISSING, fields
from typing import Annotated, Any, Callable, Optional

import typer

from rntn_engine.run.run_config import TrainConfig, info_of


def _shown_default(f) -> str:
    info = info_of(f)
    if info.shown_default:
        return info.shown_default
    value = f.default
    if isinstance(value, bool):
        on, _, off = (info.flag or "").partition("/")
        return (on if value else off).lstrip("-") or str(value).lower()
    if value == "" or value is MISSING:
        return "none"
    return str(value)


def _metavar(f) -> str:
    info = info_of(f)
    if info.choices:
        return "|".join(map(str, info.choices))
    if f.name.endswith("_file") or f.name.endswith("_dir"):
        return "PATH"
    return {int: "N", float: "NUMBER", str: "TEXT", bool: ""}[type(f.default)]


def setting_parameters(names: tuple[str, ...], default_label: str | None = None) -> list[inspect.Parameter]:
    """One keyword parameter (an ``Annotated`` typer option, default None) per named setting.

    ``default_label`` replaces the shown default (``rntn resume`` shows "the run's").
    """
    chosen = [f for f in fields(TrainConfig) if f.name in names]
    params = []
    for f in chosen:
        info = info_of(f)
        kind = type(f.default)
        decls = [info.flag or "--" + f.name.replace("_", "-")]
        choices = f" One of: {', '.join(map(str, info.choices))}." if info.choices else ""
        shown = default_label or _shown_default(f)
        option = typer.Option(*decls, show_default=False, metavar=_metavar(f),
                              help=f"{info.help}{choices} [default: {shown}]")
        params.append(inspect.Parameter(f.name, inspect.Parameter.KEYWORD_ONLY, default=None,
                                        annotation=Annotated[Optional[kind], option]))
    return params


def command_with_settings(body: Callable[..., Any], names: tuple[str, ...], before: list[inspect.Parameter],
                          after: list[inspect.Parameter], default_label: str | None = None) -> Callable[..., Any]:
    """A typer command whose options are ``before`` + the settings ``names`` + ``after``.

    ``body`` receives every parameter by keyword; the settings arrive together as ``given``,
    a dict of those the user set (None values left out).
    """
    setting_names = [p.name for p in setting_parameters(names)]

    def command(**kwargs: Any) -> Any:
        given = {name: kwargs.pop(name) for name in setting_names if kwargs.get(name) is not None}
        for name in setting_names:
            kwargs.pop(name, None)
        return body(given=given, **kwargs)

    parameters = before + setting_parameters(names, default_label) + after
    command.__signature__ = inspect.Signature(parameters)  # type: ignore[attr-defined]
    command.__annotations__ = {p.name: p.annotation for p in parameters}
    command.__doc__ = body.__doc__
    command.__name__ = body.__name__.lstrip("_")
    command.__qualname__ = command.__name__
    return command


def keyword(name: str, annotation: Any, default: Any = inspect.Parameter.empty) -> inspect.Parameter:
    """A keyword parameter for :func:`command_with_settings`'s ``before`` / ``after`` lists."""
    return inspect.Parameter(name, inspect.Parameter.KEYWORD_ONLY, default=default, annotation=annotation)
