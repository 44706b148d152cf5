"""The training loop, resumable: one flat loop in commented phases.

Determinism: parameters are initialised from ``seed``; the order of epoch e is a
permutation drawn from a generator seeded with (seed, e), so any epoch's order is
rebuilt from two integers and a run's position is (epoch, trees done in the epoch).
No generator state exists after initialisation, so none has to be saved.
Minibatches are split into ``grad_chunks`` fixed pieces (model/objective.py), so the
thread count never changes the numbers.

Everything that decides the future is in the checkpoint (run/checkpoints.py):
parameters, AdaGrad sums, :class:`RunState` (step, epoch, position, the running sums
of the epoch's loss, best-checkpoint and early-stopping counters) and the metrics so
far. A resumed run restores all of it at one point, before the loop, and continues
bit for bit as if it had never stopped.

Checkpoints are written every ``checkpoint_every_steps`` steps, when
``checkpoint_every_minutes`` of wall time passed since the last one, at each epoch
end, and when the run is asked to stop (SIGTERM, SIGINT, ``--time-limit``).
"""

from __future__ import annotations

import hashlib
import os
import time
from contextlib import nullcontext
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np
from tqdm import tqdm

from rntn_engine.data.atomic_files import fsync_directory, temp_name_for, write_atomically
from rntn_engine.data.batches import EncodedTreebank
from rntn_engine.data.encoded_cache import cache_key, load_cached_bank, store_cached_bank
from rntn_engine.data.errors import InputError
from rntn_engine.data.treebank_encoding import apply_vocabulary, read_encoded_treebank, read_treebank_words
from rntn_engine.data.vocabulary import Vocabulary, vocabulary_from_counts
from rntn_engine.model.adagrad import AdaGrad
from rntn_engine.model.objective import L2Strengths, TreeModelObjective, split_into_chunks
from rntn_engine.model.parameters import (
    L2_GROUPS,
    Gradient,
    MemoryLimitError,
    ModelShape,
    Parameters,
    check_memory,
    init_parameters,
    largest_minibatch,
)
from rntn_engine.run.checkpoints import Checkpoint, load_checkpoint, newest_valid_checkpoint, save_checkpoint
from rntn_engine.run.evaluation import TreebankPredictions, predict_treebank
from rntn_engine.run.fault_injection import fault_from_environment
from rntn_engine.run.run_config import (
    LOWER_IS_BETTER,
    ConfigError,
    RESUME_CHANGEABLE,
    TrainConfig,
    config_differences,
    config_from_mapping,
    load_config_file,
)
from rntn_engine.run.run_directory import (
    BEST_FILE,
    CONFIG_FILE,
    LOCK_FILE,
    METRICS_FILE,
    MODEL_FILE,
    PROGRESS_FILE,
    RunLock,
    append_metrics,
    checkpoint_name,
    is_run_directory,
    list_checkpoints,
    prune_checkpoints,
    remove_leftover_temp_files,
    rewrite_metrics_log,
    write_config_file,
    write_json_atomic,
)
from rntn_engine.run.pretrained_start import extend_with_vector_words, initial_word_vectors, resolve_dim
from rntn_engine.run.process_group import PeerStopped, SingleProcess
from rntn_engine.run.run_errors import RunDirectoryError, TrainingError
from rntn_engine.run.run_state import RunState
from rntn_engine.run.class_weights import resolve_class_weights
from rntn_engine.run.scores import LabelScheme, accuracy, binary_accuracy, confusion_matrix, macro_f1, majority_class
from rntn_engine.run.stop_signals import EXIT_STOPPED_RESUMABLE, StopRequest, parse_duration

EXIT_FINISHED = 0
HEARTBEAT_SECONDS = 2.0  # how often progress.json is refreshed (also after every checkpoint)
TREEBANK_CACHE_DIR = "encoded-treebanks"  # in the run directory: the encoded treebanks (data/encoded_cache.py)
# Smaller treebanks are read again on resume: at the bulk reader's tens of MB/s that takes under half a
# second, less than writing and verifying a cache entry is worth (scripts/bench_treebank.py measures both).
TREEBANK_CACHE_MIN_BYTES = 16 * 2**20


