"""Score many checkpoints on one or more treebanks, in worker processes, and pick the best.

Each task is one checkpoint scored on every treebank, run in its own process
(``jobs`` at a time). A checkpoint that cannot be read or scored yields rows
carrying the error instead of scores; the other checkpoints go on.

Scores per (checkpoint, treebank): fine-grained accuracy at all labelled nodes and at
roots, binary accuracy at all nodes and at roots (run/scores.py says how), and the
mean cross-entropy per labelled node.
"""

from __future__ import annotations

import glob
import multiprocessing
import os
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np

from rntn_engine.data.batches import encode_treebank, phrase_lengths
from rntn_engine.data.checkpoint_file import CheckpointError, CheckpointUnavailableError
from rntn_engine.data.errors import InputError
from rntn_engine.data.tree import Tree
from rntn_engine.data.treebank_reader import read_trees
from rntn_engine.data.treebank_stats import PHRASE_LENGTH_BUCKETS, phrase_length_bucket_index
from rntn_engine.model.objective import TreeModelObjective
from rntn_engine.run.checkpoints import Checkpoint, load_checkpoint
from rntn_engine.run.evaluation import TreebankPredictions, predict_treebank
from rntn_engine.run.run_directory import is_run_directory, list_checkpoints
from rntn_engine.run.scores import (
    LabelScheme,
    accuracy,
    binary_accuracy,
    confusion_matrix,
    per_class_scores,
)

SCORE_NAMES = ("fine_all", "fine_root", "binary_all", "binary_root", "loss")  # loss: lower is better


@dataclass
class EvaluationRow:
    """The scores of one checkpoint on one treebank, or why there are none."""

    checkpoint: str
    treebank: str
    step: int | None = None
    epoch: int | None = None
    scores: dict[str, float] = field(default_factory=dict)
    error: str = ""
    best: bool = False

    def flat(self) -> dict:
        d = asdict(self)
        d.update(d.pop("scores"))
        return d


def expand_checkpoint_specs(specs: list[str]) -> list[Path]:
    """Files, glob patterns and run directories -> checkpoint files (run directories: all their checkpoints)."""
    found: list[Path] = []
    for spec in specs:
        path = Path(spec)
        if path.is_dir():
            if not is_run_directory(path) and not list_checkpoints(path):
                raise InputError(spec, "directory holds no checkpoints (expected a run directory of ours)")
            found.extend(c.path for c in list_checkpoints(path))
        elif any(ch in spec for ch in "*?["):
            matches = sorted(glob.glob(spec))
            if not matches:
                raise InputError(spec, "no file matches this pattern")
            found.extend(Path(m) for m in matches)
        else:
            found.append(path)  # a missing or damaged file becomes a row with its error
    unique: dict[str, Path] = {}
    for p in found:
        unique.setdefault(os.path.abspath(p), p)
    return list(unique.values())


def score_predictions(pred: TreebankPredictions, scheme: LabelScheme) -> dict[str, float]:
    """The five scores of SCORE_NAMES, plus node and tree counts."""
    root = pred.is_root
    return {
        "fine_all": accuracy(pred.gold, pred.predicted),
        "fine_root": accuracy(pred.gold[root], pred.predicted[root]),
        "binary_all": binary_accuracy(pred.gold, pred.probabilities, scheme),
        "binary_root": binary_accuracy(pred.gold[root], pred.probabilities[root], scheme),
        "loss": pred.mean_loss(),
        "labelled_nodes": pred.labelled_nodes(),
        "trees": int(root.sum()),
    }


def predict_with(checkpoint: Checkpoint, trees: list[Tree]) -> tuple[TreebankPredictions, np.ndarray]:
    """Forward a checkpoint's model over ``trees``; (predictions with probabilities, phrase lengths)."""
    bank = encode_treebank(trees, checkpoint.vocabulary)
    objective = TreeModelObjective(checkpoint.params)
    try:
        pred = predict_treebank(objective, checkpoint.params, bank, keep_probabilities=True)
    finally:
        objective.close()
    return pred, phrase_lengths(bank)


_TREEBANKS: dict[tuple, list[Tree]] = {}  # per worker process: treebanks already read


def _treebank(path: str, num_classes: int, binarise: str) -> list[Tree]:
    key = (os.path.abspath(path), num_classes, binarise)
    if key not in _TREEBANKS:
        _TREEBANKS[key] = read_trees(path, num_classes=num_classes, binarise=binarise)
    return _TREEBANKS[key]


