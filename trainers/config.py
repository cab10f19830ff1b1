"""The network's configuration: `MLPConfig` (shape and kind of a network, checked when built) and the
small value checks the training core's configurations share."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["ACTIVATIONS", "DTYPES", "INITS", "TASKS", "MLPConfig", "fail", "is_int", "is_real"]

ACTIVATIONS = ("relu", "tanh", "sigmoid")
TASKS = ("regression", "classification")
INITS = ("auto", "he", "glorot")
DTYPES = ("float64", "float32")


def is_int(value) -> bool:
    """True for a Python or numpy integer (not a bool)."""
    return isinstance(value, (int, np.integer)) and not isinstance(value, (bool, np.bool_))


def is_real(value) -> bool:
    """True for a Python or numpy integer or float (not a bool)."""
    return isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, (bool, np.bool_))


def fail(name: str, rule: str, value, fix: str) -> None:
    raise ValueError(f"{name} must be {rule}, got {name}={value!r}; {fix}")


@dataclass(frozen=True)
class MLPConfig:
    """Shape and kind of a network. Validated when built.

    Attributes:
        n_inputs: number of input features (columns of X).
        n_outputs: regression: number of targets; classification: number of classes (>= 2).
        hidden: units per hidden layer, input side first; ``()`` is a linear model.
        activation: hidden activation, one of ``ACTIVATIONS``.
        task: ``"regression"`` (identity output, mean squared error) or ``"classification"``
            (softmax output, cross-entropy).
        init: ``"he"`` (normal, std sqrt(2 / fan_in)), ``"glorot"`` (uniform, bound
            sqrt(6 / (fan_in + fan_out))) or ``"auto"`` (he for relu, glorot otherwise). Biases start at 0.
        dropout: probability of dropping a hidden unit in training, 0 <= p < 1.
        dtype: ``"float64"`` or ``"float32"``.
    """

    n_inputs: int
    n_outputs: int
    hidden: tuple[int, ...] = (32,)
    activation: str = "relu"
    task: str = "regression"
    init: str = "auto"
    dropout: float = 0.0
    dtype: str = "float64"

    def __post_init__(self) -> None:
        if not is_int(self.n_inputs) or self.n_inputs < 1:
            fail("n_inputs", "an integer >= 1", self.n_inputs, "pass the number of feature columns, X.shape[1]")
        object.__setattr__(self, "n_inputs", int(self.n_inputs))
        if self.task not in TASKS:
            fail("task", f"one of {TASKS}", self.task, "set task in the study file to regression or classification")
        low = 2 if self.task == "classification" else 1
        if not is_int(self.n_outputs) or self.n_outputs < low:
            fail("n_outputs", f"an integer >= {low} for task={self.task!r}", self.n_outputs,
                  "pass the number of targets (regression) or of classes (classification)")
        object.__setattr__(self, "n_outputs", int(self.n_outputs))
        hidden = self.hidden
        if is_int(hidden):
            hidden = (hidden,)
        if isinstance(hidden, (str, bytes)) or not hasattr(hidden, "__iter__"):
            fail("hidden", "a sequence of layer widths", self.hidden,
                  "set space.hidden in the study file, e.g. [64, 64], or [] for a linear model")
        hidden = tuple(hidden)
        if not all(is_int(h) and h >= 1 for h in hidden):
            fail("hidden", "a sequence of integers >= 1", self.hidden,
                  "set space.hidden in the study file, e.g. [64, 64], or [] for a linear model")
        object.__setattr__(self, "hidden", tuple(int(h) for h in hidden))
        if self.activation not in ACTIVATIONS:
            fail("activation", f"one of {ACTIVATIONS}", self.activation,
                  "set space.activation in the study file to relu, tanh or sigmoid")
        if self.init not in INITS:
            fail("init", f"one of {INITS}", self.init, "set init to he, glorot or auto")
        real = isinstance(self.dropout, (int, float, np.floating, np.integer)) and not isinstance(self.dropout, bool)
        if not real or not 0.0 <= float(self.dropout) < 1.0:
            fail("dropout", "a number with 0 <= dropout < 1", self.dropout,
                  "set space.dropout in the study file to a rate such as 0.1 (0 turns dropout off)")
        object.__setattr__(self, "dropout", float(self.dropout))
        if self.dtype not in DTYPES:
            fail("dtype", f"one of {DTYPES}", self.dtype, "use float64 (default) or float32")

    @property
    def init_scheme(self) -> str:
        """The initialisation actually used: ``"he"`` or ``"glorot"``."""
        if self.init != "auto":
            return self.init
        return "he" if self.activation == "relu" else "glorot"

    @property
    def widths(self) -> tuple[int, ...]:
        """Units per layer from input to output: ``(n_inputs, *hidden, n_outputs)``."""
        return (self.n_inputs, *self.hidden, self.n_outputs)
