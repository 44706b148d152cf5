"""The matrix-vector recursive neural network (MV-RNN, 2012): every word and phrase has a vector and a matrix.

    leaf with word w:   p = L[w],   P = LM[w]
    internal, left child (a, A), right child (b, B):
        p = tanh(W [B a ; A b] + b_W),     P = WM [A ; B]

Parameters L, W, b, LM, WM (and the shared classifier Ws, bs), drawn in the order L, W, Ws, LM
(word by word), WM: the arrays the three models share come out identical for one seed. The
word matrices start near the identity, LM[w] = I + U(-0.01, 0.01) elementwise (the MV-RNN's
publication starts them at the identity plus small noise -- from memory; the width 0.01 is our
choice), so x = [B a ; A b] starts as [a ; b]. WM starts like W, near the children's average.
The forward and backward passes are kernels/compose_matrix_vector.py's.

Memory: each node holds a d x d matrix and, in the backward pass, its error: d^2 numbers per
node where the vector models hold d (activation_numbers).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from rntn_engine.kernels.compose_matrix_vector import backward_compose_mv, forward_compose_mv
from rntn_engine.model.model_spec import (
    Activations,
    ModelSpec,
    draw_classifier,
    draw_composition,
    draw_word_vectors,
)

if TYPE_CHECKING:
    from rntn_engine.data.batches import FlatBatch
    from rntn_engine.model.parameters import Parameters

WORD_MATRIX_NOISE = 0.01  # LM[w] = I + U(-WORD_MATRIX_NOISE, WORD_MATRIX_NOISE) at initialisation


@dataclass
class MatrixVectorActivations(Activations):
    """Buffers of the MV-RNN, beyond the shared P, Y, S, E, dS (kernels/compose_matrix_vector.py)."""

    PM: np.ndarray = field(default=None)  # (N, d*d) node matrices, row i = P of node i
    X: np.ndarray = field(default=None)  # (M, D) [B a ; A b] of each internal node
    Z: np.ndarray = field(default=None)  # (M, d) pre-activations, then the internal nodes' p
    ABt: np.ndarray = field(default=None)  # (M*d, D) children's matrices, stacked transposed
    PMt: np.ndarray = field(default=None)  # (M*d, d) a level's P^T
    EM: np.ndarray = field(default=None)  # (N, d*d) error reaching each node matrix
    Delta: np.ndarray = field(default=None)  # (M, d) error at the pre-activations
    EX: np.ndarray = field(default=None)  # (M, D) error reaching x
    EPt: np.ndarray = field(default=None)  # (M*d, d) EP^T of each internal node
    EABt: np.ndarray = field(default=None)  # (M*d, D) a level's (WM^T EP)^T


class MatrixVectorNetwork(ModelSpec):
    name = "mvrnn"
    title = "matrix-vector recursive neural network (MV-RNN, 2012)"
    parameters = ("L", "W", "b", "LM", "WM", "Ws", "bs")
    activations = MatrixVectorActivations

    def activation_numbers(self, n_nodes: int, n_internal: int, backward: bool = True) -> int:
        d = self.shape.dim
        D = 2 * d
        forward = n_nodes * (d + d * d) + n_internal * (D + d + d * D + d * d)
        return forward + (n_nodes * (d + d * d) + n_internal * (d + D + d * d + d * D) if backward else 0)

    def initialise(self, params: Parameters, rng: np.random.Generator) -> None:
        d = self.shape.dim
        draw_word_vectors(params, rng)
        draw_composition(params.W, rng)
        draw_classifier(params, rng)
        rows = max(1, (1 << 20) // (d * d))  # words per draw: the float64 temporaries stay near 8 MiB
        for a in range(0, self.shape.vocab_size, rows):
            z = min(a + rows, self.shape.vocab_size)
            noise = rng.uniform(-WORD_MATRIX_NOISE, WORD_MATRIX_NOISE, size=(z - a, d, d))
            params.LM[a:z] = np.eye(d) + noise  # computed in float64, rounded once to the parameter dtype
        draw_composition(params.WM, rng)

    def forward(self, params: Parameters, batch: FlatBatch, acts: MatrixVectorActivations,
                keep_for_backward: bool) -> None:
        d = self.shape.dim
        N, M, D = batch.n_nodes, batch.n_internal, 2 * d
        acts.resize({"P": (N, d), "PM": (N, d * d), "X": (M, D), "Z": (M, d), "ABt": (M * d, D), "PMt": (M * d, d)})
        forward_compose_mv(acts.P, acts.PM.reshape(N, d, d), acts.X, acts.Z, acts.ABt, acts.PMt, params.L, params.LM,
                           params.W, params.b, params.WM, batch.word, batch.left, batch.right, batch.order,
                           batch.level_start)

    def backward(self, params: Parameters, grads: dict[str, np.ndarray], layout_grad: np.ndarray,
                 batch: FlatBatch, acts: MatrixVectorActivations) -> None:
        d = self.shape.dim
        N, M, D = batch.n_nodes, batch.n_internal, 2 * d
        acts.resize({"EM": (N, d * d), "Delta": (M, d), "EX": (M, D), "EPt": (M * d, d), "EABt": (M * d, D)})
        backward_compose_mv(grads["W"], grads["b"], grads["WM"], acts.E, acts.EM.reshape(N, d, d), acts.Delta, acts.EX,
                            acts.EPt, acts.EABt, acts.P, acts.PM.reshape(N, d, d), acts.X, acts.ABt, params.W,
                            params.WM, batch.left, batch.right, batch.order, batch.level_start)

    def word_errors(self, acts: MatrixVectorActivations) -> dict[str, np.ndarray]:
        return {"L": acts.E, "LM": acts.EM}  # dLM[w] += EM[leaf], d*d numbers per row
