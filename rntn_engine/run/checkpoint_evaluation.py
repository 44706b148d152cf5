"""Score many checkpoints on one or more treebanks, in worker processes, and pick the best.

Each task is one checkpoint scored on every treebank, run in a worker process
(``jobs`` at a time; run/worker_processes.py). A checkpoint that cannot be read or scored,
an exception in a worker or a worker that dies yields rows carrying the error instead of
scores; the other checkpoints go on.

Scores per (checkpoint, treebank): fine-grained accuracy, binary accuracy and macro-F1 at all
labelled nodes and at roots (run/scores.py says how), and the mean cross-entropy per labelled
node; the same for each slice (run/slice_definitions.py), as rows after the treebank's own.
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
from rntn_engine.data.treebank_encoding import iter_encoded_blocks_and_words
from rntn_engine.data.treebank_stats import PHRASE_LENGTH_BUCKETS, phrase_length_bucket_index
from rntn_engine.model.objective import TreeModelObjective
from rntn_engine.run.checkpoints import Checkpoint, load_checkpoint
from rntn_engine.run.evaluation import PREDICT_BATCH_TREES, TreebankPredictions, predict_treebank
from rntn_engine.run.fault_injection import EVALUATE_POINT, fault_from_environment
from rntn_engine.run.run_directory import is_run_directory, list_checkpoints
from rntn_engine.run.score_counts import NodeCounts, ratio
from rntn_engine.run.scores import LabelScheme, binary_counts, per_class_scores
from rntn_engine.run.slice_definitions import SliceDefinition
from rntn_engine.run.slice_masks import SliceSelector
from rntn_engine.run.worker_processes import TaskFailed, WorkersStopped, describe_exception, run_in_workers

SCORE_NAMES = ("fine_all", "fine_root", "binary_all", "binary_root", "macro_f1_all", "macro_f1_root",
               "loss")  # loss: lower is better


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
    slice: str = ""  # "" for the whole treebank, else the slice's name

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

    ``counts`` holds the whole treebank's (its loss is the kernels' own sum); ``slices`` one
    :class:`NodeCounts` per slice, given the slices' node masks with each piece. ``detail``
    also keeps the counts by phrase length that :func:`detail_report` prints.
    """

    def __init__(self, scheme: LabelScheme, detail: bool = False, n_slices: int = 0) -> None:
        self.scheme = scheme
        self.detail = detail
        self.counts = NodeCounts(scheme)
        self.slices = [NodeCounts(scheme) for _ in range(n_slices)]
        self.by_length = np.zeros((len(PHRASE_LENGTH_BUCKETS), 4), dtype=np.int64)  # nodes, fine right, binary

    @property
    def loss_sum(self) -> float:
        return self.counts.loss_sum

    @property
    def trees(self) -> int:
        return self.counts.trees

    @property
    def confusion(self) -> np.ndarray:
        return self.counts.confusion

    def add(self, pred: TreebankPredictions, bank: EncodedTreebank, masks: np.ndarray | None = None) -> None:
        """Count one piece (its predictions with probabilities, and its bank); ``masks`` (slices, N) bool."""
        # the piece went on from the running sum (predict_treebank's loss_start)
        self.counts.add(pred.gold, pred.predicted, pred.probabilities, pred.is_root, bank.n_trees, 0.0)
        self.counts.loss_sum = pred.loss_sum  # the kernels' sum, bit for bit as in one pass
        for counts, mask in zip(self.slices, masks if masks is not None else ()):
            trees = int(np.count_nonzero(np.logical_or.reduceat(mask, bank.start[:-1]))) if bank.n_trees else 0
            counts.add(pred.gold[mask], pred.predicted[mask], pred.probabilities[mask], pred.is_root[mask], trees)
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
        """The scores of SCORE_NAMES, plus node and tree counts."""
        return self.counts.scores()

    def slice_scores(self) -> list[dict[str, float]]:
        """The same scores for each slice, in the slices' order."""
        return [counts.scores() for counts in self.slices]


