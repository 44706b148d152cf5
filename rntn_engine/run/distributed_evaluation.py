"""`rntn evaluate --mpi`: checkpoints, or one checkpoint's treebank batches, divided over MPI ranks.

Several checkpoints: rank r scores checkpoints r, r + N, r + 2N, ... (with ``jobs`` worker
processes of its own, as without MPI) and the ranks exchange their rows as JSON; every
checkpoint is scored by one rank, so its rows are exactly the one-process rows.

One checkpoint: every rank reads the treebank and scores pieces r, r + N, ... of it (the
pieces of whole prediction batches that one process scores, run/checkpoint_evaluation.py).
The ranks exchange their counts (integers: summed in any order) and every chunk's and every
slice's loss per piece, which are then summed in piece and chunk order, the order of one
process: the table is bitwise the single-process table.

Every rank returns the same rows; the caller lets rank 0 print and write. Nothing is pickled:
rows and counts cross as JSON (floats written with all their digits).
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Callable

import numpy as np

from rntn_engine.data.checkpoint_file import CheckpointError, CheckpointUnavailableError
from rntn_engine.data.errors import InputError
from rntn_engine.run.checkpoint_evaluation import (
    WORKER_FAILED,
    EvaluationRow,
    ScoreTally,
    evaluate_many,
    row_from_record,
    row_record,
    score_treebank,
)
from rntn_engine.run.checkpoints import load_checkpoint
from rntn_engine.run.process_group import SingleProcess
from rntn_engine.run.score_counts import NodeCounts
from rntn_engine.run.scores import LabelScheme
from rntn_engine.run.slice_definitions import SliceDefinition
from rntn_engine.run.worker_processes import describe_exception


def evaluate_on_ranks(group: SingleProcess, paths: list[Path], treebanks: list[str], jobs: int,
                      neutral: int | None = -1, binarise: str | None = None,
                      progress: Callable[[int], None] | None = None,
                      slices: tuple[SliceDefinition, ...] = ()) -> list[EvaluationRow]:
    """The rows of :func:`evaluate_many` for ``paths`` on ``treebanks``, with the work divided over ``group``."""
    if len(paths) == 1:
        return _one_checkpoint_in_pieces(group, paths[0], treebanks, neutral, binarise, progress, tuple(slices))
    mine = paths[group.rank :: group.size]
    rows = evaluate_many(mine, treebanks, jobs, neutral, binarise, progress, tuple(slices)) if mine else []
    gathered = group.allgather_bytes(json.dumps([row_record(r) for r in rows]).encode("utf-8"))
    everything = [row_from_record(r) for data in gathered for r in json.loads(data.decode("utf-8"))]
    order = {str(p): i for i, p in enumerate(paths)}
    return sorted(everything, key=lambda r: order[r.checkpoint])  # stable: a checkpoint's rows keep their order


def _one_checkpoint_in_pieces(group: SingleProcess, path: Path, treebanks: list[str], neutral: int | None,
                              binarise: str | None, progress: Callable[[int], None] | None,
                              slices: tuple[SliceDefinition, ...]) -> list[EvaluationRow]:
    share = _my_share(group, str(path), treebanks, neutral, binarise, progress, slices)
    gathered = [json.loads(data.decode("utf-8")) for data in group.allgather_bytes(json.dumps(share).encode("utf-8"))]
    errors = [g["error"] for g in gathered if g.get("error")]
    if errors:  # the checkpoint could not be read (every rank reads it), or a rank failed outside a treebank
        return [EvaluationRow(str(path), tb, error=errors[0]) for tb in treebanks]
    step, epoch = gathered[0]["step"], gathered[0]["epoch"]
    rows = []
    for k, tb in enumerate(treebanks):
        parts = [g["treebanks"][k] for g in gathered]
        failed = [p["error"] for p in parts if p.get("error")]
        if failed:
            rows.append(EvaluationRow(str(path), tb, step, epoch, error=failed[0]))
            continue
        scheme = LabelScheme.for_classes(gathered[0]["num_classes"], neutral)
        tally = merge_tallies(scheme, len(slices), parts)
        rows.append(EvaluationRow(str(path), tb, step, epoch, tally.scores()))
        rows += [EvaluationRow(str(path), tb, step, epoch, scores, slice=s.name)
                 for s, scores in zip(slices, tally.slice_scores())]
    return rows


def _my_share(group: SingleProcess, path: str, treebanks: list[str], neutral: int | None, binarise: str | None,
              progress: Callable[[int], None] | None, slices: tuple[SliceDefinition, ...]) -> dict:
    """This rank's counts and chunk losses on every treebank, as JSON values (errors as text)."""
    try:
        checkpoint = load_checkpoint(path)
    except (CheckpointError, CheckpointUnavailableError, OSError) as exc:
        return {"error": str(exc)}
    except Exception as exc:  # the row's error, as from a worker process
        return {"error": WORKER_FAILED + describe_exception(exc)}
    state = checkpoint.state or {}
    share = {"step": state.get("step"), "epoch": state.get("epoch"), "num_classes": checkpoint.config.num_classes,
             "treebanks": []}
    scheme = LabelScheme.for_classes(checkpoint.config.num_classes, neutral)
    for tb in treebanks:
        losses: list = []
        try:
            tally = score_treebank(checkpoint, tb, scheme, binarise, progress=progress, slices=slices,
                                   share=(group.rank, group.size), piece_losses=losses)
        except (InputError, ValueError) as exc:
            share["treebanks"].append({"error": str(exc)})
            continue
        except Exception as exc:
            share["treebanks"].append({"error": WORKER_FAILED + describe_exception(exc)})
            continue
        share["treebanks"].append({"counts": integer_counts(tally.counts),
                                   "slices": [integer_counts(c) for c in tally.slices], "piece_losses": losses})
    return share


def integer_counts(counts: NodeCounts) -> dict:
    """Every integer count of a set of nodes (its integer arrays and integers), as JSON values."""
    out = {}
    for name, value in vars(counts).items():
        if isinstance(value, np.ndarray) and value.dtype.kind in "iu":
            out[name] = value.tolist()
        elif isinstance(value, int) and not isinstance(value, bool):
            out[name] = value
    return out


def _add_counts(counts: NodeCounts, values: dict) -> None:
    for name, value in values.items():
        current = getattr(counts, name)
        if isinstance(current, np.ndarray):
            current += np.asarray(value, dtype=current.dtype)
        else:
            setattr(counts, name, current + value)


def merge_tallies(scheme: LabelScheme, n_slices: int, parts: list[dict]) -> ScoreTally:
    """One tally from the ranks' parts: counts summed; the losses summed in piece order, the whole
    treebank's chunk by chunk, each slice's piece by piece, from 0.0 as one process does (so they
    are the same floats, bit for bit)."""
    tally = ScoreTally(scheme, n_slices=n_slices)
    for part in parts:
        _add_counts(tally.counts, part["counts"])
        for counts, values in zip(tally.slices, part["slices"]):
            _add_counts(counts, values)
    whole, per_slice = 0.0, [0.0] * n_slices
    pieces = sorted((tuple(piece) for part in parts for piece in part["piece_losses"]), key=lambda p: p[0])
    for _, chunk_losses, slice_losses in pieces:
        for value in chunk_losses:
            whole += value
        for k, value in enumerate(slice_losses):
            per_slice[k] += value
    tally.counts.loss_sum = whole
    for counts, value in zip(tally.slices, per_slice):
        counts.loss_sum = value
    return tally
