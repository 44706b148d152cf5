"""Class weights of the training cross-entropy (the ``class_weights`` setting).

A node whose gold class is c adds w_c * (-log y[c]) to the loss instead of -log y[c]
(kernels/node_classifier.py), so errors on a rare class cost more. The setting is:

    none       every w_c = 1: the plain cross-entropy
    balanced   w_c = n / (C * n_c), n the labelled nodes of the training treebank, n_c those of
               class c, C the number of classes (inverse class frequency, scaled so that the mean
               weight over the training nodes is 1 when every class occurs; the same formula as
               scikit-learn's "balanced" class weights). A class without training nodes never
               enters the loss; it gets w_c = 1.
    W0,W1,...  one number >= 0 per class, e.g. "2,1,0.5,1,2"

The weights are resolved once, when a run starts, and stored in its checkpoints (the run
state), so a resume uses the very same numbers. Only training is weighted: dev loss and
every score stay the plain ones.
"""

from __future__ import annotations

import math

import numpy as np

NAMED_CLASS_WEIGHTS = ("none", "balanced")


def class_weights_problem(text: str, num_classes: int) -> str:
    """Why ``text`` is not a class-weights setting for ``num_classes`` classes ("" when it is)."""
    if text in NAMED_CLASS_WEIGHTS:
        return ""
    try:
        values = [float(part) for part in text.split(",")]
    except ValueError:
        return f"--class-weights must be none, balanced or {num_classes} numbers separated by commas, got {text!r}"
    if len(values) != num_classes:
        return f"--class-weights gives {len(values)} weights for {num_classes} classes: give one per class"
    if not all(math.isfinite(v) and v >= 0 for v in values) or not any(values):
        return f"--class-weights must be finite numbers >= 0, not all zero, got {text!r}"
    return ""


def resolve_class_weights(text: str, labels: np.ndarray, num_classes: int) -> np.ndarray:
    """(C,) float64 weights of the setting ``text`` (module docstring); ``labels`` the gold labels of every
    training node (-1 unlabelled, left out)."""
    if text == "none":
        return np.ones(num_classes)
    if text == "balanced":
        counts = np.bincount(labels[labels >= 0].astype(np.int64), minlength=num_classes)[:num_classes]
        n = float(counts.sum())
        weights = np.ones(num_classes)
        present = counts > 0
        weights[present] = n / (num_classes * counts[present])
        return weights
    return np.array([float(part) for part in text.split(",")], dtype=np.float64)
