"""The training loop: one flat loop in commented phases.

Determinism: parameters are initialised from ``seed``; the order of epoch e is a
permutation drawn from a generator seeded with (seed, e), so any epoch's order can
be rebuilt from two integers and a run's position is (epoch, position in epoch).
Minibatches are split into ``grad_chunks`` fixed pieces (model/objective.py), so
the thread count never changes the numbers.
"""

from __future__ import annotations

import hashlib
import json
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np
from tqdm import tqdm

from rntn_engine.data.batches import EncodedTreebank, encode_treebank
from rntn_engine.data.treebank_reader import read_trees
from rntn_engine.data.vocabulary import Vocabulary, build_vocabulary
from rntn_engine.model.adagrad import AdaGrad
from rntn_engine.model.objective import L2Strengths, TreeModelObjective, split_into_chunks
from rntn_engine.model.parameters import ModelShape, Parameters, init_parameters
from rntn_engine.run.checkpoints import save_checkpoint
from rntn_engine.run.evaluation import predict_treebank
from rntn_engine.run.run_config import TrainConfig
from rntn_engine.run.run_errors import TrainingError
from rntn_engine.run.scores import accuracy, majority_class

MODEL_FILE = "model.h5"  # the trained parameters and vocabulary, in the run directory
CONFIG_FILE = "config.toml"  # the resolved configuration
METRICS_FILE = "metrics.jsonl"  # one JSON line per evaluation


