"""The parameter layout of a network and the precompiled passes that train and evaluate it.

Parameter layout. Layer ``l`` maps ``fan_in`` units to ``fan_out`` units with a block of
``(fan_in + 1) * fan_out`` numbers read row-major as a ``(fan_in + 1, fan_out)`` matrix: the first
``fan_in`` rows are the weights, the last row is the bias. Blocks are concatenated from the input
layer to the output layer into one vector of ``n_params(config)`` numbers. A stack of ``K`` networks of
one shape is a ``(K, n_params)`` array, and every per-layer view gets a leading model axis.

Activations of hidden layers carry a trailing column of ones, so ``[a, 1] @ [[W], [b]]`` computes
``a @ W + b`` with one matrix product, and the gradient of the whole block is one product too.

A pass is a list of argument-free callables, numpy functions bound to fixed buffers with
``functools.partial``: built once, rerun every epoch, allocating nothing. ``tests/benchmarks/
profile_core.py`` times each call.
"""

from __future__ import annotations

from functools import partial

import numpy as np

from trainers.config import MLPConfig

__all__ = ["layer_shapes", "n_params", "unpack_params", "Workspace", "Evaluator"]


def layer_shapes(config: MLPConfig) -> list[tuple[int, int]]:
    """Shapes ``(fan_in + 1, fan_out)`` of each layer's block (weights plus a bias row)."""
    w = config.widths
    return [(w[i] + 1, w[i + 1]) for i in range(len(w) - 1)]


def n_params(config: MLPConfig) -> int:
    """Length of the flat parameter vector."""
    return sum(a * b for a, b in layer_shapes(config))


def unpack_params(params: np.ndarray, config: MLPConfig) -> list[np.ndarray]:
    """Views of each layer's block, shape ``(..., fan_in + 1, fan_out)``; writes go to ``params``.

    Args:
        params: shape (P,) or (K, P).
        config: the network's shape.

    Returns:
        One view per layer, input layer first.
    """
    views, start = [], 0
    lead = params.shape[:-1]
    for a, b in layer_shapes(config):
        views.append(params[..., start:start + a * b].reshape(*lead, a, b))
        start += a * b
    return views


class Workspace:
    """Preallocated buffers and precompiled calls for training steps of K stacked networks.

    ``plan(weights, X, Y, masks)`` returns a list of argument-free callables (numpy ufuncs bound to
    fixed buffers with ``functools.partial``) that, run in order, write the gradient of the mean batch
    loss of every network into ``self.grads`` (K, P), with no array allocation. The inputs are views
    that stay valid (for example rows of an epoch's shuffled copy of the data), so a plan is built once
    per batch and rerun every epoch.

    The pass runs transposed: hidden activations are held as (K, units, rows) with a last row of ones,
    so every elementwise call works on contiguous memory and the bias rides along in the products.

    Args:
        config: the networks' shape.
        n_models: K.
        batch_size: B, the largest batch (buffers for other batch sizes are added when first planned).
    """

    def __init__(self, config: MLPConfig, n_models: int, batch_size: int) -> None:
        self.config = config
        self.dtype = np.dtype(config.dtype)
        self.n_models, self.batch_size = n_models, batch_size
        self.grads = np.zeros((n_models, n_params(config)), dtype=self.dtype)
        self.grad_views = unpack_params(self.grads, config)
        self._buffers: dict[int, dict] = {}
        self._get_buffers(batch_size)

    def _get_buffers(self, b: int) -> dict:
        buf = self._buffers.get(b)
        if buf is None:
            K, dt, hs = self.n_models, self.dtype, self.config.hidden
            buf = {"z": [np.empty((K, h, b), dt) for h in hs],
                   "a": [np.ones((K, h + 1, b), dt) for h in hs],  # last row stays 1 (bias input)
                   "da": [np.empty((K, h, b), dt) for h in hs],
                   "deriv": [np.empty((K, h, b), dt) for h in hs],
                   "out": np.empty((K, self.config.n_outputs, b), dt), "row": np.empty((K, 1, b), dt)}
            self._buffers[b] = buf
        return buf

    def plan(self, weights: list[np.ndarray], X: np.ndarray, Y: np.ndarray, masks=None) -> list:
        """Calls computing forward (training mode), loss gradient and backward for one batch.

        Args:
            weights: per-layer views (K, fan_in + 1, fan_out) of the parameters (``unpack_params``).
            X: batch inputs with a trailing column of ones, shape (K, b, n_inputs + 1).
            Y: regression targets or one-hot labels, shape (K, b, n_outputs).
            masks: None, or per hidden layer the dropout mask scaled by 1 / (1 - p), shape (K, h, b)
                (units by rows), preferably contiguous.

        Returns:
            A list of callables; run them in order (``for op in ops: op()``).
        """
        b = X.shape[1]
        buf = self._get_buffers(b)
        act, ops = self.config.activation, []
        wt = [w.transpose(0, 2, 1) for w in weights]
        inp = X.transpose(0, 2, 1)  # (K, n_inputs + 1, b), the last row is the ones column of X
        for i, h in enumerate(self.config.hidden):
            z, a, t = buf["z"][i], buf["a"][i], buf["deriv"][i]
            ops.append(partial(np.matmul, wt[i], inp, z))
            ops.extend(_activation_ops(act, z, a[:, :h], t, None if masks is None else masks[i]))
            inp = a
        out = buf["out"]
        ops.append(partial(np.matmul, wt[-1], inp, out))
        Yt = Y.transpose(0, 2, 1)
        if self.config.task == "classification":
            row = buf["row"]
            ops += [partial(np.maximum.reduce, out, 1, None, row, True), partial(np.subtract, out, row, out),
                    partial(np.exp, out, out), partial(np.add.reduce, out, 1, None, row, True),
                    partial(np.divide, out, row, out), partial(np.subtract, out, Yt, out),
                    partial(np.multiply, out, 1.0 / b, out)]  # (softmax - Y) / b
        else:
            ops += [partial(np.subtract, out, Yt, out),
                    partial(np.multiply, out, 2.0 / (b * self.config.n_outputs), out)]  # 2 (f - y) / (b m)
        d = out  # dL/dz of the current layer, (K, fan_out, b)
        for i in range(len(weights) - 1, -1, -1):
            inp = X.transpose(0, 2, 1) if i == 0 else buf["a"][i - 1]
            ops.append(partial(np.matmul, inp, d.transpose(0, 2, 1), self.grad_views[i]))
            if i > 0:
                da = buf["da"][i - 1]
                ops.append(partial(np.matmul, weights[i][:, :-1, :], d, da))
                ops.append(partial(np.multiply, da, buf["deriv"][i - 1], da))
                d = da
        return ops

    def gradients(self, weights: list[np.ndarray], X: np.ndarray, Y: np.ndarray, masks=None) -> None:
        """Build and run the plan of one batch (convenience form of ``plan``); result in ``self.grads``."""
        for op in self.plan(weights, X, Y, masks):
            op()


