"""The resolved configuration of a training run: every setting declared once.

Each field of :class:`TrainConfig` is one setting: its type (the annotation), its
default, and in its :func:`setting` metadata the help text, the allowed choices or
range, and whether ``rntn resume`` may change it. Everything else is derived from this
one declaration: the options of ``rntn train`` and ``rntn resume`` (cli/config_options.py),
the TOML loader and type checks (:func:`config_from_mapping`), the per-field validation
(:meth:`TrainConfig.validate`; rules that tie two settings together follow it), and the
list of settings a resume may change (:data:`RESUME_CHANGEABLE`).

Sources, later ones win: the defaults below, a TOML file (``--config FILE``, keys named
exactly as the fields, at top level or under a ``[train]`` table), then command-line
flags. The resolved configuration is saved with every model file and checkpoint.
Kinds: "shape" settings fix the size or meaning of the parameters; "result" settings
change the numbers a run produces; "run" settings change neither (a resume may change
some of them).
"""

from __future__ import annotations

import dataclasses
import math
import sys
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

from rntn_engine.model.parameters import DTYPES, L2_GROUPS, MODELS
from rntn_engine.run.class_weights import class_weights_problem
from rntn_engine.run.stop_signals import parse_duration

# dev scores a run can select its best checkpoint by; all higher-is-better but those in LOWER_IS_BETTER
BEST_METRICS = ("dev_fine_root", "dev_fine_all", "dev_binary_root", "dev_binary_all", "dev_macro_f1_root",
                "dev_macro_f1_all", "dev_loss")
LOWER_IS_BETTER = ("dev_loss",)
FINAL_MODELS = ("best", "last")  # what model.h5 holds when a run ends
# what the L2 term on word vectors pulls toward: zero, or each vector's value at the start of the run
L2_WORDS_TOWARD = ("zero", "start")
VECTOR_FORMATS = ("auto", "glove", "word2vec-text", "word2vec-binary")
# d when neither --dim nor a --vectors file gives it. This and the defaults of batch_size, lr and the L2
# strengths below were chosen by scripts/sweep_defaults.py (README "How the defaults were chosen").
DIM_WITHOUT_VECTORS = 16


class ConfigError(ValueError):
    """A configuration value or file that is not acceptable; the message says which and why."""


@dataclass(frozen=True)
class SettingInfo:
    """What the one declaration of a setting says besides its type and default."""

    help: str  # one sentence for --help
    kind: str  # "shape", "result" or "run" (module docstring)
    flag: str = ""  # command-line spelling ("" = --name-with-dashes; booleans: "--on/--off")
    choices: tuple = ()  # allowed values ((): any)
    minimum: float | None = None  # smallest allowed value (inclusive)
    above: float | None = None  # the value must be strictly greater than this
    maximum: float | None = None  # largest allowed value (inclusive)
    resume: bool = False  # `rntn resume` may change it
    shown_default: str = ""  # how --help shows the default when the value itself would mislead


def setting(default: Any, help: str, kind: str, **info: Any) -> Any:
    """A dataclass field carrying its :class:`SettingInfo`."""
    return field(default=default, metadata={"setting": SettingInfo(help, kind, **info)})


