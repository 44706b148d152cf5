"""What every composition model declares: the base of the model specifications.

A model specification (one module per model: rnn_model.py, rntn_model.py, mvrnn_model.py,
registered in model_registry.py) is one typed unit holding

- its parameters: the symbols of :data:`model.parameters.PARAMETERS` it uses, in the order of
  the flat buffer (every fact about a parameter -- shape, L2 group, checkpoint name,
  description -- is said once, in that table);
- its initialisation, drawn from one generator in an order the model states;
- its composition forward and backward over a batch, on typed activation buffers (a dataclass
  per model, :class:`Activations`), calling its kernels;
- its memory estimate: the activation numbers a batch of N nodes (M internal) needs.

The objective (objective.py) holds everything the models share: the classifier at every node,
the chunks and threads, the reduction in chunk order, the sparse word rows and the L2 term. It
asks the specification for the rest, and never tests a model's name.

Adding a model: write one module with a :class:`ModelSpec` subclass and its activations, and add
one line to ``MODEL_SPECS`` in model_registry.py (DEVELOPERS.md, "Adding a model").
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass, field, fields
from functools import cache
from typing import TYPE_CHECKING, Callable, ClassVar

import numpy as np

if TYPE_CHECKING:  # the specifications stay importable by parameters.py, which defines these
    from rntn_engine.data.batches import FlatBatch
    from rntn_engine.model.parameters import ModelShape, Parameters

# run_parts(work, parts): work(part) for every part, in any order or at once (each part writes its own elements)
PartRunner = Callable[[Callable[[object], None], list], None]


def run_in_order(work: Callable[[object], None], parts: list) -> None:
    """The PartRunner without threads."""
    for part in parts:
        work(part)


@dataclass
class ChunkJob:
    """One chunk of a minibatch handed to a model's compiled chunk gradient (ModelSpec.gradient_chunks)."""

    batch: FlatBatch
    acts: Activations  # the chunk's workspaces
    grads: dict[str, np.ndarray]  # the chunk's own dense gradients (W, b, Ws, bs, ...), zero on entry, added to
    layout_grad: np.ndarray  # the chunk's layout gradient (layout_gradient_shape), overwritten
    word_rows: dict  # word array symbol -> model/parameters.py WordRows, set to the chunk's rows and gradient
    loss: float = 0.0  # out: the chunk's share of the data term


MIN_ROWS = 16  # an activation buffer never starts smaller: tiny batches do not reallocate every step


@dataclass
class Activations:
    """Grow-only buffers of one chunk, typed: subclasses declare one ``np.ndarray`` field per buffer.

    :meth:`resize` makes every field a view of ``rows`` rows of a buffer kept between steps, so a
    steady-state step allocates nothing per node. Contents are not cleared: kernels write every
    element they later read. Every model has P (node vectors) and E (the error reaching them), and
the classifier's Y, S and dS.
    """

    dtype: np.dtype
    P: np.ndarray = field(default=None)  # (N, d) node vectors
    Y: np.ndarray = field(default=None)  # (N, C) class probabilities (the shared classifier)
    S: np.ndarray = field(default=None)  # (N, C) class scores
    E: np.ndarray = field(default=None)  # (N, d) error reaching each node vector
    dS: np.ndarray = field(default=None)  # (N, C) softmax error
    _store: dict = field(default_factory=dict, repr=False)  # field name -> its full grow-only buffer

    def resize(self, sizes: dict[str, tuple[int, int]]) -> None:
        """Make each named field a (rows, cols) view; ``sizes`` names fields of this class only."""
        known = _buffer_names(type(self))
        for name, (rows, cols) in sizes.items():
            if name not in known:
                raise AttributeError(f"{type(self).__name__} has no activation buffer {name!r}")
            buf = self._store.get(name)
            if buf is None or buf.shape[0] < rows or buf.shape[1] != cols:
                buf = np.empty((max(rows, MIN_ROWS), cols), dtype=self.dtype)
                self._store[name] = buf
            setattr(self, name, buf[:rows])


@cache
def _buffer_names(kind: type[Activations]) -> frozenset[str]:
    """The activation buffers a class declares (its np.ndarray fields), worked out once per class."""
    return frozenset(f.name for f in fields(kind)) - {"dtype", "_store"}


