"""Model files and checkpoints: what a run saves, and how it comes back.

A checkpoint (data/checkpoint_file.py gives the HDF5 layout) holds:

    arrays/parameters/<name>     L, W, b, V, Ws, bs (model/parameters.py)
    arrays/adagrad_sums/<name>   AdaGrad's G for each parameter (absent in an exported model)
    words/vocabulary             id -> word, row i of L is words[i]
    records/config               the resolved TrainConfig
    records/vocabulary_options   {"lowercase": ..., "min_count": ...}
    records/state                step, epoch, position in the epoch, ... (run layer)
    records/metrics              list of evaluation records so far
    records/data_hashes          SHA-256 of each data file the run read
    records/versions             library versions that wrote the file

Each of these decides something a resumed run does (tests/test_checkpoint_fields_matter.py),
except two kept for the person reading the file: ``versions`` and the ``min_count`` of
``vocabulary_options`` (the saved word list already is its result). ``metrics`` decide no
number of training; metrics.jsonl, `rntn report` and `rntn status` are rebuilt from them.
"""

from __future__ import annotations

import platform
from dataclasses import dataclass, field
from pathlib import Path

import h5py
import numba
import numpy as np

from rntn_engine import __version__
from rntn_engine.data.checkpoint_file import CheckpointContent, CheckpointError, read_checkpoint, write_checkpoint
from rntn_engine.data.vocabulary import Vocabulary
from rntn_engine.model.parameters import ModelShape, Parameters
from rntn_engine.run.run_config import ConfigError, TrainConfig, config_from_mapping
from rntn_engine.run.run_directory import list_checkpoints

PARAMETER_DESCRIPTIONS = {
    "L": "word vectors, one row per vocabulary id (row 0: unknown word)",
    "W": "composition matrix, d x 2d",
    "b": "composition bias, d",
    "V": "composition tensor, d x 2d x 2d (h_k = x^T V[k] x)",
    "LM": "word matrices, |V| x d x d, row 0: unknown word (MV-RNN)",
    "WM": "matrix composition, d x 2d: P = WM [P_left ; P_right] (MV-RNN)",
    "Ws": "classifier weights, C x d",
    "bs": "classifier bias, C",
}


def library_versions() -> dict[str, str]:
    return {"rntn_engine": __version__, "numpy": np.__version__, "numba": numba.__version__,
            "h5py": h5py.__version__, "python": platform.python_version()}


@dataclass
class Checkpoint:
    """Everything loaded from a model file or checkpoint."""

    params: Parameters
    vocabulary: Vocabulary
    config: TrainConfig
    adagrad_sums: Parameters | None = None
    state: dict = field(default_factory=dict)
    metrics: list = field(default_factory=list)
    data_hashes: dict = field(default_factory=dict)
    versions: dict = field(default_factory=dict)
    path: str = ""


def save_checkpoint(path: Path | str, params: Parameters, vocabulary: Vocabulary, config: TrainConfig,
                    adagrad_sums: Parameters | None = None, state: dict | None = None, metrics: list | None = None,
                    data_hashes: dict | None = None, fault=None) -> None:
    content = CheckpointContent()
    for name in params.names():
        content.arrays[f"parameters/{name}"] = params[name]
        content.descriptions[f"arrays/parameters/{name}"] = PARAMETER_DESCRIPTIONS[name]
        if adagrad_sums is not None:
            content.arrays[f"adagrad_sums/{name}"] = adagrad_sums[name]
            content.descriptions[f"arrays/adagrad_sums/{name}"] = f"AdaGrad sum of squared gradients of {name}"
    content.words["vocabulary"] = list(vocabulary.words)
    content.descriptions["words/vocabulary"] = "vocabulary: word of each row of L"
    content.records["config"] = config.to_dict()
    content.records["vocabulary_options"] = {"lowercase": vocabulary.lowercase, "min_count": vocabulary.min_count}
    content.records["state"] = state or {}
    content.records["metrics"] = metrics or []
    content.records["data_hashes"] = data_hashes or {}
    content.records["versions"] = library_versions()
    for key, text in (("config", "resolved training configuration"), ("state", "position of the run"),
                      ("metrics", "evaluation records so far"), ("data_hashes", "SHA-256 of the data files"),
                      ("versions", "library versions that wrote this file"),
                      ("vocabulary_options", "how words are looked up")):
        content.descriptions[f"records/{key}"] = text
    write_checkpoint(Path(path), content, fault=fault)


def load_checkpoint(path: Path | str) -> Checkpoint:
    """Read, verify and rebuild a checkpoint; CheckpointError when it is damaged or inconsistent."""
    content = read_checkpoint(path)

    def bad(what: str) -> CheckpointError:
        return CheckpointError(str(path), what)

    try:
        config = config_from_mapping(content.records["config"], source=str(path))
        options = content.records["vocabulary_options"]
        vocabulary = Vocabulary(tuple(content.words["vocabulary"]), bool(options["lowercase"]),
                                int(options["min_count"]))
    except (KeyError, ConfigError, ValueError) as exc:
        raise bad(f"incomplete checkpoint: {exc}") from None
    shape = ModelShape(config.model, len(vocabulary), config.dim, config.num_classes, config.dtype)
    params = Parameters(shape)
    sums = params.zeros_like() if any(k.startswith("adagrad_sums/") for k in content.arrays) else None
    for name in params.names():
        for group, target in (("parameters", params), ("adagrad_sums", sums)):
            if target is None:
                continue
            key = f"{group}/{name}"
            if key not in content.arrays:
                raise bad(f"dataset /arrays/{key} is missing")
            value = content.arrays[key]
            if value.shape != target[name].shape or value.dtype != target[name].dtype:
                raise bad(f"dataset /arrays/{key} is {value.shape} {value.dtype}, expected "
                          f"{target[name].shape} {target[name].dtype}")
            target[name] = value
    return Checkpoint(params, vocabulary, config, sums, content.records.get("state", {}),
                      content.records.get("metrics", []), content.records.get("data_hashes", {}),
                      content.records.get("versions", {}), str(path))


def newest_valid_checkpoint(run_dir: Path) -> tuple[Checkpoint | None, list[tuple[Path, CheckpointError]]]:
    """The newest checkpoint of a run (by step) that verifies, and the newer ones that did not.

    Reads only: callers decide what to do with the damaged files (report them, rename them aside).
    """
    damaged: list[tuple[Path, CheckpointError]] = []
    for candidate in reversed(list_checkpoints(run_dir)):
        try:
            return load_checkpoint(candidate.path), damaged
        except CheckpointError as exc:
            damaged.append((candidate.path, exc))
    return None, damaged
