"""Score many checkpoints on one or more treebanks, in worker processes, and pick the best.

Each task is one checkpoint scored on every treebank, run in a worker process
(``jobs`` at a time; run/worker_processes.py). A checkpoint that cannot be read or scored,
an exception in a worker or a worker that dies yields rows carrying the error instead of
scores; the other checkpoints go on.

Scores per (checkpoint, treebank): fine-grained accuracy at all labelled nodes and at
roots, binary accuracy at all nodes and at roots (run/scores.py says how), and the
mean cross-entropy per labelled node.
"""

from __future__ import annotations

import glob
import os
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np

from rntn_engine.data.batches import EncodedTreebank, bank_slice, concatenate_banks, phrase_lengths
from rntn_engine.data.checkpoint_file import CheckpointError, CheckpointUnavailableError
from rntn_engine.data.errors import InputError
from rntn_engine.data.treebank_encoding import iter_encoded_blocks
from rntn_engine.data.treebank_stats import PHRASE_LENGTH_BUCKETS, phrase_length_bucket_index
from rntn_engine.model.objective import TreeModelObjective
from rntn_engine.run.checkpoints import Checkpoint, load_checkpoint
from rntn_engine.run.evaluation import PREDICT_BATCH_TREES, TreebankPredictions, predict_treebank
from rntn_engine.run.fault_injection import EVALUATE_POINT, fault_from_environment
from rntn_engine.run.run_directory import is_run_directory, list_checkpoints
from rntn_engine.run.scores import LabelScheme, binary_counts, confusion_matrix, per_class_scores
from rntn_engine.run.worker_processes import TaskFailed, WorkersStopped, describe_exception, run_in_workers

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


class ScoreTally:
    """The counts behind every score, summed piece by piece over a treebank (memory: one piece).

    ``detail`` also keeps the confusion matrices (all nodes, roots) and the counts by
    phrase length that :func:`detail_report` prints.
    """

    def __init__(self, scheme: LabelScheme, detail: bool = False) -> None:
        C = scheme.num_classes
        self.scheme = scheme
        self.detail = detail
        self.fine = np.zeros((2, 2), dtype=np.int64)  # [all nodes, roots] x [right, labelled]
        self.binary = np.zeros((2, 2), dtype=np.int64)  # [all nodes, roots] x [right side, counted]
        self.loss_sum = 0.0
        self.trees = 0
        self.confusion = np.zeros((2, C, C), dtype=np.int64)  # [all nodes, roots]
        self.by_length = np.zeros((len(PHRASE_LENGTH_BUCKETS), 4), dtype=np.int64)  # nodes, fine right, binary

    def add(self, pred: TreebankPredictions, bank: EncodedTreebank) -> None:
        """Count one piece (its predictions with probabilities, and its bank)."""
        self.loss_sum = pred.loss_sum  # the piece went on from the running sum (predict_treebank's loss_start)
        self.trees += bank.n_trees
        C = self.scheme.num_classes
        for k, mask in enumerate((slice(None), pred.is_root)):
            gold, predicted, probabilities = pred.gold[mask], pred.predicted[mask], pred.probabilities[mask]
            labelled = gold >= 0
            self.fine[k] += (int(np.count_nonzero(gold[labelled] == predicted[labelled])), int(labelled.sum()))
            self.binary[k] += binary_counts(gold, probabilities, self.scheme)
            if self.detail:
                self.confusion[k] += confusion_matrix(gold, predicted, C)
        if self.detail:
            bucket_of = phrase_length_bucket_index(phrase_lengths(bank))
            labelled = pred.gold >= 0
            for index in range(len(PHRASE_LENGTH_BUCKETS)):
                mask = (bucket_of == index) & labelled
                if mask.any():
                    self.by_length[index, 0] += int(mask.sum())
                    self.by_length[index, 1] += int(np.count_nonzero(pred.gold[mask] == pred.predicted[mask]))
                    self.by_length[index, 2:] += binary_counts(pred.gold[mask], pred.probabilities[mask], self.scheme)

    def scores(self) -> dict[str, float]:
        """The five scores of SCORE_NAMES, plus node and tree counts."""
        ratio = _ratio
        labelled = int(self.fine[0, 1])
        return {
            "fine_all": ratio(*self.fine[0]),
            "fine_root": ratio(*self.fine[1]),
            "binary_all": ratio(*self.binary[0]),
            "binary_root": ratio(*self.binary[1]),
            "loss": self.loss_sum / labelled if labelled else float("nan"),
            "labelled_nodes": labelled,
            "trees": self.trees,
        }


def _ratio(right, counted) -> float:
    return int(right) / int(counted) if counted else float("nan")


