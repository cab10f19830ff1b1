"""Training losses with their gradients: mean squared error and softmax cross-entropy.

Two kinds of functions live here:

* reporting functions (``mse``, ``softmax_cross_entropy``, ``cross_entropy``) that return one float,
  computed in float64 whatever the input dtype;
* in-place training kernels (``inplace_mse_grad``, ``inplace_softmax``, ``inplace_softmax_grad``)
  that write into preallocated buffers with an optional leading model axis ``(K, n, m)``.

Conventions:

* Regression loss = mean of squared errors over all rows and all outputs,
  ``L = sum((f - y)**2) / (n * m)``, so ``dL/df = 2 (f - y) / (n * m)``.
* Classification loss = mean over rows of ``-log softmax(z)[label]``; with one-hot targets ``Y``
  the gradient with respect to the logits is ``(softmax(z) - Y) / n``.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "LOSSES",
    "mse",
    "softmax",
    "log_softmax",
    "softmax_cross_entropy",
    "cross_entropy",
    "one_hot",
    "inplace_mse_grad",
    "inplace_softmax",
    "inplace_softmax_grad",
]

LOSSES = ("mse", "cross_entropy")


def mse(outputs: np.ndarray, targets: np.ndarray) -> float:
    """Mean of squared errors over all rows and outputs.

    Args:
        outputs: predictions, shape (n_samples, n_outputs).
        targets: same shape as ``outputs``.

    Returns:
        ``mean((outputs - targets) ** 2)`` as a Python float (computed in float64).
    """
    diff = np.asarray(outputs, dtype=np.float64) - np.asarray(targets, dtype=np.float64)
    flat = diff.ravel()
    return float(np.dot(flat, flat) / flat.size)


def log_softmax(logits: np.ndarray) -> np.ndarray:
    """Row-wise log-softmax, stable (the row maximum is subtracted first), in float64.

    Args:
        logits: shape (n_samples, n_classes).

    Returns:
        Array of the same shape, ``z - max(z) - log(sum(exp(z - max(z))))``.
    """
    z = np.asarray(logits, dtype=np.float64)
    shifted = z - z.max(axis=-1, keepdims=True)
    return shifted - np.log(np.exp(shifted).sum(axis=-1, keepdims=True))


def softmax(logits: np.ndarray) -> np.ndarray:
    """Row-wise softmax probabilities in float64; rows sum to 1."""
    return np.exp(log_softmax(logits))


def softmax_cross_entropy(logits: np.ndarray, labels: np.ndarray) -> float:
    """Mean cross-entropy of integer labels under softmax(logits), from the logits (no clipping needed).

    Args:
        logits: shape (n_samples, n_classes).
        labels: integer class indices, shape (n_samples,).

    Returns:
        ``-mean(log softmax(logits)[i, labels[i]])`` as a Python float.
    """
    logp = log_softmax(logits)
    labels = np.asarray(labels)
    return float(-logp[np.arange(labels.shape[0]), labels].mean())


def cross_entropy(proba: np.ndarray, labels: np.ndarray) -> float:
    """Mean cross-entropy of integer labels under given probabilities.

    Probabilities are clipped at the float64 machine epsilon before the log, so a zero probability
    gives a large finite loss rather than infinity.

    Args:
        proba: class probabilities, shape (n_samples, n_classes), rows summing to 1.
        labels: integer class indices, shape (n_samples,).

    Returns:
        ``-mean(log proba[i, labels[i]])`` as a Python float.
    """
    p = np.asarray(proba, dtype=np.float64)
    labels = np.asarray(labels)
    picked = p[np.arange(labels.shape[0]), labels]
    eps = np.finfo(np.float64).eps
    return float(-np.log(np.clip(picked, eps, 1.0)).mean())


def one_hot(labels: np.ndarray, n_classes: int, dtype=np.float64) -> np.ndarray:
    """One-hot matrix of integer labels, shape (n_samples, n_classes)."""
    labels = np.asarray(labels)
    out = np.zeros((labels.shape[0], n_classes), dtype=dtype)
    out[np.arange(labels.shape[0]), labels] = 1.0
    return out


def inplace_mse_grad(outputs: np.ndarray, targets: np.ndarray, out: np.ndarray) -> np.ndarray:
    """Write ``dL/df = 2 (f - y) / (n * m)`` of the mean squared error into ``out``.

    Works on one model (n, m) or a stack (K, n, m); each model's loss is its own mean, so the
    scale uses the last two axes only.

    Args:
        outputs: predictions f, shape (..., n, m).
        targets: y, same shape.
        out: buffer of the same shape (may be ``outputs`` itself).

    Returns:
        ``out``.
    """
    n, m = outputs.shape[-2], outputs.shape[-1]
    np.subtract(outputs, targets, out=out)
    out *= 2.0 / (n * m)
    return out


def inplace_softmax(logits: np.ndarray, row_buffer: np.ndarray) -> np.ndarray:
    """Replace logits by their row-wise softmax, in place.

    Args:
        logits: shape (..., n, C), overwritten with probabilities.
        row_buffer: shape (..., n, 1), scratch for the row maxima and sums.

    Returns:
        ``logits`` (now probabilities).
    """
    np.max(logits, axis=-1, keepdims=True, out=row_buffer)
    np.subtract(logits, row_buffer, out=logits)
    np.exp(logits, out=logits)
    np.sum(logits, axis=-1, keepdims=True, out=row_buffer)
    np.divide(logits, row_buffer, out=logits)
    return logits


def inplace_softmax_grad(proba: np.ndarray, targets_one_hot: np.ndarray, out: np.ndarray) -> np.ndarray:
    """Write ``dL/dz = (softmax(z) - Y) / n`` of the mean cross-entropy into ``out``.

    Args:
        proba: softmax probabilities, shape (..., n, C).
        targets_one_hot: one-hot labels, same shape.
        out: buffer of the same shape (may be ``proba`` itself).

    Returns:
        ``out``.
    """
    np.subtract(proba, targets_one_hot, out=out)
    out *= 1.0 / proba.shape[-2]
    return out
