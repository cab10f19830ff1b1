"""Update rules on flat parameter buffers: SGD with momentum and Adam, with L2 weight decay.

Both optimizers work in place on a parameter array of shape (P,) or (K, P) (K stacked networks) and
a gradient array of the same shape; their state arrays have that shape too, and every step runs a
fixed handful of numpy calls with ``out=`` buffers (no allocation).

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

import numpy as np

__all__ = ["OPTIMIZERS", "SGD", "Adam", "make_optimizer"]

OPTIMIZERS = ("adam", "sgd")


class _Optimizer:
    """Shared parts: state buffers, weight decay, selecting a subset of stacked networks."""

    _state_names: tuple[str, ...] = ()

    def __init__(self, shape: tuple[int, ...], dtype, *, learning_rate: float, weight_decay: float = 0.0,
                 decay_mask: np.ndarray | None = None) -> None:
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

    def _add_decay(self, params: np.ndarray, grads: np.ndarray) -> None:
        if self._decay is not None:
            np.multiply(params, self._decay, out=self._tmp)
            grads += self._tmp

    def select(self, keep: np.ndarray) -> None:
        """Keep only the stacked networks at positions ``keep`` (rows of a (K, P) state)."""
        self._tmp = self._tmp[keep].copy()
        for name in self._state_names:
            setattr(self, name, getattr(self, name)[keep].copy())

    def step(self, params: np.ndarray, grads: np.ndarray) -> None:  # pragma: no cover - abstract
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

    def step(self, params: np.ndarray, grads: np.ndarray) -> None:
        """Update ``params`` in place from ``grads`` (``grads`` is overwritten when weight decay is on)."""
        self.steps += 1
        self._add_decay(params, grads)
        if self.momentum:
            self.velocity *= self.momentum
            self.velocity += grads
            np.multiply(self.velocity, self.learning_rate, out=self._tmp)
        else:
            np.multiply(grads, self.learning_rate, out=self._tmp)
        params -= self._tmp


class Adam(_Optimizer):
    """Adam (Kingma and Ba, 2015, Algorithm 1) with L2 weight decay added to the gradient.

    Args:
        shape: shape of the parameter array, (P,) or (K, P).
        dtype: its dtype.
        learning_rate: step size (alpha in the paper).
        beta1, beta2: decay rates of the moment estimates, in [0, 1).
        eps: added to the bias-corrected root second moment.
        weight_decay: L2 coefficient (see module docstring).
        decay_mask: (P,) with 1 at weights and 0 at biases; default all ones.
    """

    _state_names = ("m", "v")

    def __init__(self, shape, dtype, *, learning_rate: float = 1e-3, beta1: float = 0.9, beta2: float = 0.999,
                 eps: float = 1e-8, weight_decay: float = 0.0, decay_mask=None) -> None:
        super().__init__(shape, dtype, learning_rate=learning_rate, weight_decay=weight_decay,
                         decay_mask=decay_mask)
        self.beta1, self.beta2, self.eps = float(beta1), float(beta2), float(eps)
        self._tmp2 = np.zeros(shape, dtype=dtype)

    def select(self, keep: np.ndarray) -> None:
        super().select(keep)
        self._tmp2 = self._tmp2[keep].copy()

    def step(self, params: np.ndarray, grads: np.ndarray) -> None:
        """Update ``params`` in place from ``grads`` (``grads`` is overwritten)."""
        self.steps += 1
        t = self.steps
        b1, b2 = self.beta1, self.beta2
        self._add_decay(params, grads)
        m, v, tmp, tmp2 = self.m, self.v, self._tmp, self._tmp2
        m *= b1
        np.multiply(grads, 1.0 - b1, out=tmp)
        m += tmp
        v *= b2
        np.multiply(grads, grads, out=tmp)
        tmp *= 1.0 - b2
        v += tmp
        np.sqrt(v, out=tmp)
        tmp *= 1.0 / math.sqrt(1.0 - b2 ** t)
        tmp += self.eps
        np.multiply(m, self.learning_rate / (1.0 - b1 ** t), out=tmp2)
        tmp2 /= tmp
        params -= tmp2


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