def file_sha256(path: str | Path) -> str:
    digest = hashlib.sha256()
    try:
        with open(path, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                digest.update(block)
    except OSError as exc:
        raise InputError(str(path), f"cannot read the run's data file: {exc.strerror or exc}") from None
    return digest.hexdigest()


def epoch_order(seed: int, epoch: int, n_trees: int) -> np.ndarray:
    """The shuffled tree order of ``epoch``: a function of (seed, epoch) alone."""
    return np.random.default_rng([seed, epoch]).permutation(n_trees)


@dataclass
class TrainingData:
    vocabulary: Vocabulary
    train: EncodedTreebank
    dev: EncodedTreebank | None
    hashes: dict[str, str] = field(default_factory=dict)


DATA_FILE_SETTINGS = ("train_file", "dev_file")  # the data a run reads at every start and resume


def data_file_hashes(config: TrainConfig, run_dir: Path | None = None) -> dict[str, str]:
    """SHA-256 of each data file; a missing one is named, with how to point ``run_dir`` at its new place."""
    hashes = {}
    for key in DATA_FILE_SETTINGS:
        path = getattr(config, key)
        if not path:
            continue
        if run_dir is not None and not Path(path).is_file():
            flag = "--" + key.replace("_", "-")
            raise InputError(path, f"the run's {key} is not there; if it moved, point the run at it: "
                                   f"`rntn resume {run_dir} {flag} NEW_PATH` (the content must be the same)")
        hashes[key] = file_sha256(path)
    return hashes


def resolve_data_paths(config: TrainConfig, keys: tuple[str, ...] = ("train_file", "dev_file", "vectors_file")) -> None:
    """Store data paths absolute, so the run can be resumed from any working directory."""
    for key in keys:
        if getattr(config, key):
            setattr(config, key, str(Path(getattr(config, key)).resolve()))


def load_training_data(config: TrainConfig, vocabulary: Vocabulary | None = None,
                       cache_dir: Path | None = None) -> TrainingData:
    """Read the treebanks in bulk (errors point at file:line:column), build or reuse the vocabulary, encode.

    A new vocabulary is built from the training file's word counts, then extended with
    the vector file's first words when ``extend_vocabulary`` asks for it
    (run/pretrained_start.py). No Tree objects are made (data/treebank_encoding.py).
    With ``cache_dir``, treebanks of at least TREEBANK_CACHE_MIN_BYTES are kept there
    encoded (data/encoded_cache.py), so a resume with the same data and vocabulary loads
    them instead of reading the text.
    """
    options = {"num_classes": config.num_classes, "binarise": config.binarise}
    hashes = data_file_hashes(config)
    if vocabulary is None:
        train, words = read_treebank_words(config.train_file, **options)
        vocabulary = extend_with_vector_words(config, vocabulary_from_counts(words.as_dict(), config.min_count,
                                                                             config.lowercase))
        train = _encoded("train", config.train_file, hashes["train_file"], vocabulary, options, cache_dir,
                         apply_vocabulary(train, words, vocabulary))
    else:
        train = _encoded("train", config.train_file, hashes["train_file"], vocabulary, options, cache_dir)
    dev = None
    if config.dev_file:
        dev = _encoded("dev", config.dev_file, hashes["dev_file"], vocabulary, options, cache_dir)
    return TrainingData(vocabulary, train, dev, hashes)


def _encoded(name: str, path: str, sha256: str, vocabulary: Vocabulary, options: dict, cache_dir: Path | None,
             bank: EncodedTreebank | None = None) -> EncodedTreebank:
    """``bank``, or the treebank from the cache, or read; kept in the cache when it is large enough."""
    use_cache = cache_dir is not None and os.path.getsize(path) >= TREEBANK_CACHE_MIN_BYTES
    key = cache_key(sha256, options["binarise"], options["num_classes"], vocabulary) if use_cache else ""
    if bank is None and use_cache:
        cached = load_cached_bank(cache_dir, name, key)
        if cached is not None:
            return cached
    if bank is None:
        bank = read_encoded_treebank(path, vocabulary, **options)
    if use_cache:
        try:
            store_cached_bank(cache_dir, name, key, bank)
        except OSError:
            pass  # the cache is an optimisation: a full disk must not stop the run
    return bank


# --- starting and resuming -----------------------------------------------------------------------------


def prepare_new_run_directory(config: TrainConfig) -> Path:
    """Create the run directory for a new run; refuse one that holds anything already."""
    run_dir = config.resolved_run_dir()
    if run_dir.exists() and not run_dir.is_dir():
        raise RunDirectoryError(f"{run_dir}: exists and is not a directory")
    if run_dir.is_dir() and any(run_dir.iterdir()):
        if is_run_directory(run_dir):
            raise RunDirectoryError(f"{run_dir}: already holds a run; continue it with `rntn resume {run_dir}` "
                                    f"or choose another --run-dir")
        raise RunDirectoryError(f"{run_dir}: directory is not empty and is not a run of ours; "
                                f"choose an empty or new --run-dir")
    run_dir.mkdir(parents=True, exist_ok=True)
    return run_dir


def load_latest_valid_checkpoint(run_dir: Path, echo: Callable[[str], None]) -> Checkpoint | None:
    """The newest checkpoint (by step) that verifies; damaged newer ones are renamed aside with a warning.

    Only a wrong format or checksum marks a file damaged; a checkpoint that cannot be read now (busy,
    permission, I/O) stops the resume (CheckpointUnavailableError), and when checkpoints exist but none
    verifies, nothing is renamed and the resume stops: a run never silently restarts from step 0.
    """
    checkpoint, damaged = newest_valid_checkpoint(run_dir)
    if checkpoint is None and damaged:
        raise RunDirectoryError(f"{run_dir}: none of its {len(damaged)} checkpoints verifies (newest: {damaged[0][1]});"
                                f" nothing was renamed or changed. Check them with `rntn inspect`, or start a new run")
    for path, exc in damaged:
        echo(f"warning: {exc}; falling back to the previous checkpoint")
        # keep the evidence, out of the way of new checkpoints of the same step
        os.replace(path, path.with_name(path.name + ".damaged"))
    return checkpoint


def stored_config(run_dir: Path) -> TrainConfig:
    """The run's config.toml; if it is unreadable or invalid, the configuration stored in its newest checkpoint."""
    if not run_dir.is_dir():
        raise RunDirectoryError(f"{run_dir}: no such run directory")
    try:
        return config_from_mapping(load_config_file(run_dir / CONFIG_FILE), source=str(run_dir / CONFIG_FILE))
    except (ConfigError, OSError, UnicodeDecodeError) as exc:
        problem = exc
    checkpoint, _ = newest_valid_checkpoint(run_dir) if list_checkpoints(run_dir) else (None, [])
    if checkpoint is None:
        raise RunDirectoryError(f"{run_dir}: not a run directory of ours ({CONFIG_FILE}: {problem}; and no valid "
                                f"checkpoint to take the configuration from)")
    return checkpoint.config


# --- the loop --------------------------------------------------------------------------------------------


class Trainer:
    """Owns one training session in a run directory (see module docstring)."""

    def __init__(self, run_dir: Path, config: TrainConfig, echo: Callable[[str], None] = print,
                 show_progress: bool | None = None, stop: StopRequest | None = None,
                 group: SingleProcess | None = None) -> None:
        self.run_dir = run_dir
        self.stop = stop or StopRequest()
        self.config = config
        self.group = group or SingleProcess()
        self.echo = echo if self.group.is_root else _silent  # rank 0 alone prints, writes and shows progress
        self.show_progress = show_progress if self.group.is_root else False
        self.pending_error: Exception | None = None  # rank 0's failed write, told to every rank at agree()
        self.fault = fault_from_environment()
        self.last_saved_step: int | None = None
        self.last_save_time = time.monotonic()
        self.last_heartbeat = 0.0
        self.anchors: dict[str, np.ndarray] = {}  # what the word arrays' L2 terms pull toward (run state)

    # .. rank 0 writes; every rank agrees ...................................................................

    def on_root(self, action: Callable[[], object]) -> None:
        """Run a write on rank 0 only. One process: an error raises at once. Several ranks: rank 0 keeps the
        error and every rank raises at the next :meth:`agree` or :meth:`sync`, so all stop together."""
        if not self.group.is_root or self.pending_error is not None:
            return
        if self.group.size == 1:
            action()
            return
        try:
            action()
        except (TrainingError, InputError, RunDirectoryError) as exc:
            self.pending_error = exc

    def agree(self) -> bool:
        """Every rank, at every minibatch boundary: stop now? (combined over the ranks; raises rank 0's error)."""
        status = 2 if self.pending_error is not None else (1 if self.stop.should_stop() else 0)
        status = self.group.largest(status)
        if status == 2:
            self.sync()
        if status == 1 and self.stop.reason is None:
            self.stop.request("a stop of another rank")
        return status == 1

    def sync(self) -> None:
        """Every rank: raise rank 0's pending write error, if any (rank 0 its own error, the others PeerStopped)."""
        if self.group.any_true(self.pending_error is not None):
            if self.pending_error is not None:
                raise self.pending_error
            raise PeerStopped(1)

    # .. checkpoints ...........................................................................................

    def save(self, params: Parameters, optimiser: AdaGrad, state: RunState, history: list[dict],
             data: TrainingData) -> Path:
        """Write a checkpoint of the current state (rank 0), then prune old ones. Never on NaN, never over a
        good one. Returns the checkpoint's path on every rank."""
        path = self.run_dir / checkpoint_name(state.step)
        self.on_root(lambda: self._save(path, params, optimiser, state, history, data))
        return path

    def _save(self, path: Path, params: Parameters, optimiser: AdaGrad, state: RunState, history: list[dict],
              data: TrainingData) -> None:
        if not np.all(np.isfinite(params.flat)):
            raise TrainingError(f"parameters hold NaN or Inf at step {state.step}; not saving them. The last "
                                f"good checkpoint is untouched: lower --lr and resume from it, or start again")
        try:
            save_checkpoint(path, params, data.vocabulary, self.config, optimiser.sums, state.to_dict(), history,
                            data.hashes, fault=self.fault, anchors=self.anchors)
        except OSError as exc:
            previous = list_checkpoints(self.run_dir)
            kept = f"the previous checkpoint {previous[-1].path.name} is intact" if previous else "no checkpoint existed yet"
            raise TrainingError(f"{path}: could not write the checkpoint ({exc.strerror or exc}); {kept}. "
                                f"Free space, then `rntn resume {self.run_dir}`") from None
        self.last_saved_step = state.step
        self.last_save_time = time.monotonic()
        protect = {self.run_dir / state.best_checkpoint} if state.best_checkpoint else set()
        prune_checkpoints(self.run_dir, self.config.keep_checkpoints, protect | {path}, fault=self.fault)

    def heartbeat(self, state: RunState, n_trees: int, steps_per_epoch: int, rate: float | None,
                  force: bool = False) -> None:
        now = time.time()
        if not force and now - self.last_heartbeat < HEARTBEAT_SECONDS:
            return
        self.last_heartbeat = now
        self.write_run_file(PROGRESS_FILE, lambda: write_json_atomic(self.run_dir / PROGRESS_FILE, {
            "pid": os.getpid(), "updated": now, "step": state.step, "epoch": state.epoch,
            "position": state.position, "trees_per_epoch": n_trees, "epochs": self.config.epochs,
            "steps_per_epoch": steps_per_epoch, "nodes_per_second": rate, "finished": state.finished}))

    def write_run_file(self, name: str, write: Callable[[], None]) -> None:
        """Run one write of a run-directory file (rank 0); an OS error becomes one line naming the intact
        checkpoint."""
        self.on_root(lambda: self._write_run_file(name, write))

    def _write_run_file(self, name: str, write: Callable[[], None]) -> None:
        try:
            if self.fault:
                self.fault(f"run_file:{name}")
            write()
        except OSError as exc:
            previous = list_checkpoints(self.run_dir)
            kept = f"the checkpoint {previous[-1].path.name} is intact" if previous else "no checkpoint existed yet"
            raise TrainingError(f"{self.run_dir / name}: could not write it ({exc.strerror or exc}); {kept}. "
                                f"Free space (or fix the cause), then `rntn resume {self.run_dir}`") from None

    # .. the run ...............................................................................................

    def run(self, checkpoint: Checkpoint | None) -> int:
        """Train from ``checkpoint`` (None: from scratch) to the end or a stop; returns the exit code."""
        config = self.config
        # --- restore: data, parameters, optimiser, position -- all at this one point --------------------------
        # rank 0 alone keeps the encoded-treebank cache in the run directory; other ranks read the text
        cache_dir = self.run_dir / TREEBANK_CACHE_DIR if self.group.is_root else None
        data = self.group.all_now(lambda: load_training_data(config, checkpoint.vocabulary if checkpoint else None,
                                                             cache_dir=cache_dir))
        self.group.same_on_all(data.hashes, "content of the data files (SHA-256)")
        if self.fault:
            self.fault("data_loaded")
        bank = data.train
        shape = ModelShape(config.model, len(data.vocabulary), config.dim, config.num_classes, config.dtype)
        try:
            minibatch = largest_minibatch(np.diff(bank.start), config.batch_size)
            check_memory(shape, config.max_memory_gb * 2**30, config.l2_words_toward == "start", minibatch)
        except MemoryLimitError as exc:
            raise TrainingError(str(exc)) from None
        frozen = ("L",) if config.freeze_vectors else ()
        if checkpoint is None:
            params = init_parameters(shape, np.random.default_rng(config.seed))
            if config.vectors_file:
                params.L[:] = initial_word_vectors(config, data.vocabulary, bank, params.flat.dtype, self.echo)
            optimiser = AdaGrad(params, config.lr, config.adagrad_eps, frozen, threads=config.threads)
            state, history = RunState(), []
            if config.l2_words_toward == "start":
                self.anchors = {"L": params.L.copy()}
        else:
            params = checkpoint.params
            optimiser = AdaGrad(params, config.lr, config.adagrad_eps, frozen, threads=config.threads)
            optimiser.sums.flat[:] = checkpoint.adagrad_sums.flat
            state, history = RunState.from_record(checkpoint.state), list(checkpoint.metrics)
            self.anchors = dict(checkpoint.anchors)
            self.last_saved_step = state.step
        if state.finished and state.finish_reason == "all epochs done" and state.epoch < config.epochs:
            state.finished, state.finish_reason = False, ""  # more epochs were asked for on resume
        if state.position > bank.n_trees:
            raise TrainingError(f"{checkpoint.path}: the run is at tree {state.position} of its epoch, but the "
                                f"training treebank holds {bank.n_trees} trees; it is not the treebank of this run")
        self.write_run_file(METRICS_FILE, lambda: rewrite_metrics_log(self.run_dir, history))

        grads = Gradient(shape)
        l2 = L2Strengths(**{group: getattr(config, f"l2_{group}") for group in L2_GROUPS})
        if checkpoint is None and config.class_weights != "none":
            state.class_weights = resolve_class_weights(config.class_weights, bank.label, config.num_classes).tolist()
        weights = np.array(state.class_weights, dtype=np.float64) if state.class_weights else None
        if weights is not None and weights.shape != (config.num_classes,):
            raise TrainingError(f"the run state holds {weights.size} class weights for {config.num_classes} classes")
        objective = TreeModelObjective(params, l2, threads=config.threads, anchors=self.anchors,
                                       class_weights=weights)
        steps_per_epoch = -(-bank.n_trees // config.batch_size)
        stop = self.stop
        stop.set_time_limit(parse_duration(config.time_limit) if config.time_limit else 0.0)
        where = "from the beginning" if checkpoint is None else f"from step {state.step} (epoch {state.epoch + 1}, " \
                                                               f"tree {state.position} of {bank.n_trees})"
        self.echo(f"training {config.model} d={config.dim} on {bank.n_trees} trees ({bank.n_nodes} nodes), "
                  f"vocabulary {len(data.vocabulary)} words, {shape.count():,} parameters "
                  f"({shape.training_bytes() / 2**20:.1f} MiB with gradient and AdaGrad state), {where}")
        if data.dev is not None and checkpoint is None:
            self.echo(majority_baseline_line(bank, data.dev))
        if weights is not None and checkpoint is None:
            names = config.names_of_classes()
            self.echo(f"class weights ({config.class_weights if config.class_weights == 'balanced' else 'given'}): "
                      + ", ".join(f"{names[c]} {w:.4g}" for c, w in enumerate(weights)))
        if checkpoint is None:  # step 0: a resume never starts from nothing
            self.on_root(lambda: list_checkpoints(self.run_dir) or self._save(
                self.run_dir / checkpoint_name(0), params, optimiser, state, history, data))
        session_start = time.monotonic()
        seconds_before = state.training_seconds
        rate: float | None = None
        try:
            while state.epoch < config.epochs:
                # --- schedule: this epoch's order ------------------------------------------------------------
                order = epoch_order(config.seed, state.epoch, bank.n_trees)
                bar = tqdm(total=bank.n_trees, initial=state.position, unit="tree", leave=False,
                           desc=f"epoch {state.epoch + 1}/{config.epochs}",
                           disable=None if self.show_progress is None else not self.show_progress)
                t_epoch, nodes_epoch_session = time.perf_counter(), 0
                while state.position < bank.n_trees:
                    # --- stop requested? checkpoint at this minibatch boundary and leave ------------------
                    if self.agree():
                        bar.close()
                        state.training_seconds = seconds_before + time.monotonic() - session_start
                        if self.last_saved_step != state.step:
                            self.save(params, optimiser, state, history, data)
                        self.heartbeat(state, bank.n_trees, steps_per_epoch, rate, force=True)
                        self.sync()
                        self.echo(f"stopped by {stop.reason} at step {state.step} with a checkpoint; "
                                  f"continue with `rntn resume {self.run_dir}`")
                        return EXIT_STOPPED_RESUMABLE
                    # --- forward / backward / update -------------------------------------------------------
                    tree_ids = order[state.position : state.position + config.batch_size]
                    chunks = split_into_chunks(bank, tree_ids, config.grad_chunks)
                    loss = objective.loss_and_gradient(params, grads, chunks, include_l2=False, group=self.group)
                    if not np.isfinite(loss):
                        raise TrainingError(f"loss became {loss} at epoch {state.epoch + 1}, step {state.step + 1}; "
                                            f"the last good checkpoint is untouched. Lower --lr (now {config.lr}) "
                                            f"or raise the L2 strengths and start a new run")
                    penalty = optimiser.step_with_l2(params, grads, l2, self.anchors)  # L2, update, zeroing
                    nodes = sum(c.n_nodes for c in chunks)
                    state.step += 1
                    state.position += len(tree_ids)
                    state.epoch_loss += loss * len(tree_ids)  # the data term is the mean over the trees
                    state.epoch_labelled_nodes += sum(int(np.count_nonzero(c.label >= 0)) for c in chunks)
                    state.epoch_l2 += penalty * len(tree_ids)
                    if self.fault is not None:
                        self.fault("step")  # tests only: a kill or signal after exactly N steps
                    nodes_epoch_session += nodes
                    bar.update(len(tree_ids))
                    # --- log progress; checkpoint by steps or by wall time ---------------------------------
                    elapsed = time.perf_counter() - t_epoch
                    rate = nodes_epoch_session / elapsed if elapsed > 0 else None
                    self.heartbeat(state, bank.n_trees, steps_per_epoch, rate)
                    by_steps = config.checkpoint_every_steps and state.step % config.checkpoint_every_steps == 0
                    by_time = (config.checkpoint_every_minutes
                               and time.monotonic() - self.last_save_time >= 60 * config.checkpoint_every_minutes)
                    if (by_steps or by_time) and state.position < bank.n_trees:
                        state.training_seconds = seconds_before + time.monotonic() - session_start
                        self.save(params, optimiser, state, history, data)
                bar.close()
                # --- epoch end: evaluate, log, early stopping, checkpoint ---------------------------------------
                state.training_seconds = seconds_before + time.monotonic() - session_start
                record = self.evaluate(objective, params, state, data, rate)
                history.append(record)
                self.write_run_file(METRICS_FILE, lambda: append_metrics(self.run_dir, record))
                self.echo(format_epoch_line(record))
                state.epoch += 1
                state.position, state.epoch_loss, state.epoch_labelled_nodes, state.epoch_l2 = 0, 0.0, 0, 0.0
                value = record.get(config.best_metric)
                if value is not None and value == value and is_better(config.best_metric, value, state.best_value):
                    state.best_value = value
                    state.best_checkpoint = checkpoint_name(state.step)
                    state.evaluations_without_improvement = 0
                elif value is not None:
                    state.evaluations_without_improvement += 1
                if config.patience and state.evaluations_without_improvement >= config.patience:
                    state.finished, state.finish_reason = True, "early stopping"
                elif state.epoch >= config.epochs:
                    state.finished, state.finish_reason = True, "all epochs done"
                saved = self.save(params, optimiser, state, history, data)
                if state.best_checkpoint == saved.name:
                    self.write_run_file(BEST_FILE, lambda: keep_as(saved, self.run_dir / BEST_FILE))
                self.heartbeat(state, bank.n_trees, steps_per_epoch, rate, force=True)
                if state.finished:
                    break
            if not state.finished:  # no epoch to run (--epochs 0, or lowered on resume)
                state.finished, state.finish_reason = True, "all epochs done"
                self.save(params, optimiser, state, history, data)
        finally:
            objective.close()
            optimiser.close()
        # --- finish: the final model ---------------------------------------------------------------------
        if state.finish_reason == "early stopping":
            self.echo(f"early stopping: {config.best_metric} did not improve for {config.patience} evaluations")
        self.heartbeat(state, bank.n_trees, steps_per_epoch, rate, force=True)
        if self.fault:
            self.fault("final_model")
        self.write_final_model(params, optimiser.sums, state, history, data.vocabulary, data.hashes, self.anchors)
        self.sync()
        return EXIT_FINISHED  # a stop asked for while the final model was written: the run is complete anyway

    def evaluate(self, objective: TreeModelObjective, params: Parameters, state: RunState,
                 data: TrainingData, rate: float | None) -> dict:
        record = {"step": state.step, "epoch": state.epoch + 1,
                  "train_loss": state.epoch_loss / max(state.epoch_labelled_nodes, 1),
                  "train_l2": state.epoch_l2 / data.train.n_trees,
                  "wall_seconds": round(state.training_seconds, 3),
                  "nodes_per_second": round(rate, 1) if rate else None}
        if data.dev is not None:
            dev = predict_treebank(objective, params, data.dev, keep_probabilities=True)
            record.update({f"dev_{k}": v for k, v in dev_scores(dev, self.config.num_classes).items()})
        return record

    def write_final_model(self, params: Parameters, sums: Parameters | None, state: RunState, history: list[dict],
                          vocabulary: Vocabulary, data_hashes: dict, anchors: dict) -> None:
        """model.h5 (rank 0): the best checkpoint (``final_model = best`` and a best exists), else the last
        parameters."""
        self.on_root(lambda: self._write_final_model(params, sums, state, history, vocabulary, data_hashes,
                                                     anchors))

    def _write_final_model(self, params: Parameters, sums: Parameters | None, state: RunState,
                           history: list[dict], vocabulary: Vocabulary, data_hashes: dict, anchors: dict) -> None:
        path = self.run_dir / MODEL_FILE
        best = self.run_dir / state.best_checkpoint if state.best_checkpoint else None
        try:
            if self.config.final_model == "best" and best is not None and best.is_file():
                keep_as(best, path)
                self.echo(f"saved {path}: the best checkpoint, {best.name} ({self.config.best_metric} "
                          f"{state.best_value:.4f}; the last one is {checkpoint_name(state.step)})")
                return
            save_checkpoint(path, params, vocabulary, self.config, sums, state.to_dict(), history, data_hashes,
                            fault=self.fault, anchors=anchors)
        except OSError as exc:
            raise TrainingError(f"{path}: could not write the final model ({exc.strerror or exc}); the run is "
                                f"finished and its last checkpoint is intact: `rntn resume {self.run_dir}` writes "
                                f"the model file") from None
        about = f"; best {self.config.best_metric} {state.best_value:.4f} in {state.best_checkpoint}" \
            if state.best_value is not None else ""
        self.echo(f"saved {path}: the last parameters{about}")


def _silent(line: str) -> None:
    return None


def is_better(metric: str, value: float, best: float | None) -> bool:
    """Whether ``value`` of the dev score ``metric`` beats the best so far (dev_loss: lower is better)."""
    if best is None:
        return True
    return value < best if metric in LOWER_IS_BETTER else value > best


def dev_scores(dev: TreebankPredictions, num_classes: int) -> dict[str, float]:
    """The dev scores of an evaluation record (keys without the ``dev_`` prefix)."""
    scheme = LabelScheme.for_classes(num_classes)
    root = dev.is_root
    return {**dev.fine_scores(),
            "binary_all": binary_accuracy(dev.gold, dev.probabilities, scheme),
            "binary_root": binary_accuracy(dev.gold[root], dev.probabilities[root], scheme),
            "macro_f1_all": macro_f1(confusion_matrix(dev.gold, dev.predicted, num_classes)),
            "macro_f1_root": macro_f1(confusion_matrix(dev.gold[root], dev.predicted[root], num_classes)),
            "loss": dev.mean_loss()}


def keep_as(source: Path, target: Path) -> None:
    """Make ``target`` hold exactly the bytes of ``source``, atomically: a hard link where the filesystem
    has them (checkpoints are never changed in place, so sharing the file is safe), else a copy."""
    if target.exists() and os.path.samefile(source, target):
        return  # already the same file (renaming a hard link onto itself would do nothing, and leave the link)
    temporary = temp_name_for(target)
    temporary.unlink(missing_ok=True)  # our own name: a leftover of this process
    try:
        os.link(source, temporary)
    except OSError:
        write_atomically(target, source.read_bytes())
        return
    try:
        os.replace(temporary, target)
    except BaseException:
        temporary.unlink(missing_ok=True)
        raise
    fsync_directory(target.parent)


def finished_with_nothing_to_do(checkpoint: Checkpoint, epochs: int) -> bool:
    """A finished run stays finished unless it ran all its epochs and more are now asked for."""
    state = RunState.from_record(checkpoint.state)
    return state.finished and not (state.finish_reason == "all epochs done" and epochs > state.epoch)


def start_training(config: TrainConfig, echo: Callable[[str], None] = print,
                   show_progress: bool | None = None, stop: StopRequest | None = None,
                   group: SingleProcess | None = None) -> int:
    """`rntn train`: a new run in a new or empty run directory.

    A start that fails before its first checkpoint is committed (a bad vector file, a treebank
    error, the memory guard) removes what it created, so the same command can simply be run again.
    Under MPI (``group``), rank 0 makes the directory and holds its lock; every rank trains.
    """
    group = group or SingleProcess()
    echo = echo if group.is_root else _silent
    config.validate()
    resolve_data_paths(config)
    stop = stop or StopRequest()
    with stop:
        resolve_dim(config)
        run_dir = config.resolved_run_dir()
        created = group.root_now(lambda: not any(prepare_new_run_directory(config).iterdir()))
        try:
            with RunLock(run_dir) if group.is_root else nullcontext():
                trainer = Trainer(run_dir, config, echo, show_progress, stop, group)
                trainer.write_run_file(CONFIG_FILE, lambda: write_config_file(run_dir, config.to_toml()))
                trainer.sync()
                return trainer.run(None)
        except BaseException:
            if group.is_root and created and not list_checkpoints(run_dir):
                remove_failed_start(run_dir)
            raise


def remove_failed_start(run_dir: Path) -> None:
    """Delete the files a new run creates before its first checkpoint, then the directory if empty."""
    for name in (CONFIG_FILE, LOCK_FILE, METRICS_FILE, PROGRESS_FILE):
        try:
            (run_dir / name).unlink()
        except FileNotFoundError:
            pass
    remove_leftover_temp_files(run_dir)
    try:
        run_dir.rmdir()
    except OSError:
        pass  # not empty: something else is there, leave it


def resume_training(run_dir: Path, overrides: dict, echo: Callable[[str], None] = print,
                    show_progress: bool | None = None, allow_changed_data: bool = False,
                    stop: StopRequest | None = None, group: SingleProcess | None = None) -> int:
    """`rntn resume`: continue the run in ``run_dir`` from its newest valid checkpoint.

    Under MPI (``group``), with any number of ranks: rank 0 holds the lock and picks the checkpoint
    (setting damaged ones aside); every rank reads that one, and every rank must see data files with
    the checkpoint's hashes.
    """
    group = group or SingleProcess()
    echo = echo if group.is_root else _silent
    stop = stop or StopRequest()
    with stop:
        config = stored_config(run_dir)
        with RunLock(run_dir) if group.is_root else nullcontext():
            def pick() -> Checkpoint | None:
                for leftover in remove_leftover_temp_files(run_dir):
                    echo(f"removed the leftover of an interrupted write: {leftover.name}")
                return load_latest_valid_checkpoint(run_dir, echo)

            picked = group.root_now(pick)  # rank 0's choice; the other ranks read the same file
            chosen = group.broadcast_text(picked.path if picked is not None else "")
            checkpoint = picked if group.is_root else (load_checkpoint(chosen) if chosen else None)
            if checkpoint is not None:
                differing = config_differences(checkpoint.config, config, ignore=RESUME_CHANGEABLE)
                if differing:
                    raise RunDirectoryError(f"{run_dir / CONFIG_FILE}: differs from the checkpoint in "
                                            f"{', '.join(differing)}; restore it or start a new run")
                config = checkpoint.config
            else:
                echo(f"no checkpoint in {run_dir} (stopped before its first one): starting the run from the "
                     f"beginning")
            moved = {k: v for k, v in overrides.items() if k in DATA_FILE_SETTINGS}
            config = config_from_mapping(overrides, config)
            resolve_data_paths(config, tuple(moved))
            config.validate()
            if checkpoint is not None:
                hashes = group.all_now(lambda: data_file_hashes(config, run_dir))
                group.same_on_all(hashes, "content of the data files (SHA-256)")
                changed = [k for k, v in hashes.items() if checkpoint.data_hashes.get(k) != v]
                if changed and not allow_changed_data:
                    what = ("is not the file the run was trained on" if set(changed) <= set(moved) else
                            "changed since the checkpoint was written")
                    paths = ", ".join(getattr(config, k) for k in changed)
                    raise RunDirectoryError(f"{run_dir}: the content of {', '.join(changed)} {what} ({paths}); "
                                            f"pass --allow-changed-data to continue anyway")
            trainer = Trainer(run_dir, config, echo, show_progress, stop, group)
            best = RunState.from_record(checkpoint.state).best_checkpoint if checkpoint is not None else ""
            if best and (run_dir / best).is_file():  # best.h5 may lag its checkpoint after a crash
                trainer.write_run_file(BEST_FILE, lambda: keep_as(run_dir / best, run_dir / BEST_FILE))
            if checkpoint is not None and finished_with_nothing_to_do(checkpoint, config.epochs):
                state = RunState.from_record(checkpoint.state)
                if not (run_dir / MODEL_FILE).exists():  # killed between the last checkpoint and the model file
                    trainer.write_final_model(checkpoint.params, checkpoint.adagrad_sums, state,
                                              list(checkpoint.metrics), checkpoint.vocabulary,
                                              checkpoint.data_hashes, checkpoint.anchors)
                trainer.sync()
                echo(f"run already finished at step {state.step} ({state.finish_reason}); nothing to do")
                return EXIT_FINISHED
            trainer.write_run_file(CONFIG_FILE, lambda: write_config_file(run_dir, config.to_toml()))
            trainer.sync()
            if checkpoint is not None:
                checkpoint.config = config
            return trainer.run(checkpoint)


def majority_baseline_line(train: EncodedTreebank, dev: EncodedTreebank) -> str:
    """Dev accuracy of always predicting the training majority class (of all nodes; of roots)."""
    train_roots, dev_roots = train.label[train.start[1:] - 1], dev.label[dev.start[1:] - 1]
    node_class, root_class = majority_class(train.label), majority_class(train_roots)
    all_nodes = accuracy(dev.label, np.full_like(dev.label, node_class))
    roots = accuracy(dev_roots, np.full_like(dev_roots, root_class))
    return (f"dev majority-class baseline: all nodes {all_nodes:.4f} (class {node_class}), "
            f"roots {roots:.4f} (class {root_class})")


def format_epoch_line(record: dict) -> str:
    line = f"epoch {record['epoch']:>3}  step {record['step']:>7}  train loss {record['train_loss']:.4f}"
    if "dev_fine_all" in record:
        line += f"  dev fine all-nodes {record['dev_fine_all']:.4f}  root {record['dev_fine_root']:.4f}"
        if "dev_macro_f1_all" in record:
            line += f"  macro-F1 all-nodes {record['dev_macro_f1_all']:.4f}  root {record['dev_macro_f1_root']:.4f}"
    return line + f"  ({record['wall_seconds']:.1f} s)"