def evaluate_checkpoint(path: str, treebanks: list[str], neutral: int | None = -1,
                        binarise: str | None = None) -> list[EvaluationRow]:
    """Score one checkpoint on every treebank (the task a worker runs). Errors become rows."""
    try:
        checkpoint = load_checkpoint(path)
    except (CheckpointError, CheckpointUnavailableError, OSError) as exc:
        return [EvaluationRow(str(path), tb, error=str(exc)) for tb in treebanks]
    state = checkpoint.state or {}
    step, epoch = state.get("step"), state.get("epoch")
    scheme = LabelScheme.for_classes(checkpoint.config.num_classes, neutral)
    rows = []
    for tb in treebanks:
        try:
            trees = _treebank(tb, checkpoint.config.num_classes, binarise or checkpoint.config.binarise)
            pred, _ = predict_with(checkpoint, trees)
            rows.append(EvaluationRow(str(path), tb, step, epoch, score_predictions(pred, scheme)))
        except InputError as exc:
            rows.append(EvaluationRow(str(path), tb, step, epoch, error=str(exc)))
    return rows


def evaluate_many(paths: list[Path], treebanks: list[str], jobs: int, neutral: int | None = -1,
                  binarise: str | None = None, progress: Callable[[int], None] | None = None) -> list[EvaluationRow]:
    """Score every checkpoint on every treebank with ``jobs`` worker processes; rows in input order."""
    results: dict[int, list[EvaluationRow]] = {}
    jobs = max(1, min(jobs, len(paths)))
    if jobs == 1:
        for i, p in enumerate(paths):
            results[i] = evaluate_checkpoint(str(p), treebanks, neutral, binarise)
            if progress:
                progress(1)
    else:
        # spawn: fresh interpreters, no inherited threads or locks; one BLAS thread each (objective.py)
        with ProcessPoolExecutor(jobs, mp_context=multiprocessing.get_context("spawn")) as pool:
            futures = {pool.submit(evaluate_checkpoint, str(p), treebanks, neutral, binarise): i
                       for i, p in enumerate(paths)}
            for future in as_completed(futures):
                results[futures[future]] = future.result()
                if progress:
                    progress(1)
    return [row for i in range(len(paths)) for row in results[i]]


def mark_best(rows: list[EvaluationRow], metric: str) -> None:
    """Set ``best`` on the best row of each treebank (loss: lowest; others: highest; ties: earliest step)."""
    if metric not in SCORE_NAMES:
        raise ValueError(f"metric must be one of {', '.join(SCORE_NAMES)}")
    sign = -1.0 if metric == "loss" else 1.0
    for tb in dict.fromkeys(r.treebank for r in rows):
        candidates = [r for r in rows if r.treebank == tb and not r.error and np.isfinite(r.scores.get(metric, np.nan))]
        if candidates:
            best = max(candidates, key=lambda r: (sign * r.scores[metric], -(r.step if r.step is not None else 0)))
            best.best = True


def detail_report(checkpoint: Checkpoint, trees: list[Tree], neutral: int | None = -1) -> dict:
    """Per-class precision/recall/F1 and confusion matrices (all nodes, roots) and accuracy by phrase length."""
    pred, lengths = predict_with(checkpoint, trees)
    C = checkpoint.config.num_classes
    scheme = LabelScheme.for_classes(C, neutral)
    report = {"scores": score_predictions(pred, scheme), "label_scheme": scheme.describe()}
    for scope, mask in (("all_nodes", np.ones_like(pred.is_root)), ("roots", pred.is_root)):
        confusion = confusion_matrix(pred.gold[mask], pred.predicted[mask], C)
        per_class = per_class_scores(confusion)
        report[scope] = {"confusion": confusion.tolist(),
                         "per_class": {k: v.tolist() for k, v in per_class.items()}}
    by_length = []
    bucket_of = phrase_length_bucket_index(lengths)
    for index, (name, _, _) in enumerate(PHRASE_LENGTH_BUCKETS):
        mask = (bucket_of == index) & (pred.gold >= 0)
        by_length.append({"words": name, "nodes": int(mask.sum()),
                          "fine": accuracy(pred.gold[mask], pred.predicted[mask]) if mask.any() else float("nan"),
                          "binary": binary_accuracy(pred.gold[mask], pred.probabilities[mask], scheme)
                          if mask.any() else float("nan")})
    report["by_phrase_length"] = by_length
    return report
