"""The training loop: shuffled mini-batches, dropout, early stopping, one record per epoch.

``train_mlp`` returns a ``TrainingRun``: iterate it to train epoch by epoch (each step yields an
``EpochRecord``), leave the loop whenever you like, then call ``run.result()``. ``fit_mlp`` runs it to
the end. ``fit_mlp_stacked`` trains K networks of one shape in one pass (parameters (K, P), batched
matrix products), each with its own generator, and gives the same results as K calls of ``fit_mlp``.

Per network, ``init_rng, shuffle_rng = rng.spawn(2)``: the initial weights come from ``init_rng``; each
epoch draws, from ``shuffle_rng``, first the permutation of the training rows, then n_train * h uniform
numbers per hidden layer for the dropout masks of the whole epoch (only when dropout > 0; the batch of
shuffled rows s..e takes numbers s*h..e*h as its (h, e - s) mask).

Each epoch: batches of ``batch_size`` rows in the shuffled order (the last, partial batch is kept;
``batch_size >= n_train`` is full-batch gradient descent), then the training and validation losses in
evaluation mode (no dropout), on the same loss, without the weight-decay penalty.

Stopping: the monitored value is ``valid_score(outputs)`` if a scorer is given, else the validation
loss; lower is better. An epoch improves when ``value < best - min_delta``. The run stops with
``"patience"`` after ``patience`` epochs in a row without improvement, ``"max_epochs"`` at the last
epoch, ``"diverged"`` when a loss, the score or a weight is not finite (weights restored from the best
epoch, or the initial weights if no epoch finished), ``"stopped"`` when the caller left the loop. The
result always holds the best epoch's weights; ``FitResult.note`` says which and why.

Reproducibility: the same data, configs and seed give bit-identical weights and history, in one
process or another, on the same numpy/BLAS build with the same number of BLAS threads (the bits of a
matrix product depend on the thread count; the sweep runs one BLAS thread per worker, which is also
the fastest setting for these small products: use ``threadpoolctl.threadpool_limits(1)`` elsewhere).

Memory: besides the data, an epoch keeps one shuffled copy of the training rows per network and, with
dropout, the masks of the whole epoch: K * n_train * (n_inputs + 1 + n_outputs + sum(hidden)) numbers.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np

from trainers import losses
from trainers.config import is_int, is_real
from trainers.mlp import MLPConfig, Network, decay_mask, init_params, unpack_params
from trainers.passes import Evaluator, Workspace
from trainers.optim import OPTIMIZERS, make_optimizer

__all__ = ["TrainConfig", "EpochRecord", "FitResult", "STOP_REASONS", "TrainingRun", "train_mlp", "fit_mlp",
           "fit_mlp_stacked"]

STOP_REASONS = ("patience", "max_epochs", "diverged", "stopped")


@dataclass(frozen=True)
class TrainConfig:
    """How to train. Validated when built.

    Attributes:
        batch_size: rows per mini-batch (>= 1; >= n_train means full batch).
        max_epochs: largest number of passes over the training rows (>= 1).
        patience: epochs in a row without an improvement larger than ``min_delta`` before stopping (>= 1).
        min_delta: smallest decrease of the monitored value that counts as an improvement (>= 0).
        optimizer: ``"adam"`` or ``"sgd"`` (with momentum).
        learning_rate: step size (> 0).
        momentum: sgd only, in [0, 1).
        weight_decay: L2 coefficient (>= 0): the objective is loss + weight_decay / 2 * ||W||^2 over the
            weights, not the biases.
        beta1, beta2: Adam moment decay rates in [0, 1).
        eps: Adam's denominator term (> 0).
    """

    batch_size: int = 64
    max_epochs: int = 200
    patience: int = 20
    min_delta: float = 0.0
    optimizer: str = "adam"
    learning_rate: float = 1e-3
    momentum: float = 0.9
    weight_decay: float = 0.0
    beta1: float = 0.9
    beta2: float = 0.999
    eps: float = 1e-8

    def __post_init__(self) -> None:
        for name in ("batch_size", "max_epochs", "patience"):
            value = getattr(self, name)
            if not is_int(value) or value < 1:
                raise ValueError(f"{name} must be an integer >= 1, got {name}={value!r}; "
                                 f"set space.{name} in the study file")
            object.__setattr__(self, name, int(value))
        if self.optimizer not in OPTIMIZERS:
            raise ValueError(f"optimizer must be one of {OPTIMIZERS}, got optimizer={self.optimizer!r}; "
                             "set space.optimizer in the study file to adam or sgd")
        rules = {"learning_rate": (lambda v: v > 0, "> 0"), "min_delta": (lambda v: v >= 0, ">= 0"),
                 "weight_decay": (lambda v: v >= 0, ">= 0"), "momentum": (lambda v: 0 <= v < 1, "in [0, 1)"),
                 "beta1": (lambda v: 0 <= v < 1, "in [0, 1)"), "beta2": (lambda v: 0 <= v < 1, "in [0, 1)"),
                 "eps": (lambda v: v > 0, "> 0")}
        for name, (ok, text) in rules.items():
            value = getattr(self, name)
            if not is_real(value) or not math.isfinite(value) or not ok(value):
                raise ValueError(f"{name} must be a finite number {text}, got {name}={value!r}; "
                                 f"set space.{name} in the study file")
            object.__setattr__(self, name, float(value))


@dataclass(frozen=True)
class EpochRecord:
    """One epoch of one network.

    Attributes:
        index: 1-based epoch number.
        train_loss: evaluation mode (no dropout), training loss function, whole training window.
        valid_loss: same loss on the validation window.
        valid_score: ``valid_score(outputs)`` when a scorer was given, else None.
        seconds: wall time of the epoch (training and evaluation); in a stack, its share (time / networks).
    """

    index: int
    train_loss: float
    valid_loss: float
    valid_score: float | None
    seconds: float


@dataclass(frozen=True)
class FitResult:
    """The outcome of a training run; ``network`` holds the best epoch's weights.

    Attributes:
        network: best weights restored (initial weights if no epoch finished).
        history: one record per epoch run.
        best_epoch: 1-based; 0 if no epoch finished with finite values.
        stop_reason: one of ``STOP_REASONS``.
        train_loss, valid_loss, valid_score: at the best epoch (NaN / None if none).
        note: a sentence on how the run ended (which weights were restored and why).
    """

    network: Network
    history: tuple[EpochRecord, ...]
    best_epoch: int
    stop_reason: str
    train_loss: float
    valid_loss: float
    valid_score: float | None
    note: str = ""

    @property
    def gap(self) -> float:
        """Overfit gap: validation loss minus training loss at the best epoch."""
        return self.valid_loss - self.train_loss

    @property
    def gap_ratio(self) -> float:
        """Validation loss divided by training loss at the best epoch (inf if the training loss is 0)."""
        return self.valid_loss / self.train_loss if self.train_loss != 0 else math.inf

    @property
    def epochs_run(self) -> int:
        """Number of epochs in the history."""
        return len(self.history)


def _prepare_xy(config: MLPConfig, X, y, window: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Check one window; return (X in dtype, targets (n, n_outputs) in dtype, y as given for the loss)."""
    X = np.asarray(X)
    if X.ndim != 2 or X.shape[1] != config.n_inputs or X.shape[0] < 1:
        raise ValueError(f"X_{window} must have shape (n_rows >= 1, {config.n_inputs}), got shape {X.shape}; "
                         "pass a 2-d array with one column per input, matching MLPConfig.n_inputs")
    if not np.issubdtype(X.dtype, np.number) or not np.all(np.isfinite(X)):
        raise ValueError(f"X_{window} must hold finite numbers, got {np.size(X) - np.isfinite(X).sum()} "
                         "NaN or infinite values; drop or fill those rows before training")
    n = X.shape[0]
    y = np.asarray(y)
    if y.shape[0:1] != (n,):
        raise ValueError(f"y_{window} must have {n} rows like X_{window}, got shape {y.shape}; "
                         "pass targets aligned with the inputs")
    dt = np.dtype(config.dtype)
    if config.task == "classification":
        ok = y.ndim == 1 and np.issubdtype(y.dtype, np.number) and np.all(np.isfinite(y))
        if ok:
            labels = y.astype(np.int64)
            ok = np.all(labels == y) and labels.min() >= 0 and labels.max() < config.n_outputs
        if not ok:
            raise ValueError(f"y_{window} must be integer class labels in 0..{config.n_outputs - 1} of shape "
                             f"({n},), got dtype {y.dtype}, shape {y.shape}; encode classes as 0..n_outputs-1")
        return X.astype(dt), losses.one_hot(labels, config.n_outputs, dt), labels
    if y.ndim == 1 and config.n_outputs == 1:
        y = y.reshape(n, 1)
    if y.ndim != 2 or y.shape[1] != config.n_outputs:
        raise ValueError(f"y_{window} must have shape ({n}, {config.n_outputs}), got shape {y.shape}; "
                         "pass one column per target, matching MLPConfig.n_outputs")
    if not np.issubdtype(y.dtype, np.number) or not np.all(np.isfinite(y)):
        raise ValueError(f"y_{window} must hold finite numbers; drop or fill rows with NaN targets")
    return X.astype(dt), y.astype(dt), y.astype(np.float64)


