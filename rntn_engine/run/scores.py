"""Scores of predicted node labels against gold labels.

Legend: N nodes. Gold label -1 means unlabelled: such nodes are left out of every score.
"""

from __future__ import annotations

import numpy as np


def accuracy(gold: np.ndarray, predicted: np.ndarray) -> float:
    """Fraction of labelled nodes (gold >= 0) whose predicted label equals the gold one; nan if none."""
    mask = gold >= 0
    n = int(mask.sum())
    return float(np.sum(gold[mask] == predicted[mask]) / n) if n else float("nan")


def majority_class(gold: np.ndarray) -> int:
    """The most frequent gold label (smallest label on ties)."""
    labelled = gold[gold >= 0]
    return int(np.bincount(labelled).argmax()) if labelled.size else 0
