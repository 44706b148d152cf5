"""`rntn evaluate --mpi`: checkpoints, or one checkpoint's treebank batches, divided over MPI ranks.

Several checkpoints: rank r scores checkpoints r, r + N, r + 2N, ... (with ``jobs`` worker
processes of its own, as without MPI) and the ranks exchange their rows as JSON; every
checkpoint is scored by one rank, so its rows are exactly the one-process rows.

One checkpoint: every rank reads the treebank and scores prediction batches r, r + N, ...
(PREDICT_BATCH_TREES trees each: the batches of one process). The ranks exchange their
counts (integers: summed in any order) and every chunk's loss, which are then summed in
batch and chunk order, the order of one process: the table is bitwise the single-process
table.

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
from rntn_engine.run.scores import LabelScheme
from rntn_engine.run.worker_processes import describe_exception


def evaluate_on_ranks(group: SingleProcess, paths: list[Path], treebanks: list[str], jobs: int,
                      neutral: int | None = -1, binarise: str | None = None,
                      progress: Callable[[int], None] | None = None) -> list[EvaluationRow]:
    """The rows of :func:`evaluate_many` for ``paths`` on ``treebanks``, with the work divided over ``group``."""
    if len(paths) == 1:
        return _one_checkpoint_in_batches(group, paths[0], treebanks, neutral, binarise, progress)
    mine = paths[group.rank :: group.size]
    rows = evaluate_many(mine, treebanks, jobs, neutral, binarise, progress) if mine else []
    gathered = group.allgather_bytes(json.dumps([row_record(r) for r in rows]).encode("utf-8"))
    everything = [row_from_record(r) for data in gathered for r in json.loads(data.decode("utf-8"))]
    order = {str(p): i for i, p in enumerate(paths)}
    return sorted(everything, key=lambda r: order[r.checkpoint])  # stable: a checkpoint's rows keep their order


def _one_checkpoint_in_batches(group: SingleProcess, path: Path, treebanks: list[str], neutral: int | None,
                               binarise: str | None, progress: Callable[[int], None] | None) -> list[EvaluationRow]:
    share = _my_share(group, str(path), treebanks, neutral, binarise, progress)
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
        rows.append(EvaluationRow(str(path), tb, step, epoch, merge_tallies(scheme, parts).scores()))
    return rows


def _my_share(group: SingleProcess, path: str, treebanks: list[str], neutral: int | None, binarise: str | None,
              progress: Callable[[int], None] | None) -> dict:
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
            tally = score_treebank(checkpoint, tb, scheme, binarise, progress=progress,
                                   share=(group.rank, group.size), chunk_losses=losses)
        except InputError as exc:
            share["treebanks"].append({"error": str(exc)})
            continue
        except Exception as exc:
            share["treebanks"].append({"error": WORKER_FAILED + describe_exception(exc)})
            continue
        share["treebanks"].append({"counts": tally_counts(tally), "chunk_losses": losses})
    return share


def tally_counts(tally: ScoreTally) -> dict:
    """Every count of a tally (its integer arrays and integers), as JSON values."""
    counts = {}
    for name, value in vars(tally).items():
        if isinstance(value, np.ndarray) and value.dtype.kind in "iu":
            counts[name] = value.tolist()
        elif isinstance(value, int) and not isinstance(value, bool):
            counts[name] = value
    return counts


def merge_tallies(scheme: LabelScheme, parts: list[dict]) -> ScoreTally:
    """One tally from the ranks' parts: counts summed; the loss summed chunk by chunk in batch order,
    starting from 0.0 as one process does (so it is the same float, bit for bit)."""
    tally = ScoreTally(scheme)
    for part in parts:
        for name, value in part["counts"].items():
            current = getattr(tally, name)
            if isinstance(current, np.ndarray):
                current += np.asarray(value, dtype=current.dtype)
            else:
                setattr(tally, name, current + value)
    loss = 0.0
    for _, losses in sorted((batch, losses) for part in parts for batch, losses in part["chunk_losses"]):
        for value in losses:
            loss += value
    tally.loss_sum = loss
    return tally