@dataclass
class TrainConfig:
    """Every setting of a training run (one declaration each: see the module docstring)."""

    train_file: str = setting("", "Training treebank: bracketed trees, one per line (stored as an absolute path; "
                              "a resume accepts its new location if the file moved, same content only).", "run",
                              resume=True)
    dev_file: str = setting("", "Treebank scored after every epoch (\"\" = none; a resume accepts its new "
                            "location, same content only).", "run", resume=True)
    model: str = setting("rntn", "Model: rnn (matrix composition), rntn (tensor + matrix) or mvrnn (a matrix per "
                         "word and phrase).", "shape", choices=MODELS)
    dim: int = setting(0, "Size d of word and phrase vectors.", "shape", minimum=0,
                       shown_default=f"the --vectors file's, else {DIM_WITHOUT_VECTORS}")
    num_classes: int = setting(5, "Number of classes C; labels are 0..C-1.", "shape", minimum=2)
    class_names: str = setting("", "Names of the classes 0..C-1 for tables and figures, separated by commas "
                               "(\"\" = the class numbers).", "run", resume=True)
    epochs: int = setting(20, "Passes over the training trees.", "run", minimum=0, resume=True)
    batch_size: int = setting(16, "Trees per minibatch.", "result", minimum=1)
    lr: float = setting(0.02, "AdaGrad learning rate.", "result", above=0.0)
    adagrad_eps: float = setting(1e-6, "AdaGrad epsilon in lr * g / (sqrt(G) + eps).", "result", above=0.0)
    l2_words: float = setting(L2_GROUPS["words"].default, L2_GROUPS["words"].help, "result",
                              minimum=0.0)
    l2_words_toward: str = setting("zero", "What L2 on word vectors pulls toward: zero, or start (each vector's "
                                   "starting value, e.g. its pretrained one).", "result", choices=L2_WORDS_TOWARD)
    l2_compose: float = setting(L2_GROUPS["compose"].default, L2_GROUPS["compose"].help, "result",
                                minimum=0.0)
    l2_tensor: float = setting(L2_GROUPS["tensor"].default, L2_GROUPS["tensor"].help, "result",
                               minimum=0.0)
    l2_classifier: float = setting(L2_GROUPS["classifier"].default, L2_GROUPS["classifier"].help, "result",
                                   minimum=0.0)
    class_weights: str = setting("none", "Weights of the classes in the training cross-entropy: none (all 1), "
                                 "balanced (n / (C * n_c) from the training nodes' labels: rare classes weigh "
                                 "more), or one number per class separated by commas; resolved once and stored "
                                 "with the run.", "result")
    l2_word_matrices: float = setting(L2_GROUPS["word_matrices"].default, L2_GROUPS["word_matrices"].help, "result",
                                      minimum=0.0)
    max_memory_gb: float = setting(8.0, "Refuse a model whose parameters, AdaGrad sums and gradient need more GiB "
                                   "(0: no limit).", "run", minimum=0.0, resume=True)
    min_count: int = setting(2, "Training count a word needs for a vector of its own; rarer words share the "
                             "unknown-word vector.", "shape", minimum=1)
    lowercase: bool = setting(False, "Fold words to lower case.", "shape", flag="--lowercase/--keep-case")
    binarise: str = setting("right", "Nodes with more than two children: right (right-factored), left, or strict "
                            "(refuse).", "shape", choices=("right", "left", "strict"))
    seed: int = setting(0, "Seed of initialisation and of every epoch's shuffle.", "result")
    dtype: str = setting("float32", "Arithmetic: float32 or float64.", "result", choices=tuple(DTYPES))
    grad_chunks: int = setting(2, "Fixed number of pieces each minibatch is split into; parallelism up to this "
                               "many threads.", "result", minimum=1)
    threads: int = setting(1, "Threads that run minibatch chunks; results do not depend on it.", "run", minimum=1,
                           resume=True)
    vectors_file: str = setting("", "Start word vectors from this file: GloVe text, word2vec text or binary, plain "
                                "or gzip (detected).", "shape", flag="--vectors")
    vectors_format: str = setting("auto", "Force the vector file format.", "run", choices=VECTOR_FORMATS)
    vectors_encoding_errors: str = setting("strict", "Undecodable bytes in the vector file: strict (error with "
                                           "location) or replace.", "run", choices=("strict", "replace"))
    freeze_vectors: bool = setting(False, "Keep the (pretrained) word vectors fixed during training.", "result",
                                   flag="--freeze-vectors/--train-vectors")
    extend_vocabulary: int = setting(0, "Add the vector file's first N words (its most frequent) to the "
                                     "vocabulary.", "shape", minimum=0)
    run_dir: str = setting("", "Output directory.", "run", shown_default="checkpoints/<model>-d<dim>-seed<seed>")
    checkpoint_every_steps: int = setting(0, "Also checkpoint every N steps (0: off).", "run", minimum=0,
                                          resume=True)
    checkpoint_every_minutes: float = setting(10.0, "Also checkpoint when this many minutes passed since the last "
                                              "one (0: off).", "run", minimum=0.0, resume=True)
    keep_checkpoints: int = setting(3, "Newest checkpoints kept; the best one is kept as well.", "run", minimum=1,
                                    resume=True)
    best_metric: str = setting("dev_fine_root", "Dev score that picks the best checkpoint (kept as best.h5) and "
                               "drives early stopping; dev_loss is the lowest, the others the highest.", "run",
                               choices=BEST_METRICS)
    final_model: str = setting("best", "What model.h5 holds when the run ends: the best checkpoint by "
                               "--best-metric, or the last parameters (without a dev file: always the last).",
                               "run", choices=FINAL_MODELS, resume=True)
    patience: int = setting(0, "Stop after N evaluations without a better --best-metric (0: never).", "run",
                            minimum=0, resume=True)
    time_limit: str = setting("", "Stop cleanly with a checkpoint after this much wall time per session, e.g. 23h, "
                              "90m, 1h30m (exit code 75, resumable; 0 or \"\" = none).", "run", resume=True)

    def validate(self, require_data: bool = True) -> "TrainConfig":
        """Check every setting against its declaration, then the rules that tie settings together."""
        for f in fields(self):
            problem = value_problem(f, getattr(self, f.name))
            if problem:
                raise ConfigError(problem)
        if self.time_limit:
            try:
                parse_duration(self.time_limit)
            except ValueError as exc:
                raise ConfigError(f"--time-limit: {exc}") from None
        if require_data and not self.train_file:
            raise ConfigError("a training treebank is required (--train-file)")
        if self.class_names and len(self.names_of_classes()) != self.num_classes:
            raise ConfigError(f"--class-names gives {len(self.names_of_classes())} names for {self.num_classes} "
                              f"classes: give one name per class, separated by commas")
        if self.class_names and (len(set(self.names_of_classes())) != self.num_classes
                                 or not all(self.names_of_classes())):
            raise ConfigError("--class-names: every class needs a name of its own (a name is repeated or empty)")
        problem = class_weights_problem(self.class_weights, self.num_classes)
        if problem:
            raise ConfigError(problem)
        if (self.extend_vocabulary or self.freeze_vectors) and not self.vectors_file:
            raise ConfigError("--extend-vocabulary and --freeze-vectors need --vectors")
        return self

    def names_of_classes(self) -> list[str]:
        """The name of each class 0..C-1: from class_names, else the class numbers."""
        if not self.class_names:
            return [str(c) for c in range(self.num_classes)]
        return [name.strip() for name in self.class_names.split(",")]

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


