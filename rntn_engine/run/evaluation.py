"""Apply a model to a whole treebank with the batched forward kernels, and score it.

Legend: T trees, N nodes of the treebank (all trees end to end, as in EncodedTreebank), C classes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rntn_engine.data.batches import EncodedTreebank
from rntn_engine.model.objective import TreeModelObjective, split_into_chunks
from rntn_engine.model.parameters import Parameters
from rntn_engine.run.scores import accuracy

PREDICT_CHUNKS = 2  # pieces of each block, run on the objective's worker threads when it has them
PREDICT_BATCH_TREES = 1024  # trees per forward call when predicting: wider levels, better matrix products


@dataclass
class TreebankPredictions:
    """Gold and predicted labels of every node of a treebank, in EncodedTreebank order."""

    gold: np.ndarray  # (N,) int32, -1 unlabelled
    predicted: np.ndarray  # (N,) int32 argmax class
    is_root: np.ndarray  # (N,) bool
    loss_sum: float  # sum of -log y[t] over labelled nodes
    probabilities: np.ndarray | None = None  # (N, C) when asked for

    def labelled_nodes(self) -> int:
        return int(np.sum(self.gold >= 0))

    def mean_loss(self) -> float:
        n = self.labelled_nodes()
        return self.loss_sum / n if n else float("nan")

    def fine_scores(self) -> dict[str, float]:
        """Fine-grained accuracy at all labelled nodes and at roots."""
        return {
            "fine_all": accuracy(self.gold, self.predicted),
            "fine_root": accuracy(self.gold[self.is_root], self.predicted[self.is_root]),
        }


def predict_treebank(objective: TreeModelObjective, params: Parameters, bank: EncodedTreebank,
                     keep_probabilities: bool = False, batch_trees: int = PREDICT_BATCH_TREES,
                     loss_start: float = 0.0, chunk_losses: list[float] | None = None) -> TreebankPredictions:
    """Forward every tree of ``bank``; labels and (optionally) probabilities per node.

    ``loss_start`` is added to first: a treebank scored in pieces of whole batches
    (run/checkpoint_evaluation.py) then sums its loss in the same order as in one piece.
    ``chunk_losses``, when given, receives every chunk's loss in order: pieces scored by
    different processes are summed in one order later (run/distributed_evaluation.py).
    """
    n = bank.n_nodes
    predicted = np.empty(n, dtype=np.int32)
    probabilities = np.empty((n, params.shape.num_classes), dtype=params.flat.dtype) if keep_probabilities else None
    loss_sum = loss_start
    for a in range(0, bank.n_trees, batch_trees):
        z = min(a + batch_trees, bank.n_trees)
        # a fixed split (not the thread count) decides the arithmetic: the same labels on any machine
        chunks = split_into_chunks(bank, np.arange(a, z), PREDICT_CHUNKS)
        lo = int(bank.start[a])
        for chunk, (loss, Y) in zip(chunks, objective.forward_chunks(params, chunks)):
            hi = lo + chunk.n_nodes
            predicted[lo:hi] = np.argmax(Y, axis=1)
            if probabilities is not None:
                probabilities[lo:hi] = Y
            loss_sum += loss
            if chunk_losses is not None:
                chunk_losses.append(loss)
            lo = hi
    is_root = np.zeros(n, dtype=bool)
    is_root[bank.start[1:] - 1] = True
    return TreebankPredictions(bank.label.copy(), predicted, is_root, loss_sum, probabilities)
