"""The network: initialisation, the evaluation-mode forward pass, and ``Network`` (its configuration,
``MLPConfig``, is in ``trainers.config`` and exported here too).

Parameters of one network are one flat vector with the biases folded into the weight blocks; the
layout, and the precompiled training and evaluation passes over it, are in ``trainers.passes``.

Dropout is inverted dropout on hidden units only: a unit is kept with probability ``1 - p`` and scaled
by ``1 / (1 - p)`` in training; evaluation uses no dropout.
"""

from __future__ import annotations

from dataclasses import fields
from typing import Sequence

import numpy as np

from trainers import losses
from trainers.config import ACTIVATIONS, DTYPES, INITS, TASKS, MLPConfig, fail, is_int
from trainers.passes import Evaluator, Workspace, layer_shapes, n_params, unpack_params

__all__ = [
    "ACTIVATIONS",
    "TASKS",
    "INITS",
    "DTYPES",
    "MLPConfig",
    "Network",
    "init_params",
    "layer_shapes",
    "n_params",
    "unpack_params",
    "decay_mask",
    "forward",
    "loss_and_grad",
]

def decay_mask(config: MLPConfig) -> np.ndarray:
    """Vector (P,) with 1 at weights and 0 at biases: L2 weight decay applies to weights only."""
    mask = np.ones(n_params(config), dtype=config.dtype)
    for view in unpack_params(mask, config):
        view[-1] = 0.0
    return mask


def _init_one(config: MLPConfig, rng: np.random.Generator) -> np.ndarray:
    parts = []
    scheme = config.init_scheme
    for a, fan_out in layer_shapes(config):
        fan_in = a - 1
        if scheme == "he":  # He et al. (2015): N(0, 2 / fan_in)
            w = rng.standard_normal((fan_in, fan_out)) * np.sqrt(2.0 / fan_in)
        else:  # Glorot and Bengio (2010): U(-sqrt(6 / (fan_in + fan_out)), +sqrt(...))
            bound = np.sqrt(6.0 / (fan_in + fan_out))
            w = rng.uniform(-bound, bound, (fan_in, fan_out))
        parts.extend([w.ravel(), np.zeros(fan_out)])
    return np.concatenate(parts).astype(config.dtype)


def init_params(config: MLPConfig, *, rng, n_models: int | None = None) -> np.ndarray:
    """Initial parameters of one network or a stack of networks.

    Args:
        config: the network's shape.
        rng: a ``numpy.random.Generator``; with ``n_models`` it may also be a sequence of ``n_models``
            generators, one per network (network k then equals ``init_params(config, rng=rng[k])``).
        n_models: None for one network, else the number K of stacked networks.

    Returns:
        Array (P,) or (K, P) in ``config.dtype``.
    """
    if n_models is None:
        if not isinstance(rng, np.random.Generator):
            raise TypeError(f"rng must be a numpy.random.Generator, got {type(rng).__name__}; "
                            "pass rng=np.random.default_rng(seed)")
        return _init_one(config, rng)
    if not is_int(n_models) or n_models < 1:
        fail("n_models", "an integer >= 1", n_models, "pass the number of stacked networks")
    rngs = [rng] * n_models if isinstance(rng, np.random.Generator) else list(rng)
    if len(rngs) != n_models:
        fail("rng", f"a Generator or a sequence of {n_models} Generators", f"<{len(rngs)} generators>",
              "pass one generator per stacked network")
    return np.stack([_init_one(config, r) for r in rngs])


def _activate(name: str, z: np.ndarray, out: np.ndarray) -> np.ndarray:
    if name == "relu":
        return np.maximum(z, 0, out=out)
    if name == "tanh":
        return np.tanh(z, out=out)
    np.negative(z, out=out)  # sigmoid = 1 / (1 + exp(-z)); exp overflow gives 1/inf = 0, as it should
    np.exp(out, out=out)
    out += 1.0
    return np.reciprocal(out, out=out)


def forward(config: MLPConfig, params: np.ndarray, X: np.ndarray) -> np.ndarray:
    """Evaluation-mode forward pass (no dropout): the raw outputs.

    Args:
        config: the network's shape.
        params: shape (P,) or (K, P).
        X: inputs, shape (n_samples, n_inputs), shared by all stacked networks.

    Returns:
        Regression outputs or classification logits, shape (n_samples, n_outputs) or (K, n_samples, n_outputs).
    """
    params = np.asarray(params, dtype=config.dtype)
    stacked = params.ndim == 2
    X = np.asarray(X)
    ev = Evaluator(config, params.shape[0] if stacked else 1, X)
    with np.errstate(over="ignore", invalid="ignore"):
        for op in ev.plan(unpack_params(params if stacked else params[None], config)):
            op()
    out = np.ascontiguousarray(ev.out)
    return out if stacked else out[0]