class Evaluator:
    """Evaluation-mode forward pass (no dropout) of K stacked networks on fixed inputs, preallocated.

    The pass runs transposed (``H^T = W^T [X, 1]^T``): every product then has the rows as its long
    side, which suits BLAS better than the narrow output layer of the row-major form. Rows are taken
    in chunks of ``chunk_rows`` so that a chunk's activations stay in cache.

    Args:
        config: the networks' shape.
        n_models: K.
        X: the inputs, shape (n, n_inputs); evaluated by every network.
        chunk_rows: rows per chunk.
    """

    def __init__(self, config: MLPConfig, n_models: int, X: np.ndarray, chunk_rows: int = 512) -> None:
        dt = np.dtype(config.dtype)
        n = X.shape[0]
        self.config = config
        self.chunk_rows = c = max(1, min(chunk_rows, n))
        self._xt = np.ones((config.n_inputs + 1, n), dt)  # last row stays 1
        self._xt[:-1] = np.asarray(X).T
        self._ht = [np.ones((n_models, h + 1, c), dt) for h in config.hidden]  # last row stays 1
        self._outt = np.empty((n_models, config.n_outputs, n), dt)

    @property
    def out(self) -> np.ndarray:
        """Raw outputs (K, n, n_outputs) (a transposed view) of the last run of the plan."""
        return self._outt.transpose(0, 2, 1)

    def plan(self, weights: list[np.ndarray]) -> list:
        """Calls that compute the raw outputs of ``weights`` (see ``out``)."""
        ops, n, c = [], self._xt.shape[1], self.chunk_rows
        wt = [w.transpose(0, 2, 1) for w in weights]
        zeros: dict[tuple[int, int], np.ndarray] = {}
        for s in range(0, n, c):
            e = min(s + c, n)
            inp = self._xt[:, s:e]
            for i, h in enumerate(self.config.hidden):
                hv = self._ht[i][:, :h, :e - s]
                ops.append(partial(np.matmul, wt[i], inp, hv))
                if self.config.activation == "relu":
                    # max against an (h, rows) array of zeros: numpy's array-array loop is about 3x faster
                    # than the one against the scalar 0 (tests/benchmarks/profile_core.py shows the calls)
                    zero = zeros.setdefault((h, e - s), np.zeros((h, e - s), hv.dtype))
                    ops.append(partial(np.maximum, hv, zero, out=hv))
                elif self.config.activation == "tanh":
                    ops.append(partial(np.tanh, hv, hv))
                else:
                    ops += [partial(np.negative, hv, hv), partial(np.exp, hv, hv), partial(np.add, hv, 1, hv),
                            partial(np.reciprocal, hv, hv)]
                inp = self._ht[i][:, :, :e - s]
            ops.append(partial(np.matmul, wt[-1], inp, self._outt[:, :, s:e]))
        return ops


def _activation_ops(act: str, z: np.ndarray, av: np.ndarray, t: np.ndarray, mask) -> list:
    """Calls writing act(z) (times the dropout mask) into ``av`` and d act / dz (times the mask) into ``t``."""
    if act == "relu":  # relu(z) = z * [z > 0]; derivative [z > 0]
        ops = [partial(np.greater, z, 0, t)]
        if mask is not None:
            ops.append(partial(np.multiply, t, mask, t))
        return ops + [partial(np.multiply, z, t, av)]
    h = z if mask is not None else av  # the activation before dropout
    if act == "tanh":  # derivative 1 - tanh^2
        ops = [partial(np.tanh, z, h), partial(np.multiply, h, h, t), partial(np.subtract, 1, t, t)]
    else:  # sigmoid = 1 / (1 + exp(-z)); derivative s (1 - s); exp overflow gives 1 / inf = 0
        ops = [partial(np.negative, z, h), partial(np.exp, h, h), partial(np.add, h, 1, h),
               partial(np.reciprocal, h, h), partial(np.subtract, 1, h, t), partial(np.multiply, t, h, t)]
    if mask is not None:
        ops += [partial(np.multiply, h, mask, av), partial(np.multiply, t, mask, t)]
    return ops