def info_of(f: dataclasses.Field) -> SettingInfo:
    return f.metadata["setting"]


def flag_of(f: dataclasses.Field) -> str:
    """The primary command-line spelling of a setting (``--name-with-dashes`` unless declared)."""
    return (info_of(f).flag or "--" + f.name.replace("_", "-")).split("/")[0]


def value_problem(f: dataclasses.Field, value: Any) -> str:
    """Why ``value`` is not allowed for setting ``f`` ("" when it is)."""
    info = info_of(f)
    flag = flag_of(f)
    if info.choices and value not in info.choices:
        return f"{flag} must be one of {', '.join(map(str, info.choices))}, got {value!r}"
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        if isinstance(value, float) and not math.isfinite(value):
            return f"{flag} must be a finite number, got {value!r}"
        if info.minimum is not None and value < info.minimum:
            return f"{flag} must be at least {info.minimum:g}, got {value!r}"
        if info.above is not None and value <= info.above:
            return f"{flag} must be greater than {info.above:g}, got {value!r}"
        if info.maximum is not None and value > info.maximum:
            return f"{flag} must be at most {info.maximum:g}, got {value!r}"
    return ""


# settings `rntn resume` may change: none of them changes the numbers of the steps already taken
RESUME_CHANGEABLE = tuple(f.name for f in fields(TrainConfig) if info_of(f).resume)


def config_differences(a: TrainConfig, b: TrainConfig, ignore: tuple[str, ...] = ()) -> list[str]:
    """Names of the settings whose values differ between ``a`` and ``b``."""
    return [f.name for f in fields(TrainConfig) if f.name not in ignore and getattr(a, f.name) != getattr(b, f.name)]


def config_from_mapping(values: dict[str, Any], base: TrainConfig | None = None, source: str = "") -> TrainConfig:
    """A copy of ``base`` with ``values`` applied, type-checked field by field against the declaration."""
    config = dataclasses.replace(base) if base is not None else TrainConfig()
    known = {f.name: f for f in fields(TrainConfig)}
    where = f"{source}: " if source else ""
    for key, value in values.items():
        if key not in known:
            raise ConfigError(f"{where}unknown setting {key!r} (known: {', '.join(known)})")
        kind = known[key].type if isinstance(known[key].type, type) else type(known[key].default)
        if kind is bool:
            ok = isinstance(value, bool)
        elif kind is int:
            ok = isinstance(value, int) and not isinstance(value, bool)
        elif kind is float:
            ok = isinstance(value, (int, float)) and not isinstance(value, bool)
            value = float(value) if ok else value
        else:
            ok = isinstance(value, str)
        if not ok:
            raise ConfigError(f"{where}setting {key!r} expects {kind.__name__}, got {value!r}")
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
