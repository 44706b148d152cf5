"""Model parameters: what each one is, one flat buffer with named views, and the gradient.

Legend: |V| vocabulary size, d vector size, D = 2d, C classes.

Every parameter is declared once, in :data:`PARAMETERS` (a :class:`ParameterSpec`): its
math symbol (used in the code and the docstrings), the name of its dataset in checkpoint
files, its shape, its L2 group, whether it has one row per vocabulary word, and a
description. Which parameters a model has, in which order, its specification says
(model_spec.py; one module per model, listed in model_registry.py). Everything else (L2
strengths, checkpoint layout and descriptions, the memory estimate) is derived from these.

    symbol  stored as                  shape        L2 group
    L       word_vectors               (|V|, d)     words          row 0 = unknown word
    W       composition_matrix         (d, D)       compose
    b       composition_bias           (d,)         (none)
    V       composition_tensor         (d, D, D)    tensor         RNTN only
    LM      word_matrices              (|V|, d, d)  word_matrices  MV-RNN only
    WM      phrase_matrix_composition  (d, D)       compose        MV-RNN only: P = WM [P_l ; P_r]
    Ws      classifier_weights         (C, d)       classifier
    bs      classifier_bias            (C,)         (none)

Models: "rnn" (L, W, b, Ws, bs), "rntn" (+ V; RNTN, 2013), "mvrnn" (+ LM, WM; MV-RNN, 2012).

Because every array is a view of one contiguous buffer, the optimiser and the
checkpoint writer treat all of them as one vector. A gradient (:class:`Gradient`) keeps
the same layout for the dense arrays (W, b, V, WM, Ws, bs) in one flat buffer, but holds
the word arrays (L, LM: one row per vocabulary word) as the rows a minibatch touched
only, so a training step costs what its trees touch, whatever the vocabulary size.

Initialisation (seeded, documented in README):
    L  ~ U(-0.1, 0.1)
    W  ~ 0.5 [I I] + U(-r, r),  r = 1/sqrt(D)   (starts near the average of the children)
    V  ~ U(-1/D, 1/D)                           (small: the model starts close to the RNN)
    Ws ~ U(-s, s),  s = sqrt(6 / (C + d))        (uniform fan-in/fan-out scaling, 2010)
    LM[w] = I + U(-0.01, 0.01) elementwise      (near the identity: x = [B a ; A b] starts as [a ; b])
    WM ~ 0.5 [I I] + U(-r, r),  r = 1/sqrt(D)   (like W: a node's matrix starts near the children's average)
    b, bs = 0
The draws come from one generator, in the order each model's specification states: L, W,
V (RNTN), Ws, then LM (word by word, row order) and WM (MV-RNN). The MV-RNN's arrays are
drawn after all the others, so the arrays the models share (L, W, Ws) are identical for one
seed (mvrnn_model.py says where the word matrices' start comes from).

Memory: an MV-RNN holds |V| d^2 numbers in LM alone (100,000 words at d = 25 are 62.5
million per copy; training keeps two full copies, parameters and AdaGrad sums).
:func:`check_memory` refuses a model whose training state would exceed a limit, with the
estimate and what to change.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from rntn_engine.model.model_registry import MODEL_SPECS, MODELS, model_spec  # noqa: F401  MODELS: re-exported

DTYPES = {"float32": np.float32, "float64": np.float64}


@dataclass(frozen=True)
class ParameterSpec:
    """Everything about one parameter array, said once."""

    symbol: str  # math symbol, as in the equations and the code (params.W)
    stored_as: str  # dataset name in checkpoint files
    dims: str  # shape in the legend's letters: "V d" is (|V|, d); "d D D" is (d, 2d, 2d)
    l2_group: str | None  # which L2 strength applies (None: not regularised)
    word_rows: bool  # one row per vocabulary word (its gradient is the minibatch's rows only)
    description: str  # what it is, with its equation

    def shape(self, vocab_size: int, dim: int, num_classes: int) -> tuple[int, ...]:
        sizes = {"V": vocab_size, "d": dim, "D": 2 * dim, "C": num_classes}
        return tuple(sizes[letter] for letter in self.dims.split())


PARAMETERS = {spec.symbol: spec for spec in (
    ParameterSpec("L", "word_vectors", "V d", "words", True,
                  "word vectors L, one row per vocabulary id (row 0: unknown word); a leaf's p = L[w]"),
    ParameterSpec("W", "composition_matrix", "d D", "compose", False,
                  "composition matrix W, d x 2d: p = tanh(W [p_left ; p_right] + b (+ h))"),
    ParameterSpec("b", "composition_bias", "d", None, False, "composition bias b, d"),
    ParameterSpec("V", "composition_tensor", "d D D", "tensor", False,
                  "composition tensor V, d x 2d x 2d: h_k = x^T V[k] x with x = [p_left ; p_right] (RNTN)"),
    ParameterSpec("LM", "word_matrices", "V d d", "word_matrices", True,
                  "word matrices LM, |V| x d x d (row 0: unknown word); a leaf's matrix P = LM[w] (MV-RNN)"),
    ParameterSpec("WM", "phrase_matrix_composition", "d D", "compose", False,
                  "phrase-matrix composition WM, d x 2d: P = WM [P_left ; P_right] (MV-RNN)"),
    ParameterSpec("Ws", "classifier_weights", "C d", "classifier", False,
                  "classifier weights Ws, C x d: y = softmax(Ws p + bs) at every node"),
    ParameterSpec("bs", "classifier_bias", "C", None, False, "classifier bias bs, C"),
)}

@dataclass(frozen=True)
class L2Group:
    """One L2 strength: the parameters whose ParameterSpec.l2_group names it share it."""

    name: str
    default: float  # chosen by our defaults sweep (README, "How the defaults were chosen")
    help: str


L2_GROUPS = {group.name: group for group in (
    L2Group("words", 1e-5, "L2 strength on word vectors (rows of the minibatch's words)."),
    L2Group("compose", 1e-4, "L2 strength on the composition matrix W (and WM of the mvrnn)."),
    L2Group("tensor", 1e-4, "L2 strength on the composition tensor V."),
    L2Group("classifier", 1e-4, "L2 strength on the classifier weights."),
    L2Group("word_matrices", 1e-3, "L2 strength on the word matrices (mvrnn)."),
)}

# the parameters of each model, in the order of the flat buffer (each model's specification says)
MODEL_PARAMETERS = {name: spec.parameters for name, spec in MODEL_SPECS.items()}

# which L2 group regularises each parameter (None: not regularised), and the word arrays
L2_GROUP = {symbol: spec.l2_group for symbol, spec in PARAMETERS.items()}
WORD_ROW_NAMES = tuple(symbol for symbol, spec in PARAMETERS.items() if spec.word_rows)


def parameter_shapes(model: str, vocab_size: int, dim: int, num_classes: int) -> dict[str, tuple[int, ...]]:
    """Ordered name -> shape of every parameter array of ``model`` (ValueError naming the choices if unknown)."""
    return {symbol: PARAMETERS[symbol].shape(vocab_size, dim, num_classes)
            for symbol in model_spec(model).parameters}


@dataclass(frozen=True)
class ModelShape:
    """Everything that fixes the size and meaning of the parameter buffer."""

    model: str  # "rnn", "rntn" or "mvrnn"
    vocab_size: int  # rows of L, including the unknown word
    dim: int  # d, the size of every node vector
    num_classes: int  # C
    dtype: str  # "float32" or "float64"

    def shapes(self) -> dict[str, tuple[int, ...]]:
        return parameter_shapes(self.model, self.vocab_size, self.dim, self.num_classes)

    def count(self) -> int:
        """Number of scalar parameters."""
        return int(sum(np.prod(s) for s in self.shapes().values()))

    def dense_count(self) -> int:
        """Number of scalars outside the word arrays (the size of a gradient's dense buffer)."""
        return int(sum(np.prod(s) for name, s in self.shapes().items() if name not in WORD_ROW_NAMES))

    def training_bytes(self, anchored_words: bool = False) -> int:
        """Parameters + AdaGrad sums + the gradient's dense buffer, in bytes (workspaces and the
        minibatch's word rows excluded); plus a copy of L when L2 pulls word vectors toward their
        starting values (``anchored_words``)."""
        anchor = int(np.prod(self.shapes()["L"])) if anchored_words else 0
        return (2 * self.count() + self.dense_count() + anchor) * np.dtype(DTYPES[self.dtype]).itemsize


class Parameters:
    """A flat buffer and named views into it (``params.L``, ``params["W"]``, ...)."""

    def __init__(self, shape: ModelShape, flat: np.ndarray | None = None) -> None:
        self.shape = shape
        dtype = DTYPES[shape.dtype]
        total = shape.count()
        if flat is None:
            flat = np.zeros(total, dtype=dtype)
        if flat.dtype != dtype or flat.shape != (total,):
            raise ValueError(f"flat buffer must be ({total},) {shape.dtype}, got {flat.shape} {flat.dtype}")
        self.flat = flat
        self.views: dict[str, np.ndarray] = {}
        offset = 0
        for name, s in shape.shapes().items():
            n = int(np.prod(s))
            self.views[name] = flat[offset : offset + n].reshape(s)
            offset += n

    def __getitem__(self, name: str) -> np.ndarray:
        return self.views[name]

    def __setitem__(self, name: str, value: np.ndarray) -> None:
        # `params[name] += g` modifies the view in place and then assigns it back: nothing to copy
        view = self.views[name]
        if value is not view:
            view[...] = value

    def __getattr__(self, name: str) -> np.ndarray:
        views = self.__dict__.get("views")
        if views is not None and name in views:
            return views[name]
        raise AttributeError(name)

    def names(self) -> list[str]:
        return list(self.views)

    def zeros_like(self) -> "Parameters":
        return Parameters(self.shape)

    def copy(self) -> "Parameters":
        return Parameters(self.shape, self.flat.copy())

    def zero_(self) -> None:
        """Set every element to zero (AdaGrad's reset of its sums, tests)."""
        self.flat[:] = 0


class WordRows:
    """The gradient of one word array (L or LM) at the rows a minibatch touched.

    ``rows`` (n,) int64: distinct word ids, ascending (a fixed order, so results never depend
    on how the minibatch was split or threaded); ``values`` (n, width): the gradient of those
    rows, width = d for L and d*d for LM. Storage grows once to the largest n seen.
    """

    def __init__(self, width: int, dtype: np.dtype) -> None:
        self.width = width
        self._buffer = np.zeros((16, width), dtype=dtype)
        self._ids = np.zeros(16, dtype=np.int64)  # rows written by a kernel (reserve / hold)
        self.rows = np.zeros(0, dtype=np.int64)
        self.values = self._buffer[:0]

    def reserve(self, n: int) -> tuple[np.ndarray, np.ndarray]:
        """Room for up to ``n`` rows, for a kernel to fill: (values buffer (>= n, width), ids buffer (>= n,)
        int64); then :meth:`hold` the number it wrote. Contents are not cleared."""
        if n > self._buffer.shape[0]:
            self._buffer = np.zeros((max(n, 2 * self._buffer.shape[0]), self.width), dtype=self._buffer.dtype)
        if n > self._ids.shape[0]:
            self._ids = np.zeros(max(n, 2 * self._ids.shape[0]), dtype=np.int64)
        return self._buffer, self._ids

    def hold(self, n: int) -> None:
        """Hold the first ``n`` rows a kernel wrote into :meth:`reserve`'s buffers (ids sorted, distinct)."""
        self.rows = self._ids[:n]
        self.values = self._buffer[:n]

    def reset(self, rows: np.ndarray) -> None:
        """Hold the rows ``rows`` (sorted, distinct), with zero gradient."""
        n = rows.shape[0]
        if n > self._buffer.shape[0]:
            self._buffer = np.zeros((max(n, 2 * self._buffer.shape[0]), self.width), dtype=self._buffer.dtype)
        self.rows = rows.astype(np.int64, copy=False)
        self.values = self._buffer[:n]
        self.values[...] = 0

    def clear(self) -> None:
        self.reset(np.zeros(0, dtype=np.int64))


class Gradient:
    """dJ/dtheta for a minibatch: dense arrays in one flat buffer with named views, word arrays as rows.

    ``grads.W`` / ``grads["W"]`` are views of the dense buffer ``grads.flat``; ``grads.rows["L"]``
    (and ``["LM"]`` for the MV-RNN) is a :class:`WordRows`. :meth:`dense` builds the full-size
    array of any name, for checks and tests (it allocates |V| rows: never on the training path).
    """

    def __init__(self, shape: ModelShape) -> None:
        self.shape = shape
        dtype = DTYPES[shape.dtype]
        shapes = shape.shapes()
        self.flat = np.zeros(shape.dense_count(), dtype=dtype)
        self.views: dict[str, np.ndarray] = {}
        self.rows: dict[str, WordRows] = {}
        offset = 0
        for name, s in shapes.items():
            if name in WORD_ROW_NAMES:
                self.rows[name] = WordRows(int(np.prod(s[1:])), dtype)
                continue
            n = int(np.prod(s))
            self.views[name] = self.flat[offset : offset + n].reshape(s)
            offset += n

    def names(self) -> list[str]:
        return list(self.shape.shapes())

    def __getitem__(self, name: str) -> np.ndarray:
        if name in self.rows:
            raise KeyError(f"{name} is held as touched rows: use .rows[{name!r}] or .dense({name!r})")
        return self.views[name]

    def __setitem__(self, name: str, value: np.ndarray) -> None:
        # `grads[name] += g` adds in place into the view, then assigns it back: nothing to copy
        if value is not self[name]:
            raise ValueError(f"assign gradients in place (grads[{name!r}] += ...), not by replacing the view")

    def __getattr__(self, name: str) -> np.ndarray:
        views = self.__dict__.get("views")
        if views is not None and name in views:
            return views[name]
        raise AttributeError(name)

    def dense(self, name: str) -> np.ndarray:
        """A full-size copy of the gradient of ``name`` (zero in the rows the minibatch did not touch)."""
        if name not in self.rows:
            return self.views[name].copy()
        shape = self.shape.shapes()[name]
        out = np.zeros((shape[0], self.rows[name].width), dtype=self.flat.dtype)
        out[self.rows[name].rows] = self.rows[name].values
        return out.reshape(shape)

    def zero_(self, keep: tuple[str, ...] = ()) -> None:
        """The one explicit zeroing step: dense buffer to zero, no word rows. ``keep``: dense arrays left
        as they are, for a caller that overwrites them next (the reduction's layout-reduced arrays:
        zeroing the RNTN's dV first was 2 MiB of writes a step at d = 50 float32)."""
        if keep:
            for name, view in self.views.items():
                if name not in keep:
                    view[...] = 0
        else:
            self.flat[:] = 0
        for rows in self.rows.values():
            rows.clear()


def init_parameters(shape: ModelShape, rng: np.random.Generator) -> Parameters:
    """Random initial parameters, drawn from ``rng`` in the order the model's specification states."""
    params = Parameters(shape)
    model_spec(shape.model)(shape).initialise(params, rng)
    return params


class MemoryLimitError(ValueError):
    """The training state of a model (parameters, gradient, AdaGrad sums) would exceed the memory limit."""


def format_bytes(n: float) -> str:
    """``n`` bytes as MiB below one GiB, else GiB (binary units)."""
    return f"{n / 2**30:.2f} GiB" if n >= 2**30 else f"{n / 2**20:.1f} MiB"


def largest_minibatch(tree_nodes: np.ndarray, batch_size: int) -> tuple[int, int]:
    """(nodes, internal nodes) of the largest possible minibatch of binary trees with these node counts."""
    k = min(batch_size, tree_nodes.shape[0])
    if k == 0:
        return 0, 0
    nodes = int(np.partition(tree_nodes, tree_nodes.shape[0] - k)[-k:].sum())
    return nodes, (nodes - k) // 2  # a binary tree of n nodes has (n - 1) / 2 internal ones


def check_memory(shape: ModelShape, limit_bytes: float, anchored_words: bool = False,
                 minibatch: tuple[int, int] = (0, 0)) -> int:
    """The estimated training memory of ``shape`` in bytes; MemoryLimitError if above ``limit_bytes``.

    The estimate is :meth:`ModelShape.training_bytes`: parameters + AdaGrad sums + the gradient's
    dense part (+ the starting word vectors when ``anchored_words``), plus the composition's
    activation buffers for a minibatch of ``minibatch`` = (nodes, internal nodes), as the model's
    specification counts them (activation_numbers; the chunks of a minibatch hold its nodes once
    between them). The minibatch's word rows and the classifier's buffers, small, are not counted.
    ``limit_bytes <= 0`` means no limit.
    """
    activations = model_spec(shape.model)(shape).activation_numbers(*minibatch) if minibatch[0] else 0
    need = shape.training_bytes(anchored_words) + activations * np.dtype(DTYPES[shape.dtype]).itemsize
    if limit_bytes <= 0 or need <= limit_bytes:
        return need
    shapes = shape.shapes()
    largest = max(shapes, key=lambda name: int(np.prod(shapes[name])))
    share = int(np.prod(shapes[largest])) / shape.count()
    raise MemoryLimitError(
        f"{shape.model} with d={shape.dim} and a vocabulary of {shape.vocab_size:,} words needs about "
        f"{format_bytes(need)} for parameters, AdaGrad sums, gradient and activations ({shape.count():,} {shape.dtype} "
        f"parameters, {share:.0%} of them in {largest} {shapes[largest]}), above the limit of "
        f"{format_bytes(limit_bytes)}: raise --min-count for a smaller vocabulary, lower --dim, "
        f"or raise the limit with --max-memory-gb")
