"""The resolved configuration of a training run: one typed dataclass, one comment per field.

Sources, later ones win: the defaults below, a TOML file (``--config FILE``, keys
named exactly as the fields, either at top level or under a ``[train]`` table),
then command-line flags. The resolved configuration is saved with every model
file and checkpoint. Fields marked (shape) fix the size or meaning of the
parameters and may never change on resume; fields marked (result) change the
numbers a run produces.
"""

from __future__ import annotations

import dataclasses
import sys
from dataclasses import dataclass, fields
from pathlib import Path
from typing import Any

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

from rntn_engine.model.parameters import DTYPES, MODELS
from rntn_engine.run.stop_signals import parse_duration

# dev scores a run can select its best checkpoint by (all higher-is-better)
BEST_METRICS = ("dev_fine_root", "dev_fine_all")

# what the L2 term on word vectors pulls toward: zero, or each vector's value at the start of the run
L2_WORDS_TOWARD = ("zero", "start")

# settings `rntn resume` may change: none of them changes the numbers of the steps already taken
RESUME_OVERRIDABLE = ("epochs", "time_limit", "threads", "checkpoint_every_steps", "checkpoint_every_minutes",
                      "keep_checkpoints", "patience", "max_memory_gb")


class ConfigError(ValueError):
    """A configuration value or file that is not acceptable; the message says which and why."""


@dataclass
class TrainConfig:
    """Every setting of a training run."""

    train_file: str = ""  # treebank to train on (bracketed trees, one per line)
    dev_file: str = ""  # treebank scored after every epoch ("" = none)
    model: str = "rntn"  # (shape) "rnn", "rntn" or "mvrnn"
    dim: int = 0  # (shape) d, size of word and phrase vectors; 0 = the vector file's, or 25 without one
    num_classes: int = 5  # (shape) C; labels are 0..C-1
    epochs: int = 20  # passes over the training trees
    batch_size: int = 27  # trees per minibatch (25-30 is common practice)
    lr: float = 0.01  # (result) AdaGrad learning rate
    adagrad_eps: float = 1e-6  # (result) AdaGrad epsilon in lr * g / (sqrt(G) + eps)
    adagrad_reset_epochs: int = 0  # (result) forget AdaGrad sums every this many epochs (0 = never)
    l2_words: float = 1e-4  # (result) L2 strength on word vectors L (only rows a minibatch touches)
    l2_words_toward: str = "zero"  # (result) what L2 pulls word vectors toward: zero, or start (their starting values)
    l2_compose: float = 1e-3  # (result) L2 strength on composition matrix W
    l2_tensor: float = 1e-3  # (result) L2 strength on composition tensor V
    l2_classifier: float = 1e-4  # (result) L2 strength on classifier weights Ws
    l2_word_matrices: float = 1e-4  # (result) L2 strength on word matrices LM (mvrnn)
    max_memory_gb: float = 8.0  # refuse a model whose parameters + gradient + AdaGrad sums exceed this (0 = no limit)
    min_count: int = 2  # (shape) training count a word needs for its own vector; rarer -> unknown
    lowercase: bool = False  # (shape) fold words to lower case
    binarise: str = "right"  # how n-ary input nodes are binarised: right, left or strict (refuse)
    seed: int = 0  # (result) seeds initialisation and the shuffle of every epoch
    dtype: str = "float32"  # (result) float32 or float64 arithmetic
    grad_chunks: int = 2  # (result) fixed pieces each minibatch is split into; results do not depend on --threads
    threads: int = 1  # worker threads running chunks; never changes results
    vectors_file: str = ""  # pretrained word vectors (GloVe text, word2vec text or binary, plain or gzip)
    vectors_format: str = "auto"  # auto, glove, word2vec-text or word2vec-binary
    vectors_encoding_errors: str = "strict"  # undecodable bytes in the vector file: strict (error) or replace
    freeze_vectors: bool = False  # (result) keep the word vectors L fixed during training
    extend_vocabulary: int = 0  # (shape) add the vector file's first N words to the vocabulary
    run_dir: str = ""  # output directory ("" = checkpoints/<model>-d<dim>-seed<seed>)
    checkpoint_every_steps: int = 0  # also checkpoint every this many steps (0 = only by time and epoch)
    checkpoint_every_minutes: float = 10.0  # also checkpoint when this much wall time passed since the last
    keep_checkpoints: int = 3  # newest checkpoints kept (the best one is kept in addition)
    best_metric: str = "dev_fine_root"  # dev score that picks the best checkpoint and drives early stopping
    patience: int = 0  # stop after this many evaluations without a better best_metric (0 = never)
    time_limit: str = ""  # wall-clock budget of one invocation, e.g. 23h or 1h30m ("" = none)

    def validate(self, require_data: bool = True) -> "TrainConfig":
        def need(ok: bool, message: str) -> None:
            if not ok:
                raise ConfigError(message)

        need(bool(self.train_file) or not require_data, "a training treebank is required (--train-file)")
        need(self.model in MODELS, f"--model must be one of {', '.join(MODELS)}, got {self.model!r}")
        need(self.dim >= 0, f"--dim must be at least 1, got {self.dim}")
        need(self.vectors_format in ("auto", "glove", "word2vec-text", "word2vec-binary"),
             "--vectors-format must be auto, glove, word2vec-text or word2vec-binary")
        need(self.vectors_encoding_errors in ("strict", "replace"), "--vectors-encoding-errors must be strict or replace")
        need(self.extend_vocabulary >= 0, "--extend-vocabulary must be 0 or more")
        need(not (self.extend_vocabulary or self.freeze_vectors) or bool(self.vectors_file),
             "--extend-vocabulary and --freeze-vectors need --vectors")
        need(self.num_classes >= 2, f"--num-classes must be at least 2, got {self.num_classes}")
        need(self.epochs >= 0, f"--epochs must be 0 or more, got {self.epochs}")
        need(self.batch_size >= 1, f"--batch-size must be at least 1, got {self.batch_size}")
        need(self.lr > 0, f"--lr must be positive, got {self.lr}")
        need(self.adagrad_eps > 0, f"adagrad_eps must be positive, got {self.adagrad_eps}")
        need(self.adagrad_reset_epochs >= 0, "adagrad_reset_epochs must be 0 or more")
        need(self.max_memory_gb >= 0, "--max-memory-gb must be 0 or more")
        need(self.l2_words_toward in L2_WORDS_TOWARD,
             f"--l2-words-toward must be one of {', '.join(L2_WORDS_TOWARD)}, got {self.l2_words_toward!r}")
        for name in ("l2_words", "l2_compose", "l2_tensor", "l2_classifier", "l2_word_matrices"):
            need(getattr(self, name) >= 0, f"{name} must be 0 or more, got {getattr(self, name)}")
        need(self.min_count >= 1, f"--min-count must be at least 1, got {self.min_count}")
        need(self.binarise in ("right", "left", "strict"), "--binarise must be right, left or strict")
        need(self.dtype in DTYPES, f"--dtype must be one of {', '.join(DTYPES)}, got {self.dtype!r}")
        need(self.grad_chunks >= 1, f"grad_chunks must be at least 1, got {self.grad_chunks}")
        need(self.threads >= 1, f"--threads must be at least 1, got {self.threads}")
        need(self.checkpoint_every_steps >= 0, "--checkpoint-every-steps must be 0 or more")
        need(self.checkpoint_every_minutes >= 0, "--checkpoint-every-minutes must be 0 or more")
        need(self.keep_checkpoints >= 1, "--keep-checkpoints must be at least 1")
        need(self.best_metric in BEST_METRICS, f"--best-metric must be one of {', '.join(BEST_METRICS)}")
        need(self.patience >= 0, "--patience must be 0 or more")
        if self.time_limit:
            try:
                parse_duration(self.time_limit)
            except ValueError as exc:
                raise ConfigError(f"--time-limit: {exc}") from None
        return self

    def resolved_run_dir(self) -> Path:
        if self.run_dir:
            return Path(self.run_dir)
        return Path("checkpoints") / f"{self.model}-d{self.dim or 'auto'}-seed{self.seed}"

    def to_dict(self) -> dict[str, Any]:
        return dataclasses.asdict(self)

    def to_toml(self) -> str:
        lines = ["[train]"]
        for f in fields(self):
            v = getattr(self, f.name)
            if isinstance(v, bool):
                text = "true" if v else "false"
            elif isinstance(v, str):
                text = '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
            else:
                text = repr(v)
            lines.append(f"{f.name} = {text}")
        return "\n".join(lines) + "\n"