def score_treebank(checkpoint: Checkpoint, treebank: str, scheme: LabelScheme, binarise: str | None = None,
                   detail: bool = False, progress: Callable[[int], None] | None = None,
                   slices: tuple[SliceDefinition, ...] = (), share: tuple[int, int] = (0, 1),
                   piece_losses: list | None = None) -> ScoreTally:
    """Forward a checkpoint's model over a treebank file read in blocks, and count its scores.

    The file is read block by block and scored in pieces of whole prediction batches
    (PREDICT_BATCH_TREES trees), so the batches, and with them every bit of the
    result, are those of one pass over the whole treebank, and memory stays at one
    piece. ``progress`` gets the number of trees scored, after every piece. ``slices``
    are counted as well (ValueError if a root-class slice names a class the model lacks).

    ``share=(r, n)`` scores only pieces r, r + n, r + 2n, ... (one MPI rank's share;
    run/distributed_evaluation.py); ``piece_losses`` then receives, per scored piece,
    ``(piece, [loss of each chunk], [loss of each slice])``, from which the losses are summed
    later in the order of one pass (the other counts are integers, summed in any order).
    """
    config = checkpoint.config
    tally = ScoreTally(scheme, detail, len(slices))
    selector = SliceSelector(list(slices), config.names_of_classes(), scheme) if slices else None
    objective = TreeModelObjective(checkpoint.params)
    pending: EncodedTreebank | None = None
    pending_masks: np.ndarray | None = None  # (slices, nodes of pending)
    pieces_seen = 0

    def score(piece: EncodedTreebank, masks: np.ndarray | None) -> None:
        nonlocal pieces_seen
        index, pieces_seen = pieces_seen, pieces_seen + 1
        if index % share[1] != share[0]:
            return
        chunk_losses = [] if piece_losses is not None else None
        if piece_losses is not None:
            for counts in tally.slices:  # each slice's sum then holds this piece's loss alone
                counts.loss_sum = 0.0
        pred = predict_treebank(objective, checkpoint.params, piece, keep_probabilities=True,
                                loss_start=tally.loss_sum, chunk_losses=chunk_losses)
        tally.add(pred, piece, masks)
        if piece_losses is not None:
            piece_losses.append((index, chunk_losses, [counts.loss_sum for counts in tally.slices]))
        if progress is not None:
            progress(piece.n_trees)

    try:
        for block, token, words in iter_encoded_blocks_and_words(
                treebank, checkpoint.vocabulary, num_classes=config.num_classes, binarise=binarise or config.binarise):
            masks = selector.masks(block, token, words) if selector else np.zeros((0, block.n_nodes), dtype=bool)
            pending = block if pending is None else concatenate_banks(pending, block)
            pending_masks = masks if pending_masks is None else np.concatenate([pending_masks, masks], axis=1)
            cut = pending.n_trees - pending.n_trees % PREDICT_BATCH_TREES
            if cut:
                at = int(pending.start[cut])
                score(bank_slice(pending, 0, cut), pending_masks[:, :at])
                pending = bank_slice(pending, cut, pending.n_trees) if cut < pending.n_trees else None
                pending_masks = pending_masks[:, at:] if pending is not None else None
        if pending is not None:
            score(pending, pending_masks)
    finally:
        objective.close()
    return tally


def evaluate_checkpoint(path: str, treebanks: list[str], neutral: int | None = -1,
                        binarise: str | None = None, progress: Callable[[int], None] | None = None,
                        slices: tuple[SliceDefinition, ...] = ()) -> list[EvaluationRow]:
    """Score one checkpoint on every treebank (what a worker's task runs): per treebank a row for the whole
    treebank, then one per slice. Errors become rows."""
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
            tally = score_treebank(checkpoint, tb, scheme, binarise, progress=progress, slices=slices)
            rows.append(EvaluationRow(str(path), tb, step, epoch, tally.scores()))
            rows += [EvaluationRow(str(path), tb, step, epoch, scores, slice=s.name)
                     for s, scores in zip(slices, tally.slice_scores())]
        except (InputError, ValueError) as exc:
            rows.append(EvaluationRow(str(path), tb, step, epoch, error=str(exc)))
    return rows


WORKER_FAILED = "worker process failed: "  # starts the error of a row whose worker raised or died


def row_record(row: EvaluationRow) -> dict:
    """A row as JSON-ready values (what crosses a worker's pipe or an MPI exchange)."""
    return asdict(row)


def row_from_record(record: dict) -> EvaluationRow:
    return EvaluationRow(**record)


