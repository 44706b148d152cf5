"""AdaGrad optimiser state over the flat parameter buffer (AdaGrad, 2011, diagonal form).

    G     += g * g                       (per element, summed over the whole run)
    theta -= lr * g / (sqrt(G) + eps)

The arithmetic is in the parameters' dtype (lr and eps included); the L2 penalty's sum of
squares is float64. Dense groups (W, b, V, WM, Ws, bs) are updated in one numba pass each
(kernels/adagrad_step.py). The word arrays (L, and LM of the MV-RNN) are updated only
in the rows the minibatch touched (the gradient holds those rows only, see
model/objective.py), so a step costs what its trees touch and an untouched row keeps
its value and its G bit for bit. G itself stays one dense array per parameter: it is
part of a run's state and goes into every checkpoint. ``frozen`` names parameter
arrays that are not updated (for example word vectors kept fixed); their G stays zero.

Threads: a dense group of at least PARALLEL_MIN elements is cut into DENSE_PARTS fixed
element ranges, updated on ``threads`` worker threads. Every element's update depends on
that element only, and the squared sums of the parts (for the penalty) are added in part
order, so the result is bitwise the same for any number of threads.
"""

from __future__ import annotations

import numpy as np

from rntn_engine.jit_setup import use_threads
from rntn_engine.kernels.adagrad_step import adagrad_l2_rows_step, adagrad_l2_step, adagrad_l2_step_parts
from rntn_engine.model.objective import L2Strengths
from rntn_engine.model.parameters import L2_GROUP, Gradient, Parameters
from rntn_engine.model.part_threads import PartThreads

# Dense groups this large (the tensor V from d = 41 on) are updated in DENSE_PARTS pieces on the
# worker threads: at d = 50 the serial update of V was about 5% of a 1-thread step (1.3 ms of a
# 25 ms step, float64, per-kernel timers, 2026-12-02). Smaller groups stay on the calling thread:
# at d = 25 (V of 62,500 numbers) handing the pieces to the threads cost more than it saved (a
# 2-thread step of 2.06-2.17 ms with them, against 1.79-1.81 ms with neither these nor the
# tensor layout's parts; DEVELOPERS.md "Findings from the second performance round").
PARALLEL_MIN = 1 << 18
DENSE_PARTS = 8  # fixed, not the thread count: the penalty's sum order must not depend on threads


class AdaGrad:
    """Squared-gradient sums for every parameter, and the update rule."""

    def __init__(self, params: Parameters, lr: float, eps: float = 1e-6, frozen: tuple[str, ...] = (),
                 threads: int = 1) -> None:
        if lr <= 0:
            raise ValueError("learning rate must be positive")
        self.lr = float(lr)
        self.eps = float(eps)
        self.frozen = tuple(frozen)
        self.sums = params.zeros_like()  # G, same layout as the parameters
        self._threads = PartThreads(threads)

    def close(self) -> None:
        """Stop the worker threads (the optimiser still works afterwards, on the calling thread)."""
        self._threads.close()

    def step(self, params: Parameters, grads: Gradient) -> None:
        """One update of ``params`` in place from ``grads`` (whose L2 term, if any, is already in)."""
        self._update(params, grads, L2Strengths(0.0, 0.0, 0.0, 0.0, 0.0), {}, flush=False)

    def step_with_l2(self, params: Parameters, grads: Gradient, l2: L2Strengths,
                     anchors: dict[str, np.ndarray] | None = None) -> float:
        """Add the L2 gradient, update, and zero ``grads``, in one pass per parameter group.

        ``grads`` holds the data term's gradient only (``loss_and_gradient(..., include_l2=False)``);
        ``anchors`` are the objective's (what each word array's L2 term pulls toward; absent: zero).
        The parameters come out bitwise as from ``loss_and_gradient`` with L2 followed by
        :meth:`step`, except that magnitudes below sqrt(smallest normal number) -- about 1e-19 in
        float32, 1e-154 in float64 -- are flushed to zero, so no product of two parameters is
        subnormal (subnormal operands slow every later step; see kernels/adagrad_step.py).
        Returns the L2 term of the minibatch's objective at the parameters before the update
        (the part of J the data term leaves out).
        """
        return self._update(params, grads, l2, anchors or {}, flush=True)

    def _update(self, params: Parameters, grads: Gradient, l2: L2Strengths, anchors: dict[str, np.ndarray],
                flush: bool) -> float:
        penalty = 0.0
        # lr, eps and the flush threshold in the parameters' dtype: a float32 model's update is float32
        # arithmetic, which vectorises twice as wide as float64 (V at d = 25: 75 -> 46 us, measured)
        real = params.flat.dtype.type  # every parameter array is a view of the one flat buffer
        lr, eps = real(self.lr), real(self.eps)
        flush_below = real(np.sqrt(np.finfo(real).tiny) if flush else 0.0)
        for name in params.names():
            lam = l2.of(L2_GROUP[name])
            theta = params[name]
            update = name not in self.frozen
            if name in grads.rows:  # word array: only the rows the minibatch touched
                rows = grads.rows[name]
                width = rows.width
                anchor = anchors.get(name, theta[:0]).reshape(-1, width)
                squares = adagrad_l2_rows_step(theta.reshape(-1, width), self.sums[name].reshape(-1, width),
                                               rows.rows, rows.values, anchor, real(lam), lr,
                                               eps, update, flush_below)
            else:
                squares = self._dense_step(theta.reshape(-1), self.sums[name].reshape(-1), grads[name].reshape(-1),
                                           real(lam), lr, eps, update, flush_below)
            penalty += 0.5 * lam * squares
        return penalty

    def _dense_step(self, theta: np.ndarray, G: np.ndarray, g: np.ndarray, lam, lr, eps, update: bool,
                    flush_below) -> float:
        """adagrad_l2_step over one dense group; in DENSE_PARTS pieces when it is large (module docstring)."""
        n = theta.shape[0]
        if n < PARALLEL_MIN:
            return adagrad_l2_step(theta, G, g, lam, lr, eps, update, flush_below)
        cuts = [n * p // DENSE_PARTS for p in range(DENSE_PARTS + 1)]
        if self._threads.kernel_threads:  # the parts on numba's threads (model/part_threads.py)
            squares = np.zeros(DENSE_PARTS)
            use_threads(self._threads.kernel_threads)
            adagrad_l2_step_parts(theta, G, g, lam, lr, eps, update, flush_below, np.array(cuts, dtype=np.int64),
                                  squares)
            total = 0.0
            for value in squares:  # in part order
                total += float(value)
            return total

        def part(p: int) -> float:
            a, z = cuts[p], cuts[p + 1]
            return adagrad_l2_step(theta[a:z], G[a:z], g[a:z], lam, lr, eps, update, flush_below)

        parts = self._threads.run(part, list(range(DENSE_PARTS)))
        squares = 0.0
        for value in parts:  # in part order
            squares += value
        return squares

    def reset(self) -> None:
        """Forget the squared-gradient history (the optional periodic reset)."""
        self.sums.zero_()