def config_differences(a: TrainConfig, b: TrainConfig, ignore: tuple[str, ...] = ()) -> list[str]:
    """Names of the settings whose values differ between ``a`` and ``b``."""
    return [f.name for f in fields(TrainConfig) if f.name not in ignore and getattr(a, f.name) != getattr(b, f.name)]


def config_from_mapping(values: dict[str, Any], base: TrainConfig | None = None, source: str = "") -> TrainConfig:
    """A copy of ``base`` with ``values`` applied, type-checked field by field."""
    config = dataclasses.replace(base) if base is not None else TrainConfig()
    known = {f.name: f for f in fields(TrainConfig)}
    where = f"{source}: " if source else ""
    for key, value in values.items():
        if key not in known:
            raise ConfigError(f"{where}unknown setting {key!r} (known: {', '.join(known)})")
        default = getattr(TrainConfig(), key)
        if isinstance(default, bool):
            ok = isinstance(value, bool)
        elif isinstance(default, int):
            ok = isinstance(value, int) and not isinstance(value, bool)
        elif isinstance(default, float):
            ok = isinstance(value, (int, float)) and not isinstance(value, bool)
            value = float(value) if ok else value
        else:
            ok = isinstance(value, str)
        if not ok:
            raise ConfigError(f"{where}setting {key!r} expects {type(default).__name__}, got {value!r}")
        setattr(config, key, value)
    return config


def load_config_file(path: str | Path) -> dict[str, Any]:
    """The settings of a TOML file (top level, or the ``[train]`` table)."""
    path = Path(path)
    try:
        with path.open("rb") as fh:
            data = tomllib.load(fh)
    except FileNotFoundError:
        raise ConfigError(f"{path}: no such configuration file") from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML: {exc}") from None
    if "train" in data and isinstance(data["train"], dict):
        data = data["train"]
    return data
