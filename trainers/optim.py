"""Update rules on flat parameter buffers: SGD with momentum and Adam, with L2 weight decay.

Both optimizers work in place on a parameter array of shape (P,) or (K, P) (K stacked networks) and
a gradient array of the same shape; their state arrays have that shape too. ``plan(params, grads)``
returns the update as a short list of numpy calls bound to those buffers (Adam: 10, SGD with momentum:
4, plus 2 for weight decay), so the training loop runs a step without allocating; ``step`` is the
one-off form. Adam uses the gradient buffer as its scratch space, so it leaves ``grads`` overwritten.

Weight decay convention (L2 penalty, not decoupled): the objective is
``loss + weight_decay / 2 * ||W||^2`` over the weights W (``decay_mask`` = 1), never the biases
(``decay_mask`` = 0), so ``weight_decay * W`` is added to the gradient before the update.
scikit-learn's ``alpha`` divides by the batch size: ``alpha = weight_decay * batch_size`` gives the same
penalty on full batches.

SGD with momentum (heavy ball, as in PyTorch ``torch.optim.SGD``)::

    v <- momentum * v + g ;  p <- p - learning_rate * v

Adam (Kingma and Ba, 2015, Algorithm 1), step t starting at 1::

    m <- b1 m + (1 - b1) g ;  v <- b2 v + (1 - b2) g^2
    p <- p - learning_rate * (m / (1 - b1^t)) / (sqrt(v / (1 - b2^t)) + eps)
"""

from __future__ import annotations

import math
from functools import partial

import numpy as np

__all__ = ["OPTIMIZERS", "SGD", "Adam", "make_optimizer"]

OPTIMIZERS = ("adam", "sgd")


class _Optimizer:
    """Shared parts: state buffers, weight decay, precompiled update calls, selecting stacked networks."""

    _state_names: tuple[str, ...] = ()

    def __init__(self, shape: tuple[int, ...], dtype, *, learning_rate: float, weight_decay: float = 0.0,
                 decay_mask: np.ndarray | None = None) -> None:
        self.dtype = np.dtype(dtype)
        self.learning_rate = float(learning_rate)
        self.weight_decay = float(weight_decay)
        self.steps = 0
        self._tmp = np.zeros(shape, dtype=dtype)
        if self.weight_decay > 0.0:
            mask = np.ones(shape[-1], dtype=dtype) if decay_mask is None else np.asarray(decay_mask, dtype=dtype)
            self._decay = (self.weight_decay * mask).astype(dtype)
        else:
            self._decay = None
        for name in self._state_names:
            setattr(self, name, np.zeros(shape, dtype=dtype))

    def _decay_ops(self, params: np.ndarray, grads: np.ndarray) -> list:
        if self._decay is None:
            return []
        return [partial(np.multiply, params, self._decay, self._tmp), partial(np.add, grads, self._tmp, grads)]

    def plan(self, params: np.ndarray, grads: np.ndarray) -> list:
        """Argument-free calls that perform one update of ``params`` from ``grads`` (both fixed buffers).

        The first call advances the step counter; run the list in order after each gradient.
        Rebuild the plan after ``select``.
        """
        return [self.advance] + self._decay_ops(params, grads) + self._update_ops(params, grads)

    def step(self, params: np.ndarray, grads: np.ndarray) -> None:
        """Update ``params`` in place from ``grads`` (Adam always overwrites ``grads``; SGD when weight decay is on)."""
        for op in self.plan(params, grads):
            op()

    def advance(self) -> None:
        """Count one step (and refresh step-dependent constants)."""
        self.steps += 1

    def select(self, keep: np.ndarray) -> None:
        """Keep only the stacked networks at positions ``keep`` (rows of a (K, P) state)."""
        self._tmp = self._tmp[keep].copy()
        for name in self._state_names:
            setattr(self, name, getattr(self, name)[keep].copy())

    def _update_ops(self, params: np.ndarray, grads: np.ndarray) -> list:  # pragma: no cover - abstract
        raise NotImplementedError


