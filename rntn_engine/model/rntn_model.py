"""The recursive neural tensor network (RNTN, 2013): the RNN plus a tensor term.

    internal, children l, r: x = [p_l ; p_r],  p = tanh(W x + b + h),  h_k = x^T V[k] x,  k = 1..d

Parameters L, W, b, V (and the shared classifier Ws, bs), drawn in the order L, W, V, Ws, with
V ~ U(-1/D, 1/D) (small: the model starts close to the RNN). Every step first builds the
symmetric layout of V (kernels/tree_compose.py, symmetric_tensor_layout), which the chunks
share read-only; each chunk's tensor gradient is accumulated in that layout and folded into dV
in chunk order (add_layout_gradient).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from rntn_engine.kernels.tree_compose import add_symmetric_layout_gradient, symmetric_tensor_layout
from rntn_engine.model.model_spec import draw_classifier, draw_composition, draw_word_vectors
from rntn_engine.model.rnn_model import RecursiveNetwork

if TYPE_CHECKING:
    from rntn_engine.model.parameters import Parameters


class TensorNetwork(RecursiveNetwork):
    name = "rntn"
    title = "recursive neural tensor network (RNTN, 2013)"
    parameters = ("L", "W", "b", "V", "Ws", "bs")
    reduced_from_layout = ("V",)
    with_tensor = True

    def initialise(self, params: Parameters, rng: np.random.Generator) -> None:
        D = 2 * self.shape.dim
        draw_word_vectors(params, rng)
        draw_composition(params.W, rng)
        params.V[:] = rng.uniform(-1.0 / D, 1.0 / D, size=params.V.shape).astype(params.flat.dtype)
        draw_classifier(params, rng)

    def prepare(self, params: Parameters) -> None:
        symmetric_tensor_layout(self.Vsym, params.V)

    def layout_gradient_shape(self) -> tuple[int, ...]:
        return self.Vsym.shape

    def add_layout_gradient(self, grads, layout_grad: np.ndarray) -> None:
        add_symmetric_layout_gradient(grads["V"], layout_grad)
