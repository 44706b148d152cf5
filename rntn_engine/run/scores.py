"""Scores of predicted node labels against gold labels.

Legend: N nodes, C classes. Gold label -1 means unlabelled: such nodes are left out of every score.

Fine-grained accuracy compares the C-way argmax with the gold class. Binary
accuracy (the two-sided view of a C-class sentiment scale) leaves out nodes whose
gold class is the neutral one, maps gold classes to their side (negative or
positive), and predicts the side whose classes have the larger total probability
(the neutral class's probability counts for neither side); equal totals predict the
negative side. The sides come from a
:class:`LabelScheme`; by default for C classes (``LabelScheme.for_classes``):

    C odd  (5, 3, ...): neutral = C // 2, negative = 0 .. C//2 - 1, positive = C//2 + 1 .. C-1
    C even (2, 4, ...): no neutral class, negative = 0 .. C/2 - 1, positive = C/2 .. C-1

so C = 5 gives {0, 1} | 2 | {3, 4}; C = 3 gives {0} | 1 | {2}; C = 2 gives {0} | {1}.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class LabelScheme:
    """Which classes are negative, neutral and positive (for binary scores)."""

    num_classes: int
    neutral: int | None  # the neutral class, or None when the scale has none

    @classmethod
    def for_classes(cls, num_classes: int, neutral: int | None = -1) -> "LabelScheme":
        """The default scheme of the module docstring; ``neutral`` overrides it (None: no neutral class)."""
        if neutral == -1:
            neutral = num_classes // 2 if num_classes % 2 else None
        if neutral is not None and not 0 <= neutral < num_classes:
            raise ValueError(f"neutral class {neutral} is outside 0..{num_classes - 1}")
        return cls(num_classes, neutral)

    def positive_mask(self) -> np.ndarray:
        """(C,) bool: classes on the positive side."""
        c = np.arange(self.num_classes)
        cut = self.neutral if self.neutral is not None else self.num_classes / 2
        return c > cut if self.neutral is not None else c >= cut

    def negative_mask(self) -> np.ndarray:
        """(C,) bool: classes on the negative side."""
        c = np.arange(self.num_classes)
        cut = self.neutral if self.neutral is not None else self.num_classes / 2
        return c < cut

    def describe(self) -> str:
        neg = np.flatnonzero(self.negative_mask()).tolist()
        pos = np.flatnonzero(self.positive_mask()).tolist()
        neutral = "none" if self.neutral is None else str(self.neutral)
        return f"negative {neg}, neutral {neutral}, positive {pos}"


def accuracy(gold: np.ndarray, predicted: np.ndarray) -> float:
    """Fraction of labelled nodes (gold >= 0) whose predicted label equals the gold one; nan if none."""
    mask = gold >= 0
    n = int(mask.sum())
    return float(np.sum(gold[mask] == predicted[mask]) / n) if n else float("nan")


def binary_accuracy(gold: np.ndarray, probabilities: np.ndarray, scheme: LabelScheme) -> float:
    """Accuracy of the negative/positive side on labelled, non-neutral nodes (module docstring); nan if none."""
    correct, counted = binary_counts(gold, probabilities, scheme)
    return correct / counted if counted else float("nan")


def binary_counts(gold: np.ndarray, probabilities: np.ndarray, scheme: LabelScheme) -> tuple[int, int]:
    """(nodes whose side is right, nodes counted) behind :func:`binary_accuracy`, for sums over blocks."""
    pos, neg = scheme.positive_mask(), scheme.negative_mask()
    keep = (gold >= 0) & (gold != (scheme.neutral if scheme.neutral is not None else -2))
    counted = int(np.count_nonzero(keep))
    if not counted:
        return 0, 0
    gold_positive = pos[gold[keep]]
    p = probabilities[keep]
    predicted_positive = p[:, pos].sum(axis=1) > p[:, neg].sum(axis=1)
    return int(np.count_nonzero(gold_positive == predicted_positive)), counted


def majority_class(gold: np.ndarray) -> int:
    """The most frequent gold label (smallest label on ties)."""
    labelled = gold[gold >= 0]
    return int(np.bincount(labelled).argmax()) if labelled.size else 0


def confusion_matrix(gold: np.ndarray, predicted: np.ndarray, num_classes: int) -> np.ndarray:
    """(C, C) int64 counts: row = gold class, column = predicted class, labelled nodes only."""
    mask = gold >= 0
    flat = gold[mask].astype(np.int64) * num_classes + predicted[mask]
    return np.bincount(flat, minlength=num_classes * num_classes).reshape(num_classes, num_classes)


def per_class_scores(confusion: np.ndarray) -> dict[str, np.ndarray]:
    """Precision, recall, F1 and support per class from a confusion matrix (0 where undefined)."""
    tp = np.diag(confusion).astype(np.float64)
    predicted = confusion.sum(axis=0).astype(np.float64)
    support = confusion.sum(axis=1).astype(np.float64)
    precision = np.divide(tp, predicted, out=np.zeros_like(tp), where=predicted > 0)
    recall = np.divide(tp, support, out=np.zeros_like(tp), where=support > 0)
    denominator = precision + recall
    f1 = np.divide(2 * precision * recall, denominator, out=np.zeros_like(tp), where=denominator > 0)
    return {"precision": precision, "recall": recall, "f1": f1, "support": support.astype(np.int64)}


def macro_f1(confusion: np.ndarray) -> float:
    """F1 averaged over the classes that occur in the gold labels or the predictions (each class
    weighs the same, however rare); nan when there are none. From a confusion matrix, so that
    counts summed over blocks give the same value."""
    scores = per_class_scores(confusion)
    present = (confusion.sum(axis=0) + confusion.sum(axis=1)) > 0
    return float(scores["f1"][present].mean()) if present.any() else float("nan")
