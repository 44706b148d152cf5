"""The recursive neural network (RNN): one composition matrix shared by every internal node.

    leaf with word w:        p = L[w]
    internal, children l, r: p = tanh(W [p_l ; p_r] + b)

Parameters L, W, b (and the shared classifier Ws, bs), drawn in the order L, W, Ws. The
forward and backward passes are kernels/tree_compose.py's, without the tensor term (the RNTN,
rntn_model.py, is this model plus that term).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from rntn_engine.kernels.tree_compose import backward_compose, forward_compose
from rntn_engine.model.model_spec import (
    Activations,
    ModelSpec,
    draw_classifier,
    draw_composition,
    draw_word_vectors,
)

if TYPE_CHECKING:
    from rntn_engine.data.batches import FlatBatch
    from rntn_engine.model.parameters import ModelShape, Parameters

FORWARD_Q_ROWS = 512  # forward-only passes compute the tensor term in blocks of this many nodes


@dataclass
class VectorActivations(Activations):
    """Buffers of the vector models (RNN, RNTN), beyond the shared P, Y, S, E, dS."""

    X: np.ndarray = field(default=None)  # (M, D) children [p_l ; p_r] of each internal node
    Z: np.ndarray = field(default=None)  # (M, d) pre-activations
    Q: np.ndarray = field(default=None)  # (M, d*D) X Vsym, kept for backward (RNTN; (0, 0) for the RNN)
    Delta: np.ndarray = field(default=None)  # (M, d) error at the pre-activations
    EX: np.ndarray = field(default=None)  # (M, D) error reaching x


class RecursiveNetwork(ModelSpec):
    name = "rnn"
    title = "recursive neural network (RNN)"
    parameters = ("L", "W", "b", "Ws", "bs")
    activations = VectorActivations
    with_tensor = False  # the RNTN subclass adds the tensor term h_k = x^T V[k] x

    def __init__(self, shape: ModelShape) -> None:
        super().__init__(shape)
        d = shape.dim
        # the RNTN's symmetric tensor layout (D, d*D), rebuilt by prepare() every step; empty here
        self.Vsym = np.zeros((2 * d, d * 2 * d) if self.with_tensor else (0, 0), dtype=np.dtype(shape.dtype))

    def activation_numbers(self, n_nodes: int, n_internal: int, backward: bool = True) -> int:
        d = self.shape.dim
        D = 2 * d
        q = (n_internal if backward else min(n_internal, FORWARD_Q_ROWS)) * d * D if self.with_tensor else 0
        numbers = n_nodes * d + n_internal * (D + d) + q
        return numbers + (n_nodes * d + n_internal * (d + D) if backward else 0)

    def initialise(self, params: Parameters, rng: np.random.Generator) -> None:
        draw_word_vectors(params, rng)
        draw_composition(params.W, rng)
        draw_classifier(params, rng)

    def forward(self, params: Parameters, batch: FlatBatch, acts: VectorActivations, keep_for_backward: bool) -> None:
        d = self.shape.dim
        N, M, D = batch.n_nodes, batch.n_internal, 2 * d
        # Q: every internal node's row when backward follows; forward only: a block reused level by level
        q_rows = (M if keep_for_backward else min(M, FORWARD_Q_ROWS)) if self.with_tensor else 0
        acts.resize({"P": (N, d), "X": (M, D), "Z": (M, d), "Q": (q_rows, d * D if self.with_tensor else 0)})
        forward_compose(acts.P, acts.X, acts.Z, acts.Q, params.L, params.W, params.b, self.Vsym,
                        batch.word, batch.left, batch.right, batch.order, batch.level_start, self.with_tensor)

    def backward(self, params: Parameters, grads: dict[str, np.ndarray], layout_grad: np.ndarray,
                 batch: FlatBatch, acts: VectorActivations) -> None:
        d = self.shape.dim
        M, D = batch.n_internal, 2 * d
        acts.resize({"Delta": (M, d), "EX": (M, D)})
        backward_compose(grads["W"], grads["b"], layout_grad, acts.E, acts.Delta, acts.EX, acts.P, acts.X, acts.Q,
                         params.W, batch.left, batch.right, batch.order, batch.level_start, self.with_tensor)

    def word_errors(self, acts: VectorActivations) -> dict[str, np.ndarray]:
        return {"L": acts.E}