def score_treebank(checkpoint: Checkpoint, treebank: str, scheme: LabelScheme, binarise: str | None = None,
                   detail: bool = False, progress: Callable[[int], None] | None = None,
                   share: tuple[int, int] = (0, 1), chunk_losses: list | None = None) -> ScoreTally:
    """Forward a checkpoint's model over a treebank file read in blocks, and count its scores.

    The file is read block by block and scored in pieces of whole prediction batches
    (PREDICT_BATCH_TREES trees), so the batches, and with them every bit of the
    result, are those of one pass over the whole treebank, and memory stays at one
    piece. ``progress`` gets the number of trees scored, after every piece.

    ``share=(r, n)`` scores only batches r, r + n, r + 2n, ... (one MPI rank's share;
    run/distributed_evaluation.py) and appends ``(batch, [loss of each chunk])`` to
    ``chunk_losses``, from which the loss of the whole treebank is summed in one order.
    """
    config = checkpoint.config
    tally = ScoreTally(scheme, detail)
    objective = TreeModelObjective(checkpoint.params)
    pending: EncodedTreebank | None = None
    batches_seen = 0

    def score(piece: EncodedTreebank) -> None:
        nonlocal batches_seen
        if share[1] > 1:
            for a in range(0, piece.n_trees, PREDICT_BATCH_TREES):
                batches_seen += 1
                if (batches_seen - 1) % share[1] == share[0]:
                    losses: list[float] = []
                    part = bank_slice(piece, a, min(a + PREDICT_BATCH_TREES, piece.n_trees))
                    tally.add(predict_treebank(objective, checkpoint.params, part, keep_probabilities=True,
                                               chunk_losses=losses), part)
                    chunk_losses.append((batches_seen - 1, losses))
                    if progress is not None:
                        progress(part.n_trees)
            return
        pred = predict_treebank(objective, checkpoint.params, piece, keep_probabilities=True,
                                loss_start=tally.loss_sum)
        tally.add(pred, piece)
        if progress is not None:
            progress(piece.n_trees)

    try:
        for block in iter_encoded_blocks(treebank, checkpoint.vocabulary, num_classes=config.num_classes,
                                         binarise=binarise or config.binarise):
            pending = block if pending is None else concatenate_banks(pending, block)
            cut = pending.n_trees - pending.n_trees % PREDICT_BATCH_TREES
            if cut:
                score(bank_slice(pending, 0, cut))
                pending = bank_slice(pending, cut, pending.n_trees) if cut < pending.n_trees else None
        if pending is not None:
            score(pending)
    finally:
        objective.close()
    return tally


def evaluate_checkpoint(path: str, treebanks: list[str], neutral: int | None = -1,
                        binarise: str | None = None, progress: Callable[[int], None] | None = None) -> list[EvaluationRow]:
    """Score one checkpoint on every treebank (what a worker's task runs). Errors become rows."""
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
            tally = score_treebank(checkpoint, tb, scheme, binarise, progress=progress)
            rows.append(EvaluationRow(str(path), tb, step, epoch, tally.scores()))
        except InputError as exc:
            rows.append(EvaluationRow(str(path), tb, step, epoch, error=str(exc)))
    return rows


WORKER_FAILED = "worker process failed: "  # starts the error of a row whose worker raised or died


def row_record(row: EvaluationRow) -> dict:
    """A row as JSON-ready values (what crosses a worker's pipe or an MPI exchange)."""
    return asdict(row)


def row_from_record(record: dict) -> EvaluationRow:
    return EvaluationRow(**record)


def score_task(task: dict, progress: Callable[[int], None] | None) -> list[dict]:
    """A worker's task: one checkpoint on every treebank, as row records."""
    fault = fault_from_environment()
    if fault is not None:
        fault(EVALUATE_POINT + Path(task["path"]).name)  # tests only: an exception or death in this task
    rows = evaluate_checkpoint(task["path"], task["treebanks"], task["neutral"], task["binarise"], progress)
    return [row_record(r) for r in rows]


def evaluate_many(paths: list[Path], treebanks: list[str], jobs: int, neutral: int | None = -1,
                  binarise: str | None = None, progress: Callable[[int], None] | None = None,
                  should_stop: Callable[[], bool] | None = None) -> list[EvaluationRow]:
    """Score every checkpoint on every treebank with ``jobs`` worker processes; rows in input order.

    ``progress`` gets numbers of trees scored, as the workers go. An exception while scoring a
    checkpoint, or the death of the worker scoring it, becomes that checkpoint's rows' error.
    ``should_stop`` is asked as the work goes: when it says yes, every worker is ended and
    :class:`~rntn_engine.run.worker_processes.WorkersStopped` raised.
    """
    tasks = [{"path": str(p), "treebanks": treebanks, "neutral": neutral, "binarise": binarise} for p in paths]
    jobs = max(1, min(jobs, len(paths)))
    if jobs == 1:
        def progress_or_stop(n: int) -> None:
            if progress is not None:
                progress(n)
            if should_stop is not None and should_stop():
                raise WorkersStopped()

        results = []
        for task in tasks:
            if should_stop is not None and should_stop():
                raise WorkersStopped()
            try:
                results.append(score_task(task, progress_or_stop))
            except Exception as exc:  # the row's error, as from a worker process
                results.append(TaskFailed(describe_exception(exc)))
    else:
        results = run_in_workers(score_task, tasks, jobs, progress, should_stop)
    rows = []
    for task, result in zip(tasks, results):
        if isinstance(result, TaskFailed):
            rows += [EvaluationRow(task["path"], tb, error=WORKER_FAILED + result.error) for tb in treebanks]
        else:
            rows += [row_from_record(r) for r in result]
    return rows


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


def detail_report(checkpoint: Checkpoint, treebank: str, neutral: int | None = -1, binarise: str | None = None,
                  progress: Callable[[int], None] | None = None) -> dict:
    """Per-class precision/recall/F1 and confusion matrices (all nodes, roots) and accuracy by phrase length."""
    C = checkpoint.config.num_classes
    scheme = LabelScheme.for_classes(C, neutral)
    tally = score_treebank(checkpoint, treebank, scheme, binarise, detail=True, progress=progress)
    report = {"scores": tally.scores(), "label_scheme": scheme.describe()}
    for k, scope in enumerate(("all_nodes", "roots")):
        per_class = per_class_scores(tally.confusion[k])
        report[scope] = {"confusion": tally.confusion[k].tolist(),
                         "per_class": {key: v.tolist() for key, v in per_class.items()}}
    report["by_phrase_length"] = [
        {"words": name, "nodes": int(nodes), "fine": _ratio(fine, nodes), "binary": _ratio(right, counted)}
        for (name, _, _), (nodes, fine, right, counted) in zip(PHRASE_LENGTH_BUCKETS, tally.by_length)]
    return report