def slice_record(definition: SliceDefinition) -> dict:
    """A slice as JSON-ready values (a worker's task carries its slices)."""
    return asdict(definition)


def slice_from_record(record: dict) -> SliceDefinition:
    return SliceDefinition(**{k: tuple(v) if isinstance(v, list) else v for k, v in record.items()})


def score_task(task: dict, progress: Callable[[int], None] | None) -> list[dict]:
    """A worker's task: one checkpoint on every treebank, as row records."""
    fault = fault_from_environment()
    if fault is not None:
        fault(EVALUATE_POINT + Path(task["path"]).name)  # tests only: an exception or death in this task
    slices = tuple(slice_from_record(r) for r in task["slices"])
    rows = evaluate_checkpoint(task["path"], task["treebanks"], task["neutral"], task["binarise"], progress, slices)
    return [row_record(r) for r in rows]


def evaluate_many(paths: list[Path], treebanks: list[str], jobs: int, neutral: int | None = -1,
                  binarise: str | None = None, progress: Callable[[int], None] | None = None,
                  slices: tuple[SliceDefinition, ...] = (),
                  should_stop: Callable[[], bool] | None = None) -> list[EvaluationRow]:
    """Score every checkpoint on every treebank (and its ``slices``) with ``jobs`` worker processes; rows
    in input order.

    ``progress`` gets numbers of trees scored, as the workers go. An exception while scoring a
    checkpoint, or the death of the worker scoring it, becomes that checkpoint's rows' error.
    ``should_stop`` is asked as the work goes: when it says yes, every worker is ended and
    :class:`~rntn_engine.run.worker_processes.WorkersStopped` raised.
    """
    tasks = [{"path": str(p), "treebanks": treebanks, "neutral": neutral, "binarise": binarise,
              "slices": [slice_record(s) for s in slices]} for p in paths]
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
    """Set ``best`` on the best whole-treebank row of each treebank (loss: lowest; others: highest; ties:
    earliest step). Slice rows are never marked."""
    if metric not in SCORE_NAMES:
        raise ValueError(f"metric must be one of {', '.join(SCORE_NAMES)}")
    sign = -1.0 if metric == "loss" else 1.0
    for tb in dict.fromkeys(r.treebank for r in rows):
        candidates = [r for r in rows if r.treebank == tb and not r.slice and not r.error and np.isfinite(r.scores.get(metric, np.nan))]
        if candidates:
            best = max(candidates, key=lambda r: (sign * r.scores[metric], -(r.step if r.step is not None else 0)))
            best.best = True


def detail_report(checkpoint: Checkpoint, treebank: str, neutral: int | None = -1, binarise: str | None = None,
                  progress: Callable[[int], None] | None = None, slices: tuple[SliceDefinition, ...] = ()) -> dict:
    """Per-class precision/recall/F1 and confusion matrices (all nodes, roots), accuracy by phrase length,
    and for each slice its scores with the same per-class breakdown."""
    C = checkpoint.config.num_classes
    scheme = LabelScheme.for_classes(C, neutral)
    tally = score_treebank(checkpoint, treebank, scheme, binarise, detail=True, progress=progress, slices=slices)
    report = {"scores": tally.scores(), "label_scheme": scheme.describe(),
              "class_names": checkpoint.config.names_of_classes()}
    report.update(_per_class_breakdown(tally.counts))
    report["by_phrase_length"] = [
        {"words": name, "nodes": int(nodes), "fine": ratio(fine, nodes), "binary": ratio(right, counted)}
        for (name, _, _), (nodes, fine, right, counted) in zip(PHRASE_LENGTH_BUCKETS, tally.by_length)]
    report["slices"] = [{"slice": s.name, "definition": s.describe(), "scores": counts.scores(),
                         **_per_class_breakdown(counts)} for s, counts in zip(slices, tally.slices)]
    return report


def _per_class_breakdown(counts: NodeCounts) -> dict:
    out = {}
    for k, scope in enumerate(("all_nodes", "roots")):
        per_class = per_class_scores(counts.confusion[k])
        out[scope] = {"confusion": counts.confusion[k].tolist(),
                      "per_class": {key: v.tolist() for key, v in per_class.items()}}
    return out
