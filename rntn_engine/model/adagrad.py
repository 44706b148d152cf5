"""AdaGrad optimiser state over the flat parameter buffer (Duchi, Hazan & Singer 2011).

    G     += g * g                       (per element, summed since the last reset)
    theta -= lr * g / (sqrt(G) + eps)

The update runs in one numba pass (kernels/adagrad_step.py) over every element,
since the gradient is dense: the L2 term reaches every row of L each step
(model/objective.py). ``frozen`` names parameter arrays that are not updated
(for example word vectors kept fixed); their G stays zero.
"""

from __future__ import annotations

import numpy as np

from rntn_engine.kernels.adagrad_step import adagrad_l2_step, adagrad_step
from rntn_engine.model.objective import L2Strengths
from rntn_engine.model.parameters import L2_GROUP, Parameters


class AdaGrad:
    """Squared-gradient sums for every parameter, and the update rule."""

    def __init__(self, params: Parameters, lr: float, eps: float = 1e-6, frozen: tuple[str, ...] = ()) -> None:
        if lr <= 0:
            raise ValueError("learning rate must be positive")
        self.lr = float(lr)
        self.eps = float(eps)
        self.frozen = tuple(frozen)
        self.sums = params.zeros_like()  # G, same layout as the parameters

    def step(self, params: Parameters, grads: Parameters) -> None:
        """One update of ``params`` in place from ``grads``."""
        if not self.frozen:
            adagrad_step(params.flat, self.sums.flat, grads.flat, self.lr, self.eps)
            return
        for name in params.names():
            if name not in self.frozen:
                adagrad_step(params[name].reshape(-1), self.sums[name].reshape(-1), grads[name].reshape(-1),
                             self.lr, self.eps)

    def step_with_l2(self, params: Parameters, grads: Parameters, l2: L2Strengths) -> float:
        """Add the L2 gradient, update, and zero ``grads``, in one pass per parameter group.

        ``grads`` holds the data term's gradient only (``loss_and_gradient(..., include_l2=False)``).
        The parameters come out bitwise as from ``loss_and_gradient`` with L2 followed by
        :meth:`step`, except that magnitudes below sqrt(smallest normal number) -- about 1e-19 in
        float32, 1e-154 in float64 -- are flushed to zero, so no product of two parameters is
        subnormal (subnormal operands slow every later step; see kernels/adagrad_step.py). Returns the penalty sum_g lambda_g / 2 ||theta_g||^2 at the parameters
        before the update (the part of J the data term leaves out).
        """
        penalty = 0.0
        for name in params.names():
            lam = l2.of(L2_GROUP[name])
            theta = params[name].reshape(-1)
            squares = adagrad_l2_step(theta, self.sums[name].reshape(-1), grads[name].reshape(-1),
                                      theta.dtype.type(lam), self.lr, self.eps, name not in self.frozen,
                                      float(np.sqrt(np.finfo(theta.dtype).tiny)))
            penalty += 0.5 * lam * squares
        return penalty

    def reset(self) -> None:
        """Forget the squared-gradient history (the optional periodic reset)."""
        self.sums.zero_()
