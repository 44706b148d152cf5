"""Each training setting is declared once (run/run_config.py); train, resume, TOML and validation follow it."""

import re
from dataclasses import fields
from pathlib import Path

import pytest

from demo_slices import write_demo_slices
from rntn_engine.cli.app import main
from rntn_engine.run.run_config import (
    RESUME_CHANGEABLE,
    ConfigError,
    TrainConfig,
    config_from_mapping,
    flag_of,
    info_of,
    load_config_file,
)

SETTINGS = list(fields(TrainConfig))


def help_text(capsys, *command):
    assert main([*command, "--help"]) == 0
    return re.sub(r"\s+", " ", capsys.readouterr().out)


def test_train_help_lists_every_setting_with_its_declared_help(capsys):
    text = help_text(capsys, "train")
    for f in SETTINGS:
        assert flag_of(f) in text, f.name
        assert re.sub(r"\s+", " ", info_of(f).help) in text, f.name


def option_flags(command):
    import typer

    from rntn_engine.cli.app import app

    click_command = typer.main.get_command(app).commands[command]
    return {opt for param in click_command.params for opt in param.opts}


def test_resume_offers_exactly_the_settings_a_resume_may_change(capsys):
    flags = option_flags("resume")
    text = help_text(capsys, "resume")
    for f in SETTINGS:
        assert (flag_of(f) in flags) == (f.name in RESUME_CHANGEABLE), f.name
        if f.name in RESUME_CHANGEABLE:
            assert re.sub(r"\s+", " ", info_of(f).help) in text, f.name
    assert set(RESUME_CHANGEABLE) == {"epochs", "max_memory_gb", "threads", "checkpoint_every_steps",
                                      "checkpoint_every_minutes", "keep_checkpoints", "patience", "time_limit",
                                      "train_file", "dev_file", "final_model", "class_names"}
    assert {flag_of(f) for f in SETTINGS} <= option_flags("train")


def valid_other_value(f):
    """A valid value for setting ``f`` that differs from its default."""
    info = info_of(f)
    if info.choices:
        return next(c for c in info.choices if c != f.default)
    if f.name == "time_limit":
        return "5h"
    if isinstance(f.default, bool):
        return not f.default
    if f.name == "class_names":
        return "awful,poor,so-so,good,superb"
    if isinstance(f.default, str):
        return f"some-{f.name}"
    if isinstance(f.default, int):
        return f.default + 1
    return f.default + 1.5


def test_every_resumable_setting_is_accepted_by_resume_and_stored(tmp_path):
    write_demo_slices(tmp_path, 30, 10)
    run_dir = tmp_path / "run"
    assert main(["train", "--train-file", str(tmp_path / "train.trees"), "--dev-file", str(tmp_path / "dev.trees"),
                 "--dim", "3", "--epochs", "1", "--run-dir", str(run_dir), "--no-progress"]) == 0
    stored = config_from_mapping(load_config_file(run_dir / "config.toml"))
    moved = tmp_path / "moved"
    moved.mkdir()
    args = ["resume", str(run_dir), "--no-progress"]
    wanted = {}
    for f in SETTINGS:
        if f.name in ("train_file", "dev_file"):  # the same data at a new place
            new = moved / Path(getattr(stored, f.name)).name
            new.write_bytes(Path(getattr(stored, f.name)).read_bytes())
            wanted[f.name] = str(new)
            args += [flag_of(f), str(new)]
        elif f.name in RESUME_CHANGEABLE:
            wanted[f.name] = valid_other_value(f) if f.name != "epochs" else 2
            args += [flag_of(f), str(wanted[f.name])]
    assert main(args) == 0
    after = config_from_mapping(load_config_file(run_dir / "config.toml"))
    for name, value in wanted.items():
        assert getattr(after, name) == value != getattr(stored, name), name


def test_resume_refuses_a_setting_that_changes_the_numbers(tmp_path, capsys):
    assert main(["resume", str(tmp_path), "--lr", "0.5"]) == 2
    assert "No such option: --lr" in capsys.readouterr().err


@pytest.mark.parametrize("f", [f for f in SETTINGS if info_of(f).choices or info_of(f).minimum is not None
                               or info_of(f).above is not None], ids=lambda f: f.name)
def test_validation_follows_the_declaration(f):
    info = info_of(f)
    if info.choices:
        bad = "no-such-choice"
    elif info.above is not None:
        bad = type(f.default)(info.above)
    else:
        bad = type(f.default)(info.minimum - 1)
    base = {"train_file": "x.trees", "vectors_file": "v.txt"}  # so that no rule tying settings together fires
    config = config_from_mapping({**base, f.name: bad})
    with pytest.raises(ConfigError, match=re.escape(flag_of(f))):
        config.validate()
    config_from_mapping({**base, f.name: valid_other_value(f)}).validate()


def test_toml_round_trip_of_every_setting(tmp_path):
    changed = TrainConfig(**{f.name: valid_other_value(f) for f in SETTINGS})
    path = tmp_path / "c.toml"
    path.write_text(changed.to_toml(), encoding="utf-8")
    assert config_from_mapping(load_config_file(path)) == changed


def test_a_toml_value_of_the_wrong_type_is_named(tmp_path):
    path = tmp_path / "c.toml"
    path.write_text('[train]\nepochs = "many"\n', encoding="utf-8")
    with pytest.raises(ConfigError, match=r"c\.toml: setting 'epochs' expects int, got 'many'"):
        config_from_mapping(load_config_file(path), source=str(path))
