"""The training objective of a minibatch: loss and gradient, and forward-only prediction.

For a minibatch of B trees whose leaves hold the set of distinct words U:

    J = (1/B) * sum over labelled nodes of -w[t] log y[t]      (w: class weights, all 1 by default)
        + sum over dense groups g of (lambda_g / 2) * ||theta_g||^2
        + (lambda_words / 2) * sum over w in U of ||L[w] - A[w]||^2
        + (lambda_word_matrices / 2) * sum over w in U of ||LM[w]||^2          (MV-RNN)

Dense groups: compose (W, and WM of the MV-RNN), tensor (V), classifier (Ws); biases are
not regularised. The word arrays L and LM have one row per vocabulary word, and a
minibatch's objective holds the L2 term of each word it contains once, whatever the
number of its occurrences (the rows touched by the minibatch). The anchor A is 0, or
the starting value of every word vector (``l2_words_toward = "start"``, common practice
when fine-tuning pretrained vectors: the term then pulls a vector back toward its
pretrained value rather than toward zero).

So a training step computes, stores and updates only the rows its trees touch: its cost
does not grow with the vocabulary, and a word that no minibatch contains keeps its
starting vector bit for bit (a dense L2 term would walk it toward zero every step: under
AdaGrad, whose step size is normalised, by about lr/sqrt(t) per coordinate whatever
lambda is). The gradient (model/parameters.py: Gradient) holds the dense groups in one
flat buffer and the word arrays as their touched rows.

Here (``add_l2``) the L2 term is added to a gradient; the training loop instead asks for
the data term only (``include_l2=False``) and lets AdaGrad.step_with_l2 add the same
term inside its single update pass, with the same bits.

Parallelism and determinism: a minibatch is cut into a fixed number of chunks
(``grad_chunks``, a setting stored with the run, not the machine's core count).
Each chunk runs the serial kernels into buffers of its own; chunk gradients are
then summed in chunk order. The result is therefore bitwise the same whatever the
number of threads that run the chunks. A chunk's own buffers hold only the small
dense gradients (W, b, WM, Ws, bs, the tensor's layout); the word rows (dL, dLM) are
scattered from each chunk's node errors into the minibatch's touched rows (ascending
word ids), in chunk order.

Models: "rnn" and "rntn" run kernels/tree_compose.py, "mvrnn" runs
kernels/compose_matrix_vector.py; the classifier (kernels/node_classifier.py) and
everything else here is shared.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
import scipy.linalg.cython_blas  # noqa: F401  the BLAS numba's np.dot calls: loaded before it is limited
from threadpoolctl import threadpool_limits

from rntn_engine.data.batches import EncodedTreebank, FlatBatch, make_batch
from rntn_engine.kernels.compose_matrix_vector import backward_compose_mv, forward_compose_mv
from rntn_engine.kernels.node_classifier import backward_classify, forward_classify
from rntn_engine.kernels.adagrad_step import word_rows_l2
from rntn_engine.kernels.tree_compose import (
    add_symmetric_layout_gradient,
    backward_compose,
    forward_compose,
    symmetric_tensor_layout,
)
from rntn_engine.kernels.word_rows import add_word_rows, scatter_word_rows, touched_rows
from rntn_engine.model.parameters import L2_GROUP, WORD_ROW_NAMES, Gradient, Parameters, WordRows


@dataclass(frozen=True)
class L2Strengths:
    """lambda per L2 group (see model/parameters.py for which parameter is in which group)."""

    words: float = 1e-4  # word vectors L
    compose: float = 1e-3  # composition matrix W
    tensor: float = 1e-3  # composition tensor V
    classifier: float = 1e-4  # classifier weights Ws
    word_matrices: float = 1e-4  # word matrices LM (MV-RNN; its WM is in the compose group)

    def of(self, group: str | None) -> float:
        return 0.0 if group is None else float(getattr(self, group))


FORWARD_Q_ROWS = 512  # forward-only passes compute the tensor term in blocks of this many nodes
L2_BLOCK = 1 << 22  # elements per pass of a dense group's L2 term: its float64 copies stay at 32 MiB
# arrays with their own path to the minibatch gradient: word rows scattered from node errors, V from its layout
_NOT_PER_CHUNK = ("L", "LM", "V")


def split_into_chunks(bank: EncodedTreebank, tree_ids: np.ndarray, chunks: int) -> list[FlatBatch]:
    """Cut a minibatch into at most ``chunks`` contiguous groups of trees with similar node counts."""
    tree_ids = np.asarray(tree_ids, dtype=np.int64)
    chunks = max(1, min(chunks, len(tree_ids)))
    sizes = (bank.start[tree_ids + 1] - bank.start[tree_ids]).astype(np.float64)
    cum = np.cumsum(sizes)
    # cut after the tree where the running node count first reaches k/chunks of the total
    cuts = np.searchsorted(cum, cum[-1] * np.arange(1, chunks) / chunks, side="left") + 1
    bounds = np.unique(np.concatenate([[0], np.clip(cuts, 1, len(tree_ids)), [len(tree_ids)]]))
    return [make_batch(bank, tree_ids[a:z]) for a, z in zip(bounds[:-1], bounds[1:]) if z > a]


class _Workspace:
    """Grow-only scratch arrays for one chunk, so steady-state steps allocate nothing per node."""

    def __init__(self, dtype: np.dtype) -> None:
        self.dtype = dtype
        self.buffers: dict[str, np.ndarray] = {}

    def get(self, name: str, rows: int, cols: int) -> np.ndarray:
        buf = self.buffers.get(name)
        if buf is None or buf.shape[0] < rows or buf.shape[1] != cols:
            buf = np.empty((max(rows, 16), cols), dtype=self.dtype)
            self.buffers[name] = buf
        return buf[:rows]


class ChunkGradient:
    """One chunk's share of a minibatch's loss and gradient, summed inside the chunk: what a worker thread
    hands to the reduction, and what MPI ranks exchange (:meth:`pack`, :meth:`unpack`).

    flat    the chunk's dense gradients (W, b, WM, Ws, bs, as it has them), then the tensor's layout
            gradient (RNTN), in one buffer with named views
    rows    the word arrays' gradient at the chunk's distinct words (L, and LM of the MV-RNN)
    loss    the chunk's share of the data term
    """

    def __init__(self, params: Parameters, dense_names: list[str], tensor_shape: tuple[int, ...]) -> None:
        dtype = params.flat.dtype
        sizes = {name: params[name].size for name in dense_names}
        tensor_size = int(np.prod(tensor_shape))
        self.flat = np.zeros(sum(sizes.values()) + tensor_size, dtype=dtype)
        self.views: dict[str, np.ndarray] = {}
        offset = 0
        for name in dense_names:
            self.views[name] = self.flat[offset : offset + sizes[name]].reshape(params[name].shape)
            offset += sizes[name]
        self.tensor = self.flat[offset:].reshape(tensor_shape)  # (0, 0) when the model has no tensor
        self.rows = {name: WordRows(int(np.prod(params[name].shape[1:])), dtype)
                     for name in params.names() if name in WORD_ROW_NAMES}
        self.loss = 0.0

    def pack(self) -> bytes:
        """Everything the reduction reads, as bytes (the word arrays share their rows: one leaf, one word)."""
        rows = next(iter(self.rows.values())).rows
        parts = [np.array([self.loss], dtype=np.float64).tobytes(), np.array([rows.size], dtype=np.int64).tobytes(),
                 self.flat.tobytes(), rows.astype(np.int64).tobytes()]
        parts += [np.ascontiguousarray(r.values).tobytes() for r in self.rows.values()]
        return b"".join(parts)

    def unpack(self, data: bytes) -> None:
        """The inverse of :meth:`pack` (the same model and dtype on both sides)."""
        view = memoryview(data)
        self.loss = float(np.frombuffer(view[:8], dtype=np.float64)[0])
        n = int(np.frombuffer(view[8:16], dtype=np.int64)[0])
        at = 16 + self.flat.nbytes
        self.flat[:] = np.frombuffer(view[16:at], dtype=self.flat.dtype)
        rows = np.frombuffer(view[at : at + 8 * n], dtype=np.int64).copy()
        at += 8 * n
        for word_rows in self.rows.values():
            word_rows.reset(rows)
            size = n * word_rows.width * self.flat.itemsize
            word_rows.values[:] = np.frombuffer(view[at : at + size], dtype=self.flat.dtype).reshape(n, -1)
            at += size


class TreeModelObjective:
    """Loss, gradient and class probabilities of the RNN / RNTN / MV-RNN over flattened batches."""

    def __init__(self, params: Parameters, l2: L2Strengths | None = None, threads: int = 1,
                 anchors: dict[str, np.ndarray] | None = None, class_weights: np.ndarray | None = None) -> None:
        self.shape = params.shape
        # (C,) the weight of each gold class in the training loss (run/class_weights.py); prediction and
        # the forward-only scores (forward, forward_chunks) always use the plain cross-entropy (ones)
        self._ones = np.ones(self.shape.num_classes, dtype=np.float64)
        self.class_weights = self._ones if class_weights is None else np.asarray(class_weights, dtype=np.float64)
        # word array name -> the values its L2 term pulls toward (absent: toward zero)
        self.anchors = dict(anchors or {})
        self.use_tensor = self.shape.model == "rntn"
        self.use_matrices = self.shape.model == "mvrnn"
        self.l2 = l2 or L2Strengths()
        self.threads = max(1, int(threads))
        self._dtype = params.flat.dtype
        self._workspaces: list[_Workspace] = []
        # per chunk: name -> its own gradient sum of each small dense array (see module docstring)
        self._chunk_names = [name for name in params.names() if name not in _NOT_PER_CHUNK]
        self._chunk_grads: list[ChunkGradient] = []
        self._pool = ThreadPoolExecutor(self.threads) if self.threads > 1 else None
        # Parallelism comes from chunks on our own threads; BLAS inside them runs single-threaded
        # (nested BLAS threads on top of ours ran many times slower when measured).
        self._blas_limit = threadpool_limits(limits=1, user_api="blas")
        d = self.shape.dim
        self._Vsym = np.zeros((2 * d, d * 2 * d) if self.use_tensor else (0, 0), dtype=self._dtype)

    def close(self) -> None:
        if self._blas_limit is not None:
            self._blas_limit.restore_original_limits()
            self._blas_limit = None
        if self._pool is not None:
            self._pool.shutdown()
            self._pool = None

    # --- one chunk: forward (and backward) with the serial kernels -------------------------------

    def _slot(self, k: int) -> _Workspace:
        while len(self._workspaces) <= k:
            self._workspaces.append(_Workspace(self._dtype))
        return self._workspaces[k]

    def _forward_chunk(self, params: Parameters, batch: FlatBatch, ws: _Workspace, scale: float,
                       keep_for_backward: bool = True, weights: np.ndarray | None = None):
        """(loss, P, Y) of one chunk; the backward pass finds the rest in ``ws`` under the same names."""
        d, C = self.shape.dim, self.shape.num_classes
        N, M, D = batch.n_nodes, batch.n_internal, 2 * d
        P = ws.get("P", N, d)  # (N, d) node vectors
        X = ws.get("X", M, D)  # (M, D) children of each internal node ([B a ; A b] for the MV-RNN)
        Z = ws.get("Z", M, d)  # (M, d) pre-activations
        if self.use_matrices:
            PM = ws.get("PM", N, d * d).reshape(N, d, d)  # (N, d, d) node matrices
            ABt = ws.get("ABt", M * d, D)  # (M*d, D) children's matrices, stacked transposed
            PMt = ws.get("PMt", M * d, d)  # (M*d, d) a level's P^T
            forward_compose_mv(P, PM, X, Z, ABt, PMt, params.L, params.LM, params.W, params.b, params.WM,
                               batch.word, batch.left, batch.right, batch.order, batch.level_start)
        else:
            # (M, d*D) kept for the backward pass; forward only: a block of rows reused level by level
            rows = M if keep_for_backward else min(M, FORWARD_Q_ROWS)
            Q = ws.get("Q", rows if self.use_tensor else 0, d * D if self.use_tensor else 0)
            forward_compose(P, X, Z, Q, params.L, params.W, params.b, self._Vsym,
                            batch.word, batch.left, batch.right, batch.order, batch.level_start, self.use_tensor)
        Y = ws.get("Y", N, C)  # (N, C) class probabilities
        S = ws.get("S", N, C)  # (N, C) class scores
        weights = self.class_weights if weights is None else weights
        loss = forward_classify(Y, S, P, params.Ws, params.bs, batch.label, weights, scale)
        return loss, P, Y

    def _gradient_chunk(self, params: Parameters, grads: dict[str, np.ndarray], dVsym: np.ndarray,
                        batch: FlatBatch, ws: _Workspace, scale: float) -> float:
        d, C = self.shape.dim, self.shape.num_classes
        N, M, D = batch.n_nodes, batch.n_internal, 2 * d
        loss, P, Y = self._forward_chunk(params, batch, ws, scale)
        X = ws.get("X", M, D)  # from the forward pass
        E = ws.get("E", N, d)  # (N, d) error reaching each node vector
        dS = ws.get("dS", N, C)  # (N, C) softmax error
        Delta = ws.get("Delta", M, d)  # (M, d) error at pre-activations
        EX = ws.get("EX", M, D)  # (M, D) error reaching x
        backward_classify(grads["Ws"], grads["bs"], E, dS, Y, P, params.Ws, batch.label, self.class_weights, scale)
        if self.use_matrices:
            PM = ws.get("PM", N, d * d).reshape(N, d, d)  # from the forward pass
            ABt = ws.get("ABt", M * d, D)  # from the forward pass
            EM = ws.get("EM", N, d * d).reshape(N, d, d)  # (N, d, d) error reaching each node matrix
            EPt = ws.get("EPt", M * d, d)  # (M*d, d) EP^T per internal node
            EABt = ws.get("EABt", M * d, D)  # (M*d, D) a level's (WM^T EP)^T
            backward_compose_mv(grads["W"], grads["b"], grads["WM"], E, EM, Delta, EX, EPt, EABt, P, PM, X, ABt,
                                params.W, params.WM, batch.left, batch.right, batch.order, batch.level_start)
        else:
            Q = ws.get("Q", M if self.use_tensor else 0, d * D if self.use_tensor else 0)
            backward_compose(grads["W"], grads["b"], dVsym, E, Delta, EX, P, X, Q, params.W,
                             batch.left, batch.right, batch.order, batch.level_start, self.use_tensor)
        return loss

    # --- public --------------------------------------------------------------------------------------

    def loss_and_gradient(self, params: Parameters, grads: Gradient, chunks: list[FlatBatch],
                          include_l2: bool = True, group=None) -> float:
        """J of the minibatch made of ``chunks``; writes dJ/dtheta into ``grads`` (zeroed here first).

        ``include_l2=False`` leaves the L2 term out of both (the training loop adds it inside the
        optimiser's single pass, AdaGrad.step_with_l2). The word rows of ``grads`` are set to the
        minibatch's touched rows. ``group`` (run/process_group.py), when it has several ranks: rank
        r computes chunks r, r + N, r + 2N, ... and the ranks exchange their chunk gradients, so every
        rank reduces every chunk in chunk order and gets the same bits as one process.
        """
        n_trees = sum(c.n_trees for c in chunks)
        scale = 1.0 / n_trees
        if self.use_tensor:
            symmetric_tensor_layout(self._Vsym, params.V)
        while len(self._chunk_grads) < len(chunks):
            self._chunk_grads.append(ChunkGradient(params, self._chunk_names, self._Vsym.shape))
        ranks, rank = (group.size, group.rank) if group is not None else (1, 0)
        mine = [k for k in range(len(chunks)) if k % ranks == rank]

        def run(k: int) -> None:
            own, batch = self._chunk_grads[k], chunks[k]
            own.flat[:] = 0  # this chunk's own sums start from zero
            ws = self._slot(k)
            own.loss = self._gradient_chunk(params, own.views, own.tensor, batch, ws, scale)
            leaf_words = batch.word[batch.leaves]
            rows = touched_rows([leaf_words])
            slot = np.searchsorted(rows, leaf_words)  # each leaf's row among the chunk's rows
            for name, word_rows in own.rows.items():
                word_rows.reset(rows)
                errors = ws.buffers["E"] if name == "L" else ws.buffers["EM"]  # dLM[w] += EM[leaf], d*d numbers
                scatter_word_rows(word_rows.values, errors.reshape(errors.shape[0], -1), slot, batch.leaves)

        if self._pool is not None and len(mine) > 1:
            list(self._pool.map(run, mine))
        else:
            for k in mine:
                run(k)
        if ranks > 1:  # every rank gets every chunk's share
            packed = b"".join(np.array([k, len(blob)], dtype=np.int64).tobytes() + blob
                              for k in mine for blob in [self._chunk_grads[k].pack()])
            for data in group.allgather_bytes(packed):
                view, at = memoryview(data), 0
                while at < len(view):
                    k, size = (int(x) for x in np.frombuffer(view[at : at + 16], dtype=np.int64))
                    if k not in mine:
                        self._chunk_grads[k].unpack(view[at + 16 : at + 16 + size])
                    at += 16 + size

        # reduce in chunk order: bitwise independent of the thread count and of the number of ranks
        grads.zero_()
        rows = touched_rows([self._chunk_grads[k].rows["L"].rows for k in range(len(chunks))])
        for word_rows in grads.rows.values():
            word_rows.reset(rows)
        loss = 0.0
        for k in range(len(chunks)):
            own = self._chunk_grads[k]
            loss += own.loss
            for name, g in own.views.items():
                grads[name] += g
            if self.use_tensor:
                add_symmetric_layout_gradient(grads.V, own.tensor)
            for name, word_rows in own.rows.items():
                add_word_rows(grads.rows[name].values, np.searchsorted(rows, word_rows.rows), word_rows.values)
        return loss + self.add_l2(params, grads, rows) if include_l2 else loss

    def add_l2(self, params: Parameters, grads: Gradient | None, rows: np.ndarray) -> float:
        """Add the L2 term: returns its value (module docstring), adds its gradient to ``grads``.

        ``rows``: the minibatch's distinct word ids, ascending (the word arrays' touched rows).
        """
        penalty = 0.0
        for name in params.names():
            lam = self.l2.of(L2_GROUP[name])
            if lam == 0.0:
                continue
            theta = params[name]
            if name in WORD_ROW_NAMES:
                width = int(np.prod(theta.shape[1:]))
                anchor = self.anchors.get(name, theta[:0]).reshape(-1, width)
                if grads is not None:
                    values = grads.rows[name].values
                else:  # forward only: the same sums, into a scratch gradient
                    values = np.zeros((rows.shape[0], width), dtype=theta.dtype)
                squares = word_rows_l2(values, theta.reshape(-1, width), rows, anchor, theta.dtype.type(lam))
                penalty += 0.5 * lam * squares
                continue
            theta = theta.reshape(-1)
            for a in range(0, theta.size, L2_BLOCK):  # in blocks: no full-size temporary of a large group
                part = theta[a : a + L2_BLOCK]
                part64 = part.astype(np.float64)
                penalty += 0.5 * lam * float(np.dot(part64, part64))
                if grads is not None:
                    grads[name].reshape(-1)[a : a + L2_BLOCK] += grads.flat.dtype.type(lam) * part
        return penalty

    def forward(self, params: Parameters, batch: FlatBatch, copy: bool = True) -> tuple[float, np.ndarray, np.ndarray]:
        """Forward only: (cross-entropy sum over labelled nodes, P (N, d), Y (N, C)).

        With ``copy=False`` P and Y are views of workspaces, valid until the next call.
        """
        if self.use_tensor:
            symmetric_tensor_layout(self._Vsym, params.V)
        loss, P, Y = self._forward_chunk(params, batch, self._slot(0), 1.0, keep_for_backward=False,
                                         weights=self._ones)
        return (loss, P.copy(), Y.copy()) if copy else (loss, P, Y)

    def forward_chunks(self, params: Parameters, chunks: list[FlatBatch]) -> list[tuple[float, np.ndarray]]:
        """Forward only over several chunks, on the worker threads when there are any.

        Returns (cross-entropy sum, Y view) per chunk; the views stay valid until the next call.
        The chunks, not the threads, decide the arithmetic, so results do not depend on ``threads``.
        """
        if self.use_tensor:
            symmetric_tensor_layout(self._Vsym, params.V)

        def run(k: int):
            loss, _, Y = self._forward_chunk(params, chunks[k], self._slot(k), 1.0, keep_for_backward=False,
                                             weights=self._ones)
            return loss, Y

        if self._pool is not None and len(chunks) > 1:
            return list(self._pool.map(run, range(len(chunks))))
        return [run(k) for k in range(len(chunks))]

    def loss(self, params: Parameters, chunks: list[FlatBatch]) -> float:
        """J of the minibatch without the gradient (the forward-only twin of loss_and_gradient)."""
        n_trees = sum(c.n_trees for c in chunks)
        if self.use_tensor:
            symmetric_tensor_layout(self._Vsym, params.V)
        total = 0.0
        for k, batch in enumerate(chunks):
            total += self._forward_chunk(params, batch, self._slot(k), 1.0 / n_trees)[0]
        return total + self.add_l2(params, None, touched_rows([c.word[c.leaves] for c in chunks]))
