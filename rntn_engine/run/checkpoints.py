"""Model files and checkpoints: what a run saves, and how it comes back.

A checkpoint (data/checkpoint_file.py gives the HDF5 layout) holds:

    arrays/parameters/<stored name>      every parameter, under its descriptive name
                                         (model/parameters.py: word_vectors is L, classifier_weights is Ws, ...)
    arrays/adagrad_sums/<stored name>    AdaGrad's G for each parameter (absent in an exported model)
    arrays/starting_values/word_vectors  the starting word vectors, when L2 pulls word vectors toward them
    words/vocabulary                     id -> word, row i of L is words[i]
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
from rntn_engine.model.parameters import DTYPES, PARAMETERS, ModelShape, Parameters
from rntn_engine.run.run_config import ConfigError, TrainConfig, config_from_mapping
from rntn_engine.run.run_directory import list_checkpoints
from rntn_engine.run.run_state import RunState



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
    anchors: dict = field(default_factory=dict)  # word array name -> what its L2 term pulls toward


STARTING_VALUES = "starting_values"  # group of the arrays an L2 term pulls toward (when not zero)


def save_checkpoint(path: Path | str, params: Parameters, vocabulary: Vocabulary, config: TrainConfig,
                    adagrad_sums: Parameters | None = None, state: dict | None = None, metrics: list | None = None,
                    data_hashes: dict | None = None, fault=None, anchors: dict | None = None) -> None:
    content = CheckpointContent()
    for name in params.names():
        spec = PARAMETERS[name]
        content.arrays[f"parameters/{spec.stored_as}"] = params[name]
        content.descriptions[f"arrays/parameters/{spec.stored_as}"] = spec.description
        if adagrad_sums is not None:
            content.arrays[f"adagrad_sums/{spec.stored_as}"] = adagrad_sums[name]
            content.descriptions[f"arrays/adagrad_sums/{spec.stored_as}"] = \
                f"AdaGrad sum of squared gradients of {spec.symbol} ({spec.stored_as})"
    for name, anchor in (anchors or {}).items():
        spec = PARAMETERS[name]
        content.arrays[f"{STARTING_VALUES}/{spec.stored_as}"] = anchor
        content.descriptions[f"arrays/{STARTING_VALUES}/{spec.stored_as}"] = \
            f"starting values of {spec.symbol} ({spec.stored_as}), which its L2 term pulls toward"
    content.words["vocabulary"] = list(vocabulary.words)
    content.descriptions["words/vocabulary"] = "vocabulary: word of each row of L"
    content.records["config"] = config.to_dict()
    content.records["vocabulary_options"] = {"lowercase": vocabulary.lowercase, "min_count": vocabulary.min_count}
    content.records["state"] = state or RunState().to_dict()  # none given: a run that has not started
    content.records["metrics"] = metrics or []
    content.records["data_hashes"] = data_hashes or {}
    content.records["versions"] = library_versions()
    for key, text in (("config", "resolved training configuration"), ("state", "position of the run"),
                      ("metrics", "evaluation records so far"), ("data_hashes", "SHA-256 of the data files"),
                      ("versions", "library versions that wrote this file"),
                      ("vocabulary_options", "how words are looked up")):
        content.descriptions[f"records/{key}"] = text
    write_checkpoint(Path(path), content, fault=fault)


def array_layout(records: dict, n_words: int) -> tuple[dict, tuple[str, ...]]:
    """The arrays a checkpoint with these records must hold (data/checkpoint_file.py: ArrayLayout).

    Raises ValueError (or KeyError) when the stored configuration is not a valid one.
    """
    config = config_from_mapping(records["config"]).validate(require_data=False)
    if config.dim < 1:
        raise ValueError(f"stored dim {config.dim} is not a vector size")
    if n_words < 1:
        raise ValueError("the stored vocabulary is empty (it always holds the unknown word)")
    shape = ModelShape(config.model, n_words, config.dim, config.num_classes, config.dtype)
    dtype = np.dtype(DTYPES[config.dtype])
    expected = {}
    for symbol, dims in shape.shapes().items():
        for group in ("parameters", "adagrad_sums"):
            expected[f"{group}/{PARAMETERS[symbol].stored_as}"] = (dims, dtype)
    if config.l2_words_toward == "start":
        expected[f"{STARTING_VALUES}/{PARAMETERS['L'].stored_as}"] = (shape.shapes()["L"], dtype)
    return expected, ("adagrad_sums",)


def load_checkpoint(path: Path | str) -> Checkpoint:
    """Read, verify and rebuild a checkpoint.

    CheckpointError when it is damaged or inconsistent (format, checksum, layout, stored configuration
    or run state); CheckpointUnavailableError when it cannot be read now (busy, permission, I/O).
    """
    content = read_checkpoint(path, layout=array_layout)

    def bad(what: str) -> CheckpointError:
        return CheckpointError(str(path), what)

    try:
        config = config_from_mapping(content.records["config"], source=str(path))
        options = content.records["vocabulary_options"]
        vocabulary = Vocabulary(tuple(content.words["vocabulary"]), bool(options["lowercase"]),
                                int(options["min_count"]))
        state = RunState.from_record(content.records["state"])
        metrics = content.records["metrics"]
        data_hashes = content.records["data_hashes"]
        if not isinstance(metrics, list) or not all(isinstance(m, dict) for m in metrics):
            raise ValueError("stored metrics are not a list of records")
        if not isinstance(data_hashes, dict):
            raise ValueError("stored data hashes are not a mapping")
    except KeyError as exc:
        raise bad(f"incomplete checkpoint: record {exc} is missing") from None
    except (ConfigError, ValueError, TypeError) as exc:
        raise bad(f"invalid checkpoint: {exc}") from None
    shape = ModelShape(config.model, len(vocabulary), config.dim, config.num_classes, config.dtype)
    params = Parameters(shape)
    sums = params.zeros_like() if any(k.startswith("adagrad_sums/") for k in content.arrays) else None
    for name in params.names():
        params[name] = content.arrays[f"parameters/{PARAMETERS[name].stored_as}"]
        if sums is not None:
            sums[name] = content.arrays[f"adagrad_sums/{PARAMETERS[name].stored_as}"]
    anchors = {}
    if config.l2_words_toward == "start":
        anchors["L"] = content.arrays[f"{STARTING_VALUES}/{PARAMETERS['L'].stored_as}"]
    return Checkpoint(params, vocabulary, config, sums, state.to_dict(), list(metrics), dict(data_hashes),
                      content.records.get("versions", {}), str(path), anchors)


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
