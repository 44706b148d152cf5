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

from rntn_engine.kernels.adagrad_step import adagrad_step
from rntn_engine.model.parameters import Parameters


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

    def reset(self) -> None:
        """Forget the squared-gradient history (the optional periodic reset)."""
        self.sums.zero_()
