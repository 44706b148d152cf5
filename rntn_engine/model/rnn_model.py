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

from rntn_engine.kernels.tensor_term import OWN_KERNEL_ROWS
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

# forward-only passes compute the tensor term in blocks of this many nodes (the pair products' workspace:
# 1.4 MB at d = 25 float64). Evaluation of the bench corpus, best of 2-3 runs each on the shared machine
# (2026-12-02): 128 rows 22,700 / 39,300 / 7,900 trees/s at d = 25 float64 / 25 float32 / 50 float32,
# 512 rows 20,000 / 29,200 / 6,600.
FORWARD_Q_ROWS = 128


@dataclass
class VectorActivations(Activations):
    """Buffers of the vector models (RNN, RNTN), beyond the shared P, Y, S, E, dS."""

    X: np.ndarray = field(default=None)  # (M, D) children [p_l ; p_r] of each internal node
    Z: np.ndarray = field(default=None)  # (M, d) pre-activations, then the internal nodes' p
    Q: np.ndarray = field(default=None)  # (M, d*D + d) X Vsym kept for backward, then the pair products
    # (RNTN; forward only (R, d*D + 4d), the pair products' workspace; (0, 0) for the RNN)
    Delta: np.ndarray = field(default=None)  # (M, d) error at the pre-activations
    EX: np.ndarray = field(default=None)  # (M, D) error reaching x


class RecursiveNetwork(ModelSpec):
    name = "rnn"
    title = "recursive neural network (RNN)"
    parameters = ("L", "W", "b", "Ws", "bs")
    activations = VectorActivations
    with_tensor = False  # the RNTN subclass adds the tensor term h_k = x^T V[k] x
    own_kernel_rows = OWN_KERNEL_ROWS  # levels this narrow take the tensor term's own kernel (tensor_term.py)

    def __init__(self, shape: ModelShape) -> None:
        super().__init__(shape)
        d = shape.dim
        # the RNTN's symmetric tensor layout (D, d*D), rebuilt by prepare() every step; empty here
        self.Vsym = np.zeros((2 * d, d * 2 * d) if self.with_tensor else (0, 0), dtype=np.dtype(shape.dtype))
        # its pair layout (d, D(D+1)/2) for forward-only passes (kernels/tensor_term.py), rebuilt by prepare()
        self.pairs = np.zeros((d, d * (2 * d + 1)) if self.with_tensor else (0, 0), dtype=np.dtype(shape.dtype))
        self._no_pairs = np.zeros((0, 0), dtype=np.dtype(shape.dtype))

    def activation_numbers(self, n_nodes: int, n_internal: int, backward: bool = True) -> int:
        d = self.shape.dim
        D = 2 * d
        # Q: X Vsym of every internal node; forward only, a block of rows of the pair products' workspace
        q = (n_internal * (d * D + d) if backward else min(n_internal, FORWARD_Q_ROWS) * (d * D + 4 * d)) \
            if self.with_tensor else 0
        numbers = n_nodes * d + n_internal * (D + d) + q
        return numbers + (n_nodes * d + n_internal * (d + D) if backward else 0)

    def initialise(self, params: Parameters, rng: np.random.Generator) -> None:
        draw_word_vectors(params, rng)
        draw_composition(params.W, rng)
        draw_classifier(params, rng)

    def forward(self, params: Parameters, batch: FlatBatch, acts: VectorActivations, keep_for_backward: bool) -> None:
        d = self.shape.dim
        N, M, D = batch.n_nodes, batch.n_internal, 2 * d
        # Q: every internal node's row when backward follows; forward only: a block of rows reused level by
        # level as the pair products' workspace (kernels/tensor_term.py, tensor_term_forward_pairs)
        # With backward: Q's buffer holds d*D + d numbers a node, X Vsym in the first d*D a node (row
        # after row), then the pair products U (M, D(D+1)/2) of the tensor's gradient (backward_compose).
        q_rows = (M if keep_for_backward else min(M, FORWARD_Q_ROWS)) if self.with_tensor else 0
        q_cols = (d * D + d if keep_for_backward else d * D + 4 * d) if self.with_tensor else 0
        acts.resize({"P": (N, d), "X": (M, D), "Z": (M, d), "Q": (q_rows, q_cols)})
        pairs = self._no_pairs if keep_for_backward or not self.with_tensor else self.pairs
        Q = self._q_view(acts, M) if keep_for_backward else acts.Q
        forward_compose(acts.P, acts.X, acts.Z, Q, params.L, params.W, params.b, self.Vsym,
                        batch.word, batch.left, batch.right, batch.order, batch.level_start, self.with_tensor,
                        self.own_kernel_rows, pairs)

    def backward(self, params: Parameters, grads: dict[str, np.ndarray], layout_grad: np.ndarray,
                 batch: FlatBatch, acts: VectorActivations) -> None:
        d = self.shape.dim
        M, D = batch.n_internal, 2 * d
        acts.resize({"Delta": (M, d), "EX": (M, D)})
        Q = self._q_view(acts, M)
        U = acts.Q.reshape(-1)[: M * (d * D + d)].reshape(M, d * D + d) if self.with_tensor else acts.Q
        backward_compose(grads["W"], grads["b"], layout_grad, acts.E, acts.Delta, acts.EX, acts.P, acts.X, Q, U,
                         params.W, batch.left, batch.right, batch.order, batch.level_start, self.with_tensor)

    def _q_view(self, acts: VectorActivations, M: int) -> np.ndarray:
        """(M, d*D) X Vsym, at the start of Q's buffer (see forward)."""
        if not self.with_tensor:
            return acts.Q
        d = self.shape.dim
        return acts.Q.reshape(-1)[: M * d * 2 * d].reshape(M, d * 2 * d)

    def word_errors(self, acts: VectorActivations) -> dict[str, np.ndarray]:
        return {"L": acts.E}