class _Stack:
    """K networks of one shape trained together; the stopped ones are removed from the stack."""

    def __init__(self, mlp_config, train_config, X_train, y_train, X_valid, y_valid, rngs, valid_score):
        if not isinstance(mlp_config, MLPConfig) or not isinstance(train_config, TrainConfig):
            raise TypeError("pass an MLPConfig and a TrainConfig, got "
                            f"{type(mlp_config).__name__} and {type(train_config).__name__}")
        rngs = list(rngs)
        if not rngs or not all(isinstance(r, np.random.Generator) for r in rngs):
            raise TypeError("rng must be a numpy.random.Generator (rngs a non-empty sequence of them); "
                            "pass np.random.default_rng(seed)")
        self.cfg, self.tcfg, self.valid_score = mlp_config, train_config, valid_score
        self.X_train, T, self.y_train = _prepare_xy(mlp_config, X_train, y_train, "train")
        self.X_valid, _, self.y_valid = _prepare_xy(mlp_config, X_valid, y_valid, "valid")
        dt = self.dtype = np.dtype(mlp_config.dtype)
        n = self.n_train = self.X_train.shape[0]
        self.xy = np.concatenate([self.X_train, np.ones((n, 1), dt), T], axis=1)
        K = self.n_models = len(rngs)
        spawned = [r.spawn(2) for r in rngs]
        self.shuffle_rngs = [s[1] for s in spawned]
        self.initial = np.stack([init_params(mlp_config, rng=s[0]) for s in spawned])
        self.best_params = self.initial.copy()
        self.best_value = [math.inf] * K
        self.best_epoch = [0] * K
        self.best_record: list[EpochRecord | None] = [None] * K
        self.wait = [0] * K
        self.history: list[list[EpochRecord]] = [[] for _ in range(K)]
        self.stop_reason: list[str | None] = [None] * K
        self.notes = [""] * K
        self.epoch = 0
        self.active = list(range(K))
        self.params = self.initial.copy()
        self.optimizer = make_optimizer(train_config, self.params.shape, dt, decay_mask(mlp_config))
        self._build_buffers()

    def _build_buffers(self) -> None:
        cfg, k, n = self.cfg, len(self.active), self.n_train
        self.weights = unpack_params(self.params, cfg)
        b = min(self.tcfg.batch_size, n)
        self.workspace = Workspace(cfg, k, b)
        self.shuffled = np.empty((k, n, self.xy.shape[1]), self.dtype)
        # per hidden layer, the epoch's masks: a batch of rows s..e uses the contiguous block [s*h, e*h) as (h, b)
        self.masks = [np.empty((k, n * h), self.dtype) for h in cfg.hidden] if cfg.dropout > 0 else []
        # evaluation of the training and validation windows in one pass over their stacked rows
        self.evaluator = Evaluator(cfg, k, np.concatenate([self.X_train, self.X_valid]))
        self.eval_ops = self.evaluator.plan(self.weights)
        c = cfg.n_inputs + 1
        # one flat list of calls for the whole epoch: per batch, gradient then update (see Workspace.plan)
        update = self.optimizer.plan(self.params, self.workspace.grads)
        self.ops = []
        for s in range(0, n, b):
            e = min(s + b, n)
            masks = [m[:, s * h:e * h].reshape(k, h, e - s) for m, h in zip(self.masks, cfg.hidden)] or None
            self.ops += self.workspace.plan(self.weights, self.shuffled[:, s:s + b, :c],
                                            self.shuffled[:, s:s + b, c:], masks)
            self.ops += update

    @property
    def finished(self) -> bool:
        return not self.active

    def run_epoch(self) -> list[tuple[int, EpochRecord]]:
        """Train every active network for one epoch; return (network position, record) pairs."""
        t0 = time.perf_counter()
        self.epoch += 1
        p = self.cfg.dropout
        for j, k in enumerate(self.active):
            rng = self.shuffle_rngs[k]
            np.take(self.xy, rng.permutation(self.n_train), axis=0, out=self.shuffled[j], mode="clip")
            for m in self.masks:
                rng.random(out=m[j], dtype=self.dtype)
        with np.errstate(over="ignore", invalid="ignore", divide="ignore", under="ignore"):
            for m in self.masks:
                np.greater_equal(m, p, out=m)
                m *= 1.0 / (1.0 - p)
            for op in self.ops:
                op()
            for op in self.eval_ops:
                op()
            out, n = self.evaluator.out, self.n_train
            values = [self._evaluate(out[j, :n], out[j, n:]) for j in range(len(self.active))]
        seconds = (time.perf_counter() - t0) / len(self.active)
        records, keep = [], []
        for j, k in enumerate(self.active):
            rec = EpochRecord(self.epoch, *values[j], seconds=seconds)
            self.history[k].append(rec)
            records.append((k, rec))
            if self._update(j, k, rec) is None:
                keep.append(j)
        if len(keep) < len(self.active):
            self.active = [self.active[j] for j in keep]
            if self.active:
                idx = np.array(keep)
                self.params = self.params[idx].copy()
                self.optimizer.select(idx)
                self._build_buffers()
        return records

    def _evaluate(self, out_train: np.ndarray, out_valid: np.ndarray) -> tuple[float, float, float | None]:
        if self.cfg.task == "classification":
            tl = losses.softmax_cross_entropy(out_train, self.y_train)
            vl = losses.softmax_cross_entropy(out_valid, self.y_valid)
            shown = losses.softmax(out_valid)
        else:
            tl, vl, shown = losses.mse(out_train, self.y_train), losses.mse(out_valid, self.y_valid), out_valid
        score = None if self.valid_score is None else float(self.valid_score(np.ascontiguousarray(shown)))
        return tl, vl, score

    def _update(self, j: int, k: int, rec: EpochRecord) -> str | None:
        """Early-stopping bookkeeping for network k (row j of the stack); returns its stop reason or None."""
        value = rec.valid_loss if rec.valid_score is None else rec.valid_score
        finite = (math.isfinite(rec.train_loss) and math.isfinite(rec.valid_loss) and math.isfinite(value)
                  and bool(np.isfinite(self.params[j]).all()))
        if not finite:
            source = f"epoch {self.best_epoch[k]}" if self.best_epoch[k] else "the initial weights"
            self.notes[k] = (f"diverged: non-finite loss, score or weights at epoch {rec.index} "
                             f"(learning_rate={self.tcfg.learning_rate} may be too large); weights restored "
                             f"from {source}")
            self.stop_reason[k] = "diverged"
            return "diverged"
        if value < self.best_value[k] - self.tcfg.min_delta:
            self.best_value[k], self.best_epoch[k], self.best_record[k] = value, rec.index, rec
            self.best_params[k] = self.params[j]
            self.wait[k] = 0
        else:
            self.wait[k] += 1
        if self.wait[k] >= self.tcfg.patience:
            self.stop_reason[k] = "patience"
            self.notes[k] = (f"no improvement larger than min_delta={self.tcfg.min_delta} for "
                             f"{self.tcfg.patience} epochs; weights restored from epoch {self.best_epoch[k]}")
        elif rec.index >= self.tcfg.max_epochs:
            self.stop_reason[k] = "max_epochs"
            self.notes[k] = f"reached max_epochs={self.tcfg.max_epochs}; weights from epoch {self.best_epoch[k]}"
        return self.stop_reason[k]

    def result(self, k: int) -> FitResult:
        reason = self.stop_reason[k] or "stopped"
        note = self.notes[k] if self.stop_reason[k] else (
            f"stopped by the caller after epoch {self.epoch}; weights restored from "
            + (f"epoch {self.best_epoch[k]}" if self.best_epoch[k] else "the initial weights"))
        best = self.best_record[k]
        return FitResult(
            network=Network(self.cfg, self.best_params[k]), history=tuple(self.history[k]),
            best_epoch=self.best_epoch[k], stop_reason=reason,
            train_loss=best.train_loss if best else math.nan, valid_loss=best.valid_loss if best else math.nan,
            valid_score=best.valid_score if best else None, note=note)


