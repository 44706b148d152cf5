"""The recursive neural tensor network (RNTN, 2013): the RNN plus a tensor term.

    internal, children l, r: x = [p_l ; p_r],  p = tanh(W x + b + h),  h_k = x^T V[k] x,  k = 1..d

Parameters L, W, b, V (and the shared classifier Ws, bs), drawn in the order L, W, V, Ws, with
V ~ U(-1/D, 1/D) (small: the model starts close to the RNN). Every step first builds the
symmetric layout of V (kernels/tree_compose.py, symmetric_tensor_layout), or for a
forward-only pass its pair layout (kernels/tensor_term.py, pair_layout), which the chunks
share read-only; each chunk's tensor gradient is accumulated in the pair layout (half the size
of the symmetric one) and folded into dV in chunk order (set_layout_gradients). Both run in TENSOR_PARTS fixed ranges of k on the
objective's worker threads: every element of V, Vsym and dV belongs to one range and sees the
same operations in the same order whatever the number of threads.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from rntn_engine.kernels.tensor_term import pair_layout, set_pair_layout_gradient, set_pair_layout_gradients_parts
from rntn_engine.kernels.tree_compose import symmetric_tensor_layout, symmetric_tensor_layout_parts
from rntn_engine.jit_setup import use_threads
from rntn_engine.model.model_spec import PartRunner, draw_classifier, draw_composition, draw_word_vectors, run_in_order
from rntn_engine.model.rnn_model import RecursiveNetwork

if TYPE_CHECKING:
    from rntn_engine.model.parameters import Parameters


# Ranges of k the layout work is cut into, when the tensor has at least PARALLEL_LAYOUT numbers. At
# d = 50 float64 building the layout and folding two chunks' layout gradients into dV took 1.1 ms of a
# 24.7 ms one-thread step, serial before (per-kernel timers); at d = 25 handing the ranges to the
# threads cost more than it saved (DEVELOPERS.md "Findings from the second performance round").
TENSOR_PARTS = 4
PARALLEL_LAYOUT = 1 << 18


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

    def _k_ranges(self) -> list[tuple[int, int]]:
        d = self.shape.dim
        if d * (2 * d) ** 2 < PARALLEL_LAYOUT:
            return [(0, d)]
        cuts = [d * p // TENSOR_PARTS for p in range(TENSOR_PARTS + 1)]
        return [(a, z) for a, z in zip(cuts[:-1], cuts[1:]) if z > a]

    def _k_cuts(self) -> np.ndarray:
        ranges = self._k_ranges()
        return np.array([a for a, _ in ranges] + [ranges[-1][1]], dtype=np.int64)

    def prepare(self, params: Parameters, run_parts: PartRunner = run_in_order, forward_only: bool = False,
                kernel_threads: int = 0) -> None:
        D = 2 * self.shape.dim
        if kernel_threads and not forward_only and len(self._k_ranges()) > 1:
            use_threads(kernel_threads)
            symmetric_tensor_layout_parts(self.Vsym, params.V, self._k_cuts())
            return

        def work(k: tuple[int, int]) -> None:  # the layout's part of V[k] for k in the range
            if forward_only:  # the pair layout of tensor_term.py
                pair_layout(self.pairs[k[0] : k[1]], params.V[k[0] : k[1]])
            else:  # Vsym[:, k*D:(k+1)*D]
                symmetric_tensor_layout(self.Vsym[:, k[0] * D : k[1] * D], params.V[k[0] : k[1]])

        run_parts(work, self._k_ranges())

    def layout_gradient_shape(self) -> tuple[int, ...]:
        return self.pairs.shape  # (d, D(D+1)/2): dT of kernels/tensor_term.py

    def set_layout_gradients(self, grads, layout_grads: list[np.ndarray], run_parts: PartRunner = run_in_order,
                             kernel_threads: int = 0) -> None:
        if kernel_threads and len(self._k_ranges()) > 1:
            use_threads(kernel_threads)
            set_pair_layout_gradients_parts(grads["V"], tuple(layout_grads), self._k_cuts())
            return

        dTs = tuple(layout_grads)

        def work(k: tuple[int, int]) -> None:  # dV[k] for k in the range: 0 + the chunks' sum, in chunk order
            set_pair_layout_gradient(grads["V"], dTs, k[0], k[1])

        run_parts(work, self._k_ranges())