class ModelSpec(ABC):
    """One composition model: parameters, initialisation, forward/backward, memory (module docstring).

    Instances hold one objective's per-step state (for example the RNTN's symmetric tensor
    layout); the class attributes are the model's facts.
    """

    name: ClassVar[str]  # the --model value
    title: ClassVar[str]  # published name and year, for help texts and documents
    parameters: ClassVar[tuple[str, ...]]  # symbols in PARAMETERS, in the order of the flat buffer
    activations: ClassVar[type[Activations]]
    # dense parameters whose chunk gradient is not a plain sum of a per-chunk array (the RNTN's V,
    # reduced from its layout gradient by set_layout_gradients)
    reduced_from_layout: ClassVar[tuple[str, ...]] = ()

    def __init__(self, shape: ModelShape) -> None:
        self.shape = shape

    # --- facts ----------------------------------------------------------------------------------------

    @abstractmethod
    def activation_numbers(self, n_nodes: int, n_internal: int, backward: bool = True) -> int:
        """Numbers held by one chunk's composition buffers (all but the classifier's Y, S, dS) for a batch
        of ``n_nodes`` nodes, ``n_internal`` of them internal; forward only when not ``backward``."""

    # --- initialisation -------------------------------------------------------------------------------

    @abstractmethod
    def initialise(self, params: Parameters, rng: np.random.Generator) -> None:
        """Draw every parameter of ``params`` from ``rng`` (in the model's stated order)."""

    # --- composition ----------------------------------------------------------------------------------

    def new_activations(self) -> Activations:
        return self.activations(np.dtype(self.shape.dtype))

    def prepare(self, params: Parameters, run_parts: PartRunner = run_in_order, forward_only: bool = False,
                kernel_threads: int = 0) -> None:
        """Per-step work on the parameters before any chunk runs (shared by the chunks, read-only);
        ``forward_only``: for forward passes that keep nothing for a backward pass.

        ``run_parts(work, parts)`` calls ``work(part)`` for every part, on the objective's worker
        threads when it has them: for work cut into fixed parts that touch disjoint elements.
        ``kernel_threads`` > 0: run such parts in a threaded kernel on that many of numba's threads
        instead (PartThreads.kernel_threads).
        """

    @abstractmethod
    def forward(self, params: Parameters, batch: FlatBatch, acts: Activations, keep_for_backward: bool) -> None:
        """Fill ``acts.P`` (N, d) with every node's vector, and what backward needs when ``keep_for_backward``."""

    @abstractmethod
    def backward(self, params: Parameters, grads: dict[str, np.ndarray], layout_grad: np.ndarray,
                 batch: FlatBatch, acts: Activations) -> None:
        """Add the composition's gradient to ``grads`` (the chunk's dense arrays) and ``layout_grad``.

        On entry ``acts.E`` holds each node's error from its own classifier; on exit the error of
        every node (the leaves' is what word_errors hands to the word rows).
        """

    @abstractmethod
    def word_errors(self, acts: Activations) -> dict[str, np.ndarray]:
        """Word array symbol -> (N, width) error of every node: a leaf's row is its word row's gradient."""

    def gradient_chunks(self, params: Parameters, jobs: list[ChunkJob], class_weights: np.ndarray, scale: float,
                        threads) -> bool:
        """The whole gradient of each chunk in ``jobs`` (forward, the shared classifier with
        ``class_weights`` and ``scale``, backward, the word rows) in compiled calls, on ``threads``
        (model/part_threads.py PartThreads: its ``kernel_threads``, or its Python threads); the same
        bits as the objective's chunk-by-chunk path. Returns False, doing nothing, when the model has no
        such call: the objective then runs forward, the classifier and backward itself."""
        return False

    # --- a gradient reduced from another layout -------------------------------------------------------

    def layout_gradient_shape(self) -> tuple[int, ...]:
        """Shape of a chunk's extra gradient buffer ((0, 0): none)."""
        return (0, 0)

    def set_layout_gradients(self, grads: dict[str, np.ndarray], layout_grads: list[np.ndarray],
                             run_parts: PartRunner = run_in_order, kernel_threads: int = 0) -> None:
        """Set the minibatch's arrays of ``reduced_from_layout`` in ``grads`` to the sum of every chunk's
        extra gradient, in chunk order for every element, with the bits of zeroing them and adding the
        chunks one by one (``run_parts`` and ``kernel_threads`` as in prepare); nothing for a model without
        one. The chunks' buffers are scratch, rewritten every step: this may overwrite them."""


# --- draws shared by the models (model/parameters.py lists the distributions) -------------------------


def draw_word_vectors(params: Parameters, rng: np.random.Generator) -> None:
    """L ~ U(-0.1, 0.1)."""
    params.L[:] = rng.uniform(-0.1, 0.1, size=params.L.shape).astype(params.flat.dtype)


def draw_composition(target: np.ndarray, rng: np.random.Generator) -> None:
    """target (d, D) ~ 0.5 [I I] + U(-r, r), r = 1/sqrt(D): starts near the average of the two children."""
    d, D = target.shape
    r = 1.0 / np.sqrt(D)
    target[:] = (0.5 * np.hstack([np.eye(d), np.eye(d)]) + rng.uniform(-r, r, size=(d, D))).astype(target.dtype)


def draw_classifier(params: Parameters, rng: np.random.Generator) -> None:
    """Ws ~ U(-s, s), s = sqrt(6 / (C + d)) (uniform fan-in/fan-out scaling, 2010)."""
    C, d = params.Ws.shape
    s = np.sqrt(6.0 / (C + d))
    params.Ws[:] = rng.uniform(-s, s, size=(C, d)).astype(params.flat.dtype)