class TrainingRun:
    """An iterator over the epochs of one training run; see ``train_mlp``."""

    def __init__(self, stack: _Stack) -> None:
        self._stack = stack

    def __iter__(self) -> "TrainingRun":
        return self

    def __next__(self) -> EpochRecord:
        if self._stack.finished:
            raise StopIteration
        return self._stack.run_epoch()[0][1]

    @property
    def epoch(self) -> int:
        """Epochs run so far."""
        return self._stack.epoch

    def result(self) -> FitResult:
        """The outcome so far: best weights, history, stop reason (``"stopped"`` if the loop was left)."""
        return self._stack.result(0)


def train_mlp(mlp_config: MLPConfig, train_config: TrainConfig, X_train, y_train, X_valid, y_valid, *,
              rng: np.random.Generator, valid_score: Callable[[np.ndarray], float] | None = None) -> TrainingRun:
    """Start training one network; iterate the returned run to train epoch by epoch.

    Args:
        mlp_config: the network's shape.
        train_config: how to train.
        X_train: (n_train, n_inputs). y_train: regression (n_train, n_outputs) (or (n_train,) for one
            output); classification integer labels (n_train,).
        X_valid, y_valid: the validation window, same layout.
        rng: the run's generator, split as ``init_rng, shuffle_rng = rng.spawn(2)``.
        valid_score: optional scorer of the validation outputs (regression: (n_valid, n_outputs) floats;
            classification: probabilities (n_valid, n_classes)); lower is better; used for early stopping.

    Returns:
        A ``TrainingRun``: yields one ``EpochRecord`` per epoch; ``run.result()`` gives the ``FitResult``.

    Raises:
        ValueError: inputs of the wrong shape, non-finite values, labels out of range.

    Example:
        >>> run = train_mlp(MLPConfig(3, 1), TrainConfig(max_epochs=5), X, y, Xv, yv,
        ...                 rng=np.random.default_rng(0))  # doctest: +SKIP
        >>> for epoch in run:
        ...     print(epoch.index, epoch.valid_loss)  # doctest: +SKIP
        >>> result = run.result()  # doctest: +SKIP
    """
    return TrainingRun(_Stack(mlp_config, train_config, X_train, y_train, X_valid, y_valid, [rng], valid_score))


