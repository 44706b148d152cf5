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

Models: the composition (forward and backward up the trees, the word arrays' node errors,
per-step preparation such as the RNTN's tensor layout) is the model specification's
(model_spec.py, one module per model); the classifier (kernels/node_classifier.py) and
everything else here is shared by every model. A specification may also run a chunk's whole
gradient -- composition, classifier and word rows -- as compiled calls of its own
(``gradient_chunks``: the RNN and the RNTN do, kernels/chunk_gradient.py, with the same bits as
the chunk-by-chunk path here, which the MV-RNN takes).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg.cython_blas  # noqa: F401  the BLAS numba's np.dot calls: loaded before it is limited
from threadpoolctl import threadpool_limits

from rntn_engine.data.batches import EncodedTreebank, FlatBatch, make_batch
from rntn_engine.kernels.adagrad_step import word_rows_l2
from rntn_engine.kernels.chunk_balance import LEVEL_WORK, NODE_WORK, balanced_cuts, tree_shapes
from rntn_engine.kernels.node_classifier import backward_classify, forward_classify
from rntn_engine.kernels.word_rows import add_word_rows, chunk_word_rows, merged_rows, scatter_word_rows, touched_rows
from rntn_engine.model.model_registry import model_spec
from rntn_engine.model.model_spec import Activations, ChunkJob
from rntn_engine.model.part_threads import PartThreads
from rntn_engine.model.parameters import L2_GROUP, L2_GROUPS, WORD_ROW_NAMES, Gradient, Parameters, WordRows


@dataclass(frozen=True)
class L2Strengths:
    """lambda per L2 group: one field per entry of model/parameters.py's L2_GROUPS (a test checks),
    defaulting to the group's default; which parameter is in which group, PARAMETERS says."""

    words: float = L2_GROUPS["words"].default  # word vectors L
    compose: float = L2_GROUPS["compose"].default  # composition matrix W (and WM of the MV-RNN)
    tensor: float = L2_GROUPS["tensor"].default  # composition tensor V
    classifier: float = L2_GROUPS["classifier"].default  # classifier weights Ws
    word_matrices: float = L2_GROUPS["word_matrices"].default  # word matrices LM (MV-RNN)

    def of(self, group: str | None) -> float:
        return 0.0 if group is None else float(getattr(self, group))


L2_BLOCK = 1 << 22  # elements per pass of a dense group's L2 term: its float64 copies stay at 32 MiB


def split_into_chunks(bank: EncodedTreebank, tree_ids: np.ndarray, chunks: int) -> list[FlatBatch]:
    """Cut a minibatch into at most ``chunks`` contiguous groups of trees of similar work: internal nodes
    plus a fixed cost per level (kernels/chunk_balance.py)."""
    tree_ids = np.asarray(tree_ids, dtype=np.int64)
    if len(tree_ids) == 0:
        return []
    internal, height = tree_shapes(bank.left, bank.right, bank.start, tree_ids)
    bounds = balanced_cuts(internal, height, max(1, chunks), NODE_WORK, LEVEL_WORK)
    return [make_batch(bank, tree_ids[a:z]) for a, z in zip(bounds[:-1], bounds[1:]) if z > a]


class ChunkGradient:
    """One chunk's share of a minibatch's loss and gradient, summed inside the chunk: what a worker thread
    hands to the reduction, and what MPI ranks exchange (:meth:`pack`, :meth:`unpack`).

    flat    the chunk's dense gradients (W, b, WM, Ws, bs, as it has them), then the model's layout
            gradient (the RNTN's tensor), in one buffer with named views
    rows    the word arrays' gradient at the chunk's distinct words (L, and LM of the MV-RNN)
    loss    the chunk's share of the data term
    """

    def __init__(self, params: Parameters, dense_names: list[str], layout_shape: tuple[int, ...]) -> None:
        dtype = params.flat.dtype
        sizes = {name: params[name].size for name in dense_names}
        layout_size = int(np.prod(layout_shape))
        self.flat = np.zeros(sum(sizes.values()) + layout_size, dtype=dtype)
        self.views: dict[str, np.ndarray] = {}
        offset = 0
        for name in dense_names:
            self.views[name] = self.flat[offset : offset + sizes[name]].reshape(params[name].shape)
            offset += sizes[name]
        self.dense = self.flat[:offset]  # the dense gradients, summed into (the layout is overwritten)
        self.layout = self.flat[offset:].reshape(layout_shape)  # (0, 0) when the model has no layout gradient
        self.rows = {name: WordRows(int(np.prod(params[name].shape[1:])), dtype)
                     for name in params.names() if name in WORD_ROW_NAMES}
        self.loss = 0.0

    def pack(self) -> bytes:
        """Everything the reduction reads, as bytes (the word arrays share their rows: one leaf, one word)."""
        out = np.empty(self.packed_size(), dtype=np.uint8)
        self.pack_into(out)
        return out.tobytes()

    def packed_size(self) -> int:
        n = next(iter(self.rows.values())).rows.size
        return 16 + self.flat.nbytes + 8 * n + sum(n * r.width * self.flat.itemsize for r in self.rows.values())

    def pack_into(self, out: np.ndarray) -> None:
        """:meth:`pack`'s bytes written into ``out`` (uint8, ``packed_size()`` long): one copy, no temporaries."""
        rows = next(iter(self.rows.values())).rows
        out[:8].view(np.float64)[0] = self.loss
        out[8:16].view(np.int64)[0] = rows.size
        at = 16 + self.flat.nbytes
        out[16:at].view(self.flat.dtype)[:] = self.flat
        out[at : at + 8 * rows.size].view(np.int64)[:] = rows
        at += 8 * rows.size
        for word_rows in self.rows.values():
            size = rows.size * word_rows.width * self.flat.itemsize
            out[at : at + size].view(self.flat.dtype).reshape(rows.size, -1)[:] = word_rows.values
            at += size

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
        self.model = model_spec(self.shape.model)(self.shape)  # the composition: model_spec.py
        # (C,) the weight of each gold class in the training loss (run/class_weights.py); prediction and
        # the forward-only scores (forward, forward_chunks) always use the plain cross-entropy (ones)
        self._ones = np.ones(self.shape.num_classes, dtype=np.float64)
        self.class_weights = self._ones if class_weights is None else np.asarray(class_weights, dtype=np.float64)
        # word array name -> the values its L2 term pulls toward (absent: toward zero)
        self.anchors = dict(anchors or {})
        self.l2 = l2 or L2Strengths()
        self.threads = max(1, int(threads))
        self._dtype = params.flat.dtype
        self._activations: list[Activations] = []  # one set of buffers per chunk
        # per chunk: its own gradient sum of each small dense array (see module docstring); the word
        # rows are scattered from node errors, and a layout-reduced array (the RNTN's V) from its layout
        self._chunk_names = [name for name in params.names()
                             if name not in WORD_ROW_NAMES and name not in self.model.reduced_from_layout]
        self._chunk_grads: list[ChunkGradient] = []
        self._threads = PartThreads(self.threads)
        # Parallelism comes from chunks on our own threads; BLAS inside them runs single-threaded
        # (nested BLAS threads on top of ours ran many times slower when measured).
        self._blas_limit = threadpool_limits(limits=1, user_api="blas")

    def close(self) -> None:
        if self._blas_limit is not None:
            self._blas_limit.restore_original_limits()
            self._blas_limit = None
        self._threads.close()

    def _run_parts(self, work, parts: list) -> list:
        """[work(part) for every part], on the worker threads when there are any (model_spec.PartRunner)."""
        return self._threads.run(work, parts)

    # --- one chunk: forward (and backward) with the serial kernels -------------------------------

    def _slot(self, k: int) -> Activations:
        while len(self._activations) <= k:
            self._activations.append(self.model.new_activations())
        return self._activations[k]

    def _forward_chunk(self, params: Parameters, batch: FlatBatch, acts: Activations, scale: float,
                       keep_for_backward: bool = True, weights: np.ndarray | None = None) -> float:
        """The chunk's share of the data term; P, Y (and what backward needs) are left in ``acts``.
        ``weights``: the class weights of the loss (default: the training weights)."""
        N, C = batch.n_nodes, self.shape.num_classes
        self.model.forward(params, batch, acts, keep_for_backward)
        acts.resize({"Y": (N, C), "S": (N, C)})
        weights = self.class_weights if weights is None else weights
        return forward_classify(acts.Y, acts.S, acts.P, params.Ws, params.bs, batch.label, weights, scale)

    def _gradient_chunk(self, params: Parameters, grads: dict[str, np.ndarray], layout_grad: np.ndarray,
                        batch: FlatBatch, acts: Activations, scale: float) -> float:
        N, C = batch.n_nodes, self.shape.num_classes
        loss = self._forward_chunk(params, batch, acts, scale)
        acts.resize({"E": (N, self.shape.dim), "dS": (N, C)})
        backward_classify(grads["Ws"], grads["bs"], acts.E, acts.dS, acts.Y, acts.P, params.Ws, batch.label,
                          self.class_weights, scale)
        self.model.backward(params, grads, layout_grad, batch, acts)
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
        kernel_threads = self._threads.kernel_threads
        self.model.prepare(params, self._run_parts, kernel_threads=kernel_threads)
        while len(self._chunk_grads) < len(chunks):
            self._chunk_grads.append(ChunkGradient(params, self._chunk_names, self.model.layout_gradient_shape()))
        ranks, rank = (group.size, group.rank) if group is not None else (1, 0)
        mine = [k for k in range(len(chunks)) if k % ranks == rank]
        for k in mine:  # each chunk's own sums start from zero (its layout gradient is written whole)
            self._chunk_grads[k].dense[:] = 0

        def run(k: int) -> None:
            own, batch = self._chunk_grads[k], chunks[k]
            acts = self._slot(k)
            own.loss = self._gradient_chunk(params, own.views, own.layout, batch, acts, scale)
            rows, slot = chunk_word_rows(batch.word, batch.leaves)  # the chunk's words; each leaf's row among them
            for name, errors in self.model.word_errors(acts).items():  # (N, width): a leaf's row is dL[w]
                own.rows[name].reset(rows)
                scatter_word_rows(own.rows[name].values, errors, slot, batch.leaves)

        # the model's compiled chunk gradient when it has one (the vector models), else chunk by chunk here
        jobs = [ChunkJob(chunks[k], self._slot(k), self._chunk_grads[k].views, self._chunk_grads[k].layout,
                         self._chunk_grads[k].rows) for k in mine]
        if self.model.gradient_chunks(params, jobs, self.class_weights, scale, self._threads):
            for k, job in zip(mine, jobs):
                self._chunk_grads[k].loss = job.loss
        else:
            self._run_parts(run, mine)
        if ranks > 1:  # every rank gets every chunk's share: (chunk, size, packed gradient) for each of mine
            sizes = [self._chunk_grads[k].packed_size() for k in mine]
            packed = np.empty(sum(16 + size for size in sizes), dtype=np.uint8)
            at = 0
            for k, size in zip(mine, sizes):
                packed[at : at + 16].view(np.int64)[:] = (k, size)
                self._chunk_grads[k].pack_into(packed[at + 16 : at + 16 + size])
                at += 16 + size
            for data in group.allgather_views(packed):
                view, at = memoryview(data), 0
                while at < len(view):
                    k, size = (int(x) for x in np.frombuffer(view[at : at + 16], dtype=np.int64))
                    if k not in mine:
                        self._chunk_grads[k].unpack(view[at + 16 : at + 16 + size])
                    at += 16 + size

        # reduce in chunk order: bitwise independent of the thread count and of the number of ranks
        grads.zero_(keep=self.model.reduced_from_layout)  # set_layout_gradients writes those whole
        # every chunk's distinct words, ascending, in an array of their own (the chunks' are reused)
        rows = np.zeros(0, dtype=np.int64)
        for k in range(len(chunks)):
            rows = merged_rows(rows, self._chunk_grads[k].rows["L"].rows)
        for word_rows in grads.rows.values():
            word_rows.reset(rows)
        loss = 0.0
        for k in range(len(chunks)):
            own = self._chunk_grads[k]
            loss += own.loss
            for name, g in own.views.items():
                grads[name] += g
            for name, word_rows in own.rows.items():
                add_word_rows(grads.rows[name].values, rows, word_rows.rows, word_rows.values)
        self.model.set_layout_gradients(grads, [self._chunk_grads[k].layout for k in range(len(chunks))],
                                        self._run_parts, kernel_threads)
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
        self.model.prepare(params, self._run_parts, forward_only=True)
        acts = self._slot(0)
        loss = self._forward_chunk(params, batch, acts, 1.0, keep_for_backward=False, weights=self._ones)
        return (loss, acts.P.copy(), acts.Y.copy()) if copy else (loss, acts.P, acts.Y)

    def forward_chunks(self, params: Parameters, chunks: list[FlatBatch]) -> list[tuple[float, np.ndarray]]:
        """Forward only over several chunks, on the worker threads when there are any.

        Returns (cross-entropy sum, Y view) per chunk; the views stay valid until the next call.
        The chunks, not the threads, decide the arithmetic, so results do not depend on ``threads``.
        """
        self.model.prepare(params, self._run_parts, forward_only=True)

        def run(k: int):
            acts = self._slot(k)
            loss = self._forward_chunk(params, chunks[k], acts, 1.0, keep_for_backward=False, weights=self._ones)
            return loss, acts.Y

        return self._run_parts(run, list(range(len(chunks))))

    def loss(self, params: Parameters, chunks: list[FlatBatch]) -> float:
        """J of the minibatch without the gradient (the forward-only twin of loss_and_gradient)."""
        n_trees = sum(c.n_trees for c in chunks)
        self.model.prepare(params, self._run_parts)
        total = 0.0
        for k, batch in enumerate(chunks):
            total += self._forward_chunk(params, batch, self._slot(k), 1.0 / n_trees)
        return total + self.add_l2(params, None, touched_rows([c.word[c.leaves] for c in chunks]))