class Network:
    """A network: its config and ONE flat parameter vector (biases folded into the weight blocks).

    Args:
        config: the network's shape.
        params: shape (n_params(config),); copied into ``config.dtype``.
    """

    def __init__(self, config: MLPConfig, params: np.ndarray) -> None:
        params = np.array(params, dtype=config.dtype)
        if params.shape != (n_params(config),):
            raise ValueError(f"params must have shape ({n_params(config)},) for this config, got shape "
                             f"{params.shape}; build it with init_params(config, rng=...)")
        self.config = config
        self.params = params

    def __repr__(self) -> str:
        return f"Network({self.config!r}, n_params={self.params.size})"

    def _check_X(self, X) -> np.ndarray:
        X = np.asarray(X)
        if X.ndim != 2 or X.shape[1] != self.config.n_inputs:
            raise ValueError(f"X must have shape (n_samples, {self.config.n_inputs}), got shape {X.shape}; "
                             "pass the same feature columns the network was trained on")
        return X

    def output(self, X) -> np.ndarray:
        """Raw outputs (n, n_outputs): regression values or classification logits."""
        return forward(self.config, self.params, self._check_X(X))

    def predict(self, X) -> np.ndarray:
        """Regression: outputs (n, n_outputs). Classification: class index (n,) = argmax of the probabilities."""
        out = self.output(X)
        return out.argmax(axis=1) if self.config.task == "classification" else out

    def predict_proba(self, X) -> np.ndarray:
        """Classification only: softmax probabilities (n, n_classes), float64."""
        if self.config.task != "classification":
            raise ValueError(f"predict_proba needs task='classification', got task={self.config.task!r}; "
                             "use predict for regression outputs")
        return losses.softmax(self.output(X))

    def to_arrays(self) -> dict[str, np.ndarray]:
        """Plain arrays for ``np.savez(..., allow_pickle=False)``: ``params`` plus each config field."""
        arrays = {"params": self.params.copy()}
        for f in fields(MLPConfig):
            value = getattr(self.config, f.name)
            arrays[f.name] = np.array(value, dtype=np.int64) if f.name == "hidden" else np.array(value)
        return arrays

    @classmethod
    def from_arrays(cls, arrays) -> "Network":
        """Inverse of ``to_arrays`` (accepts the mapping returned by ``np.load``)."""
        kwargs = {}
        for f in fields(MLPConfig):
            value = np.asarray(arrays[f.name])
            kwargs[f.name] = tuple(int(v) for v in value.reshape(-1)) if f.name == "hidden" else value.item()
        return cls(MLPConfig(**kwargs), np.asarray(arrays["params"]))


def loss_and_grad(config: MLPConfig, params: np.ndarray, X: np.ndarray, y: np.ndarray, *,
                  weight_decay: float = 0.0, masks: Sequence[np.ndarray] | None = None) -> tuple[float, np.ndarray]:
    """Training objective of one network on one batch and its gradient (for checks and tools).

    Objective = mean data loss (training mode, with the given dropout masks) + weight_decay / 2 * ||W||^2,
    where W are the weights, not the biases.

    Args:
        config: the network's shape.
        params: shape (P,).
        X: shape (n, n_inputs).
        y: regression targets (n, n_outputs), or integer labels (n,) for classification.
        weight_decay: L2 coefficient.
        masks: None, or per hidden layer a mask (n, h) already scaled by 1 / (1 - p).

    Returns:
        (objective as a float, gradient (P,) as a new array).
    """
    dt = np.dtype(config.dtype)
    X = np.asarray(X, dtype=dt)
    n = X.shape[0]
    Xa = np.concatenate([X, np.ones((n, 1), dt)], axis=1)[None]
    Y = (losses.one_hot(y, config.n_outputs, dt) if config.task == "classification"
         else np.asarray(y, dtype=dt).reshape(n, config.n_outputs))[None]
    p = np.array(params, dtype=dt)[None]
    ws = Workspace(config, 1, n)
    ws.gradients(unpack_params(p, config), Xa, Y,
                 None if masks is None else [np.ascontiguousarray(np.asarray(m, dt).T)[None] for m in masks])
    # the objective value, from an independent plain forward pass with the same masks
    h = X
    views = unpack_params(p[0], config)
    for i, w in enumerate(views):
        h = h @ w[:-1] + w[-1]
        if i < len(views) - 1:
            h = _activate(config.activation, h, np.empty_like(h))
            if masks is not None:
                h = h * masks[i]
    data = losses.softmax_cross_entropy(h, y) if config.task == "classification" else losses.mse(h, Y[0])
    dmask = decay_mask(config)
    grad = ws.grads[0] + weight_decay * dmask * p[0]
    return data + 0.5 * weight_decay * float(np.sum(dmask * p[0] ** 2)), grad
