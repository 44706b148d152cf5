"""The counts behind every score of a set of nodes (a whole treebank, or one slice of it), summed
piece by piece, so that a treebank scored in blocks gives the scores of one pass.

Legend: N nodes of a piece, C classes. Scores (run/scores.py says how each is defined):
fine-grained accuracy, binary accuracy and macro-F1, each at all labelled nodes of the set and
at the roots inside it, and the mean cross-entropy per labelled node.
"""

from __future__ import annotations

import numpy as np

from rntn_engine.run.scores import LabelScheme, binary_counts, confusion_matrix, macro_f1

SCOPES = ("all", "root")  # all labelled nodes of the set; the roots inside it


def ratio(right, counted) -> float:
    return int(right) / int(counted) if counted else float("nan")


class NodeCounts:
    """Counts of one set of nodes; ``loss_sum`` is the sum of -log y[gold] over its labelled nodes."""

    def __init__(self, scheme: LabelScheme) -> None:
        C = scheme.num_classes
        self.scheme = scheme
        self.fine = np.zeros((2, 2), dtype=np.int64)  # [all nodes, roots] x [right, labelled]
        self.binary = np.zeros((2, 2), dtype=np.int64)  # [all nodes, roots] x [right side, counted]
        self.confusion = np.zeros((2, C, C), dtype=np.int64)  # [all nodes, roots] x gold x predicted
        self.loss_sum = 0.0
        self.trees = 0  # trees with at least one node in the set

    def add(self, gold: np.ndarray, predicted: np.ndarray, probabilities: np.ndarray, is_root: np.ndarray,
            trees: int, loss_sum: float | None = None) -> None:
        """Count the nodes of one piece that are in the set: ``gold``, ``predicted`` (n,), ``probabilities``
        (n, C) and ``is_root`` (n,) of those nodes only; ``trees`` that they come from. ``loss_sum``: the
        piece's cross-entropy when known (else computed in float64 from the probabilities)."""
        C = self.scheme.num_classes
        self.trees += trees
        if loss_sum is None:
            labelled = np.flatnonzero(gold >= 0)
            p = probabilities[labelled, gold[labelled]].astype(np.float64)
            loss_sum = float(-np.log(np.maximum(p, np.finfo(np.float64).tiny)).sum())
        self.loss_sum += loss_sum
        for k, mask in enumerate((slice(None), is_root)):
            g, y = gold[mask], predicted[mask]
            labelled = g >= 0
            self.fine[k] += (int(np.count_nonzero(g[labelled] == y[labelled])), int(labelled.sum()))
            self.binary[k] += binary_counts(g, probabilities[mask], self.scheme)
            self.confusion[k] += confusion_matrix(g, y, C)

    def scores(self) -> dict[str, float]:
        """fine_all, fine_root, binary_all, binary_root, macro_f1_all, macro_f1_root, loss; node and tree counts."""
        labelled = int(self.fine[0, 1])
        out: dict[str, float] = {}
        for k, scope in enumerate(SCOPES):
            out[f"fine_{scope}"] = ratio(*self.fine[k])
        for k, scope in enumerate(SCOPES):
            out[f"binary_{scope}"] = ratio(*self.binary[k])
        for k, scope in enumerate(SCOPES):
            out[f"macro_f1_{scope}"] = macro_f1(self.confusion[k])
        out["loss"] = self.loss_sum / labelled if labelled else float("nan")
        out["labelled_nodes"] = labelled
        out["trees"] = self.trees
        return out