def file_sha256(path: str | Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            digest.update(block)
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


def load_training_data(config: TrainConfig, vocabulary: Vocabulary | None = None) -> TrainingData:
    """Read the treebanks (errors point at file:line:column), build or reuse the vocabulary, encode."""
    train_trees = read_trees(config.train_file, num_classes=config.num_classes, binarise=config.binarise)
    if vocabulary is None:
        vocabulary = build_vocabulary(train_trees, config.min_count, config.lowercase)
    hashes = {"train_file": file_sha256(config.train_file)}
    dev = None
    if config.dev_file:
        dev_trees = read_trees(config.dev_file, num_classes=config.num_classes, binarise=config.binarise)
        dev = encode_treebank(dev_trees, vocabulary)
        hashes["dev_file"] = file_sha256(config.dev_file)
    return TrainingData(vocabulary, encode_treebank(train_trees, vocabulary), dev, hashes)


@dataclass
class TrainResult:
    params: Parameters
    vocabulary: Vocabulary
    history: list[dict]
    run_dir: Path


def train(config: TrainConfig, echo: Callable[[str], None] = print, show_progress: bool | None = None) -> TrainResult:
    """Train from scratch as ``config`` says; write the model file, config and metrics into the run directory."""
    config.validate()
    run_dir = config.resolved_run_dir()
    run_dir.mkdir(parents=True, exist_ok=True)
    (run_dir / CONFIG_FILE).write_text(config.to_toml(), encoding="utf-8")
    (run_dir / METRICS_FILE).write_text("", encoding="utf-8")

    # --- data ---------------------------------------------------------------------------------------
    data = load_training_data(config)
    bank = data.train
    shape = ModelShape(config.model, len(data.vocabulary), config.dim, config.num_classes, config.dtype)
    echo(f"training {config.model} d={config.dim} on {bank.n_trees} trees ({bank.n_nodes} nodes), "
         f"vocabulary {len(data.vocabulary)} words, {shape.count():,} parameters "
         f"({shape.training_bytes() / 2**20:.1f} MiB with gradient and AdaGrad state)")
    if data.dev is not None:
        echo(majority_baseline_line(bank, data.dev))

    # --- model and optimiser ------------------------------------------------------------------------
    params = init_parameters(shape, np.random.default_rng(config.seed))
    grads = params.zeros_like()
    l2 = L2Strengths(config.l2_words, config.l2_compose, config.l2_tensor, config.l2_classifier)
    objective = TreeModelObjective(params, l2, threads=config.threads)
    optimiser = AdaGrad(params, config.lr, config.adagrad_eps)
    steps_per_epoch = -(-bank.n_trees // config.batch_size)
    history: list[dict] = []
    step = 0
    show = show_progress if show_progress is not None else None  # None: tqdm decides (quiet when not a tty)
    start_time = time.perf_counter()

    try:
        for epoch in range(config.epochs):
            # --- schedule: this epoch's order, optional AdaGrad reset ----------------------------------
            if config.adagrad_reset_epochs and epoch > 0 and epoch % config.adagrad_reset_epochs == 0:
                optimiser.reset()
            order = epoch_order(config.seed, epoch, bank.n_trees)
            epoch_loss, epoch_nodes, t0 = 0.0, 0, time.perf_counter()
            bar = tqdm(total=steps_per_epoch, desc=f"epoch {epoch + 1}/{config.epochs}", unit="batch",
                       disable=None if show is None else not show, leave=False)
            # --- forward / backward / update, one minibatch at a time --------------------------------
            for position in range(0, bank.n_trees, config.batch_size):
                tree_ids = order[position : position + config.batch_size]
                chunks = split_into_chunks(bank, tree_ids, config.grad_chunks)
                loss = objective.loss_and_gradient(params, grads, chunks)
                if not np.isfinite(loss):
                    raise TrainingError(f"loss became {loss} at epoch {epoch + 1}, step {step + 1}: "
                                        f"lower --lr (now {config.lr}) or raise the L2 strengths")
                optimiser.step(params, grads)
                step += 1
                epoch_loss += loss * len(tree_ids)
                epoch_nodes += sum(c.n_nodes for c in chunks)
                bar.update(1)
            bar.close()
            # --- evaluate and log ----------------------------------------------------------------------
            seconds = time.perf_counter() - t0
            record = {"step": step, "epoch": epoch + 1, "train_loss": epoch_loss / bank.n_trees,
                      "wall_seconds": round(time.perf_counter() - start_time, 3),
                      "nodes_per_second": round(epoch_nodes / seconds, 1) if seconds > 0 else None}
            if data.dev is not None:
                dev = predict_treebank(objective, params, data.dev)
                record.update({f"dev_{k}": v for k, v in dev.fine_scores().items()})
                record["dev_loss"] = dev.mean_loss()
            history.append(record)
            with open(run_dir / METRICS_FILE, "a", encoding="utf-8") as fh:
                fh.write(json.dumps(record) + "\n")
            echo(format_epoch_line(record, seconds))
    finally:
        objective.close()

    # --- save --------------------------------------------------------------------------------------
    state = {"step": step, "epoch": config.epochs, "position": 0, "finished": True}
    save_checkpoint(run_dir / MODEL_FILE, params, data.vocabulary, config, optimiser, state, history, data.hashes)
    echo(f"saved {run_dir / MODEL_FILE}")
    return TrainResult(params, data.vocabulary, history, run_dir)


def majority_baseline_line(train: EncodedTreebank, dev: EncodedTreebank) -> str:
    """Dev accuracy of always predicting the training majority class (of all nodes; of roots)."""
    train_roots, dev_roots = train.label[train.start[1:] - 1], dev.label[dev.start[1:] - 1]
    node_class, root_class = majority_class(train.label), majority_class(train_roots)
    all_nodes = accuracy(dev.label, np.full_like(dev.label, node_class))
    roots = accuracy(dev_roots, np.full_like(dev_roots, root_class))
    return (f"dev majority-class baseline: all nodes {all_nodes:.4f} (class {node_class}), "
            f"roots {roots:.4f} (class {root_class})")


def format_epoch_line(record: dict, seconds: float) -> str:
    line = f"epoch {record['epoch']:>3}  step {record['step']:>7}  train loss {record['train_loss']:.4f}"
    if "dev_fine_all" in record:
        line += f"  dev fine all-nodes {record['dev_fine_all']:.4f}  root {record['dev_fine_root']:.4f}"
    return line + f"  ({seconds:.1f} s)"