def fit_mlp(mlp_config: MLPConfig, train_config: TrainConfig, X_train, y_train, X_valid, y_valid, *,
            rng: np.random.Generator, valid_score: Callable[[np.ndarray], float] | None = None) -> FitResult:
    """Train one network to the end (one-call form of ``train_mlp``); same arguments."""
    run = train_mlp(mlp_config, train_config, X_train, y_train, X_valid, y_valid, rng=rng, valid_score=valid_score)
    for _ in run:
        pass
    return run.result()


def fit_mlp_stacked(mlp_config: MLPConfig, train_config: TrainConfig, X_train, y_train, X_valid, y_valid, *,
                    rngs: Sequence[np.random.Generator],
                    valid_score: Callable[[np.ndarray], float] | None = None) -> list[FitResult]:
    """Train K networks of one shape in one pass; result k equals ``fit_mlp(..., rng=rngs[k])``.

    Each network has its own initialisation, shuffle order and dropout masks from its own generator;
    networks that stop early leave the stack and keep their best weights.

    Returns:
        One ``FitResult`` per generator, in order.
    """
    stack = _Stack(mlp_config, train_config, X_train, y_train, X_valid, y_valid, rngs, valid_score)
    while not stack.finished:
        stack.run_epoch()
    return [stack.result(k) for k in range(stack.n_models)]
