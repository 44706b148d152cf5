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

from rntn_engine.jit_setup import use_threads
from rntn_engine.kernels.chunk_gradient import vector_chunk_gradient, vector_chunks_gradient
from rntn_engine.kernels.tensor_term import OWN_KERNEL_ROWS
from rntn_engine.kernels.tree_compose import backward_compose, forward_compose
from rntn_engine.model.model_spec import (
    Activations,
    ChunkJob,
    ModelSpec,
    draw_classifier,
    draw_composition,
    draw_word_vectors,
)

if TYPE_CHECKING:
    from rntn_engine.data.batches import FlatBatch
    from rntn_engine.model.parameters import ModelShape, Parameters

# Forward-only passes compute the tensor term in blocks of rows (nodes of one level), one workspace
# reused block after block (kernels/tensor_term.py, tensor_term_forward_pairs); the best block depends
# on the size of the tensor's pair layout T (d x D(D+1)/2 numbers), streamed once per block: while T
# is small the block should be too, once it is large it must be amortised over more rows. The first
# (largest T in bytes, rows) whose limit T does not exceed gives the rows. Chosen from evaluation of
# the bench corpus (`python scripts/bench.py` corpus, 4,000 trees, 1 thread; trees/s, two runs each;
# 2026-12-02, this project's shared 2-core machine, 2 MB L2 a core):
#   d = 25 float32 (T 128 KiB):  8: 28.0k/27.0k  12: 30.5k/28.7k  16: 36.9k/36.3k  24: 35.1k/35.3k  32: 32.8k/32.3k
#                                128: 35.1k/35.3k
#   d = 25 float64 (T 255 KiB):  8: 21.3k/23.5k  12: 19.9k/21.8k  16: 25.0k/27.4k  24: 23.8k/24.9k  128: 20.3k/20.4k
#   d = 32 float32 (T 260 KiB):  16: 16.8k/16.6k  64: 21.0k/21.5k  128: 20.9k/20.4k
#   d = 32 float64 (T 520 KiB):  16: 10.4k/10.3k  64: 11.6k/11.8k  128: 10.7k/11.0k
#   d = 40 float32 (T 505 KiB):  16:  9.8k/10.0k  64: 13.1k/13.1k  128: 12.6k/12.4k
#   d = 40 float64 (T 1010 KiB): 16:  5.8k/5.8k   64:  6.4k/6.2k   128:  6.4k/6.4k
#   d = 50 float32 (T 986 KiB):  16:  5.5k/5.5k   64:  7.1k/7.1k   128:  6.9k/7.0k  256: 6.6k/6.4k
#   d = 50 float64 (T 1.9 MiB):  64:  3.7k/3.6k  128:  3.8k/4.0k  256: 4.0k/4.0k
# Blocks of 16 fill whole SIMD vectors in the pair products' loop over a block's nodes (16 float32
# or 2 x 8 float64); 12 or 20 leave a remainder and were slower than 8 or 16.
FORWARD_BLOCKS = ((256 * 1024, 16), (1024 * 1024, 64), (None, 128))


def forward_block_rows(d: int, itemsize: int) -> int:
    """Rows of a forward-only block of the tensor term for vectors of size d (FORWARD_BLOCKS)."""
    pair_layout_bytes = d * (2 * d) * (2 * d + 1) // 2 * itemsize
    for limit, rows in FORWARD_BLOCKS:
        if limit is None or pair_layout_bytes <= limit:
            return rows
    return FORWARD_BLOCKS[-1][1]


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
        q = (n_internal * (d * D + d) if backward else min(n_internal, self._block_rows()) * (d * D + 4 * d)) \
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
        q_rows = (M if keep_for_backward else min(M, self._block_rows())) if self.with_tensor else 0
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

    def gradient_chunks(self, params: Parameters, jobs: list[ChunkJob], class_weights: np.ndarray, scale: float,
                        threads) -> bool:
        """Each chunk's gradient in one compiled call (kernels/chunk_gradient.py); the chunks on numba's
        threads when ``threads.kernel_threads`` is set, else on ``threads.run`` (ModelSpec.gradient_chunks)."""
        d, C = self.shape.dim, self.shape.num_classes
        D = 2 * d
        per_chunk = []  # the chunk arguments of vector_chunk_gradient, in its order
        for job in jobs:
            batch, acts = job.batch, job.acts
            N, M = batch.n_nodes, batch.n_internal
            q_rows, q_cols = (M, d * D + d) if self.with_tensor else (0, 0)
            acts.resize({"P": (N, d), "X": (M, D), "Z": (M, d), "Q": (q_rows, q_cols), "Y": (N, C), "S": (N, C),
                         "E": (N, d), "dS": (N, C), "Delta": (M, d), "EX": (M, D)})
            Q = self._q_view(acts, M)  # X Vsym; U (the pair products) shares its memory, as in backward
            U = acts.Q.reshape(-1)[: M * q_cols].reshape(M, q_cols) if self.with_tensor else acts.Q
            values, ids = job.word_rows["L"].reserve(batch.leaves.shape[0])
            per_chunk.append((job.grads["W"], job.grads["b"], job.layout_grad, job.grads["Ws"], job.grads["bs"],
                              acts.P, acts.X, acts.Z, Q, U, acts.Y, acts.S, acts.E, acts.dS, acts.Delta, acts.EX,
                              batch.word, batch.left, batch.right, batch.order, batch.level_start, batch.label,
                              batch.leaves, values, ids))
        shared = (params.L, params.W, params.b, self.Vsym, params.Ws, params.bs)
        fixed = (class_weights, scale, self.with_tensor, self.own_kernel_rows, self._no_pairs)

        def run(a: tuple) -> tuple[float, int]:
            return vector_chunk_gradient(*a[:16], *shared, *a[16:23], *fixed, *a[23:])

        width = threads.kernel_threads  # chunks per threaded call: one per thread
        if width > 1:
            # groups of `width` chunks on numba's threads, any chunks left over on this thread (not on the
            # Python pool, whose hand-over is what numba's threads avoid): the threaded kernel is then
            # compiled once per thread count, not once per number of chunks (about 8 s each, tuples of
            # another length being another type)
            results = []
            use_threads(width)
            for start in range(0, len(jobs) - width + 1, width):
                fields = tuple(zip(*per_chunk[start : start + width]))  # one tuple per argument, a chunk each
                losses = np.zeros(width)
                counts = np.zeros(width, dtype=np.int64)
                vector_chunks_gradient(*fields[:16], *shared, *fields[16:23], *fixed, *fields[23:], losses, counts)
                results += list(zip(losses, counts))
            results += [run(a) for a in per_chunk[len(results):]]
        else:
            results = threads.run(run, per_chunk)
        for job, (loss, n) in zip(jobs, results):
            job.loss = float(loss)
            job.word_rows["L"].hold(int(n))
        return True

    def _block_rows(self) -> int:
        return forward_block_rows(self.shape.dim, np.dtype(self.shape.dtype).itemsize)

    def _q_view(self, acts: VectorActivations, M: int) -> np.ndarray:
        """(M, d*D) X Vsym, at the start of Q's buffer (see forward)."""
        if not self.with_tensor:
            return acts.Q
        d = self.shape.dim
        return acts.Q.reshape(-1)[: M * d * 2 * d].reshape(M, d * 2 * d)

    def word_errors(self, acts: VectorActivations) -> dict[str, np.ndarray]:
        return {"L": acts.E}