class SGD(_Optimizer):
    """SGD with (heavy-ball) momentum; ``momentum=0`` is plain gradient descent.

    Args:
        shape: shape of the parameter array, (P,) or (K, P).
        dtype: its dtype.
        learning_rate: step size.
        momentum: 0 <= momentum < 1.
        weight_decay: L2 coefficient (see module docstring).
        decay_mask: (P,) with 1 at weights and 0 at biases; default all ones.
    """

    _state_names = ("velocity",)

    def __init__(self, shape, dtype, *, learning_rate: float, momentum: float = 0.9, weight_decay: float = 0.0,
                 decay_mask=None) -> None:
        super().__init__(shape, dtype, learning_rate=learning_rate, weight_decay=weight_decay,
                         decay_mask=decay_mask)
        self.momentum = float(momentum)

    def _update_ops(self, params, grads) -> list:
        lr, tmp, vel = self.learning_rate, self._tmp, self.velocity
        if not self.momentum:
            return [partial(np.multiply, grads, lr, tmp), partial(np.subtract, params, tmp, params)]
        return [partial(np.multiply, vel, self.momentum, vel), partial(np.add, vel, grads, vel),
                partial(np.multiply, vel, lr, tmp), partial(np.subtract, params, tmp, params)]


class Adam(_Optimizer):
    """Adam (Kingma and Ba, 2015, Algorithm 1) with L2 weight decay added to the gradient.

    To save two multiplications per step the moments are kept as running sums,
    ``m_sum = m / (1 - beta1)`` and ``v_sum = v / (1 - beta2)``, and the bias corrections are folded
    into two scalars: with ``r = sqrt((1 - beta2) / (1 - beta2^t))`` the update is
    ``p -= lr (1 - beta1) / ((1 - beta1^t) r) * m_sum / (sqrt(v_sum) + eps / r)``, which is Algorithm 1.

    Args:
        shape: shape of the parameter array, (P,) or (K, P).
        dtype: its dtype.
        learning_rate: step size (alpha in the paper).
        beta1, beta2: decay rates of the moment estimates, in [0, 1).
        eps: added to the bias-corrected root second moment.
        weight_decay: L2 coefficient (see module docstring).
        decay_mask: (P,) with 1 at weights and 0 at biases; default all ones.
    """

    _state_names = ("m_sum", "v_sum")

    def __init__(self, shape, dtype, *, learning_rate: float = 1e-3, beta1: float = 0.9, beta2: float = 0.999,
                 eps: float = 1e-8, weight_decay: float = 0.0, decay_mask=None) -> None:
        super().__init__(shape, dtype, learning_rate=learning_rate, weight_decay=weight_decay,
                         decay_mask=decay_mask)
        self.beta1, self.beta2, self.eps = float(beta1), float(beta2), float(eps)
        self._step_size = np.zeros((), dtype=dtype)  # 0-d, refreshed by advance()
        self._eps_t = np.zeros((), dtype=dtype)

    def advance(self) -> None:
        self.steps += 1
        t, b1, b2 = self.steps, self.beta1, self.beta2
        r = math.sqrt((1.0 - b2) / (1.0 - b2 ** t))
        self._step_size[()] = self.learning_rate * (1.0 - b1) / ((1.0 - b1 ** t) * r)
        self._eps_t[()] = self.eps / r

    def _update_ops(self, params, grads) -> list:
        # once m holds the gradient, the gradient buffer is the scratch space: one (K, P) array fewer to stream
        m, v, g = self.m_sum, self.v_sum, grads
        return [partial(np.multiply, m, self.beta1, m), partial(np.add, m, g, m),
                partial(np.multiply, v, self.beta2, v), partial(np.square, g, g),
                partial(np.add, v, g, v), partial(np.sqrt, v, g), partial(np.add, g, self._eps_t, g),
                partial(np.divide, m, g, g), partial(np.multiply, g, self._step_size, g),
                partial(np.subtract, params, g, params)]


def make_optimizer(train_config, shape: tuple[int, ...], dtype, decay_mask: np.ndarray | None = None) -> _Optimizer:
    """Build the optimizer a ``TrainConfig`` names, for a parameter array of ``shape``."""
    if train_config.optimizer == "adam":
        return Adam(shape, dtype, learning_rate=train_config.learning_rate, beta1=train_config.beta1,
                    beta2=train_config.beta2, eps=train_config.eps, weight_decay=train_config.weight_decay,
                    decay_mask=decay_mask)
    if train_config.optimizer == "sgd":
        return SGD(shape, dtype, learning_rate=train_config.learning_rate, momentum=train_config.momentum,
                   weight_decay=train_config.weight_decay, decay_mask=decay_mask)
    raise ValueError(f"optimizer must be one of {OPTIMIZERS}, got optimizer={train_config.optimizer!r}; "
                     "set space.optimizer in the study file to adam or sgd")
