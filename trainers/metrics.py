"""Forecast losses, Diebold-Mariano tests, the model confidence set and SPA.

Regression inputs are level variances (or, for ``mse``/``mae``, any values) as arrays of shape
``(n_samples,)`` or ``(n_samples, n_outputs)``; ``y`` and ``f`` must have the same shape. The scalar
losses (``mse``, ``mae``, ``qlike``, ``mse_log``) are the mean over every entry, which equals the mean
of :func:`loss_series` (per-row loss averaged over the output columns). ``mz_r2`` takes one column.

Classification inputs are integer labels ``0..n_classes-1`` of shape ``(n_samples,)`` and
probabilities of shape ``(n_samples, n_classes)`` whose rows sum to one.

Example:
    >>> import numpy as np
    >>> y = np.array([1.0, 2.0, 4.0]); f = np.array([1.0, 2.0, 2.0])
    >>> round(qlike(y, f), 6)
    0.102284
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

__all__ = [
    "LOSSES", "DMResult", "MCSResult", "SPAResult", "accuracy", "cross_entropy", "deviance",
    "diebold_mariano", "loss_series", "mae", "model_confidence_set", "mse", "mse_log", "mz_r2", "qlike",
    "superior_predictive_ability",
]

LOSSES = ("mse", "mae", "qlike", "mse_log")
ALTERNATIVES = ("two-sided", "less", "greater")
PROBA_SUM_TOL = 1e-6


# ----------------------------------------------------------------------------- checks
def _pair(y, f, *, positive: bool = False, what: str = "") -> tuple[np.ndarray, np.ndarray]:
    """Return ``y`` and ``f`` as float64 arrays of one shape, finite (and > 0 if ``positive``)."""
    y_arr = np.asarray(y, dtype=np.float64)
    f_arr = np.asarray(f, dtype=np.float64)
    if y_arr.shape != f_arr.shape:
        raise ValueError(f"y and f must have the same shape, got y {y_arr.shape} and f {f_arr.shape}; "
                         "pass the target and the forecast for the same rows and horizons")
    if y_arr.ndim not in (1, 2) or y_arr.shape[0] == 0:
        raise ValueError(f"y and f must be non-empty arrays of shape (n_samples,) or (n_samples, n_outputs), "
                         f"got shape {y_arr.shape}; reshape the inputs")
    for name, arr in (("y", y_arr), ("f", f_arr)):
        bad = ~np.isfinite(arr)
        if bad.any():
            raise ValueError(f"{name} has {int(bad.sum())} non-finite values (NaN or inf) of {arr.size}; "
                             "drop those rows before scoring")
        if positive and (arr <= 0).any():
            n_bad = int((arr <= 0).sum())
            raise ValueError(f"{what} needs level variances > 0, but {name} has {n_bad} values <= 0 "
                             f"(smallest {arr.min():.6g}); pass variances in level units (not log), "
                             "floored at a small positive value")
    return y_arr, f_arr


def _row_mean(loss: np.ndarray) -> np.ndarray:
    return loss if loss.ndim == 1 else loss.mean(axis=1)


# ----------------------------------------------------------------------------- regression losses
def loss_series(name: str, y, f) -> np.ndarray:
    """Per-row losses, averaged over the output columns.

    Args:
        name: one of ``LOSSES``: "mse", "mae", "qlike" (Patton 2011: y/f - log(y/f) - 1, level
            variances > 0) or "mse_log" (squared difference of log variances).
        y: targets, shape (n_samples,) or (n_samples, n_outputs).
        f: forecasts, same shape as ``y``.

    Returns:
        Array of shape (n_samples,): the loss of each row (mean over columns for 2-D input).

    Raises:
        ValueError: unknown name, mismatched shapes, non-finite values, or values <= 0 for the
            losses on variances.
    """
    if name not in LOSSES:
        raise ValueError(f"unknown loss {name!r}; choose one of {', '.join(LOSSES)}")
    if name == "mse":
        y_arr, f_arr = _pair(y, f)
        return _row_mean((y_arr - f_arr) ** 2)
    if name == "mae":
        y_arr, f_arr = _pair(y, f)
        return _row_mean(np.abs(y_arr - f_arr))
    y_arr, f_arr = _pair(y, f, positive=True, what=name)
    if name == "qlike":
        ratio = y_arr / f_arr
        return _row_mean(ratio - np.log(ratio) - 1.0)
    return _row_mean((np.log(y_arr) - np.log(f_arr)) ** 2)


def mse(y, f) -> float:
    """Mean squared error over every entry of ``y`` and ``f`` (same shape)."""
    return float(loss_series("mse", y, f).mean())


def mae(y, f) -> float:
    """Mean absolute error over every entry of ``y`` and ``f`` (same shape)."""
    return float(loss_series("mae", y, f).mean())


def qlike(y, f) -> float:
    """Mean QLIKE loss of Patton (2011), ``y/f - log(y/f) - 1``, on level variances > 0.

    Zero when ``f == y``; robust to noise in the variance proxy ``y`` (Patton 2011, J. Econometrics).
    """
    return float(loss_series("qlike", y, f).mean())


def mse_log(y, f) -> float:
    """Mean squared error of log variances, ``mean((log y - log f)^2)``, level variances > 0."""
    return float(loss_series("mse_log", y, f).mean())


def mz_r2(y, f) -> float:
    """R^2 of the Mincer-Zarnowitz regression ``y = a + b f + e`` by OLS.

    Args:
        y: targets, shape (n_samples,) (or (n_samples, 1)).
        f: forecasts, same shape.

    Returns:
        The coefficient of determination of the regression; 0.0 when ``f`` is constant.

    Raises:
        ValueError: more than one column, fewer than 3 rows, a constant ``y`` or non-finite values.
    """
    y_arr, f_arr = _pair(y, f)
    if y_arr.ndim == 2:
        if y_arr.shape[1] != 1:
            raise ValueError(f"mz_r2 takes one forecast column, got shape {y_arr.shape}; "
                             "call it once per horizon, e.g. mz_r2(y[:, j], f[:, j])")
        y_arr, f_arr = y_arr[:, 0], f_arr[:, 0]
    if y_arr.size < 3:
        raise ValueError(f"mz_r2 needs at least 3 rows, got {y_arr.size}; score a longer window")
    tss = float(((y_arr - y_arr.mean()) ** 2).sum())
    if tss == 0.0:
        raise ValueError("mz_r2 is undefined for a constant target y; score a window where y varies")
    design = np.column_stack([np.ones_like(f_arr), f_arr])
    coef, *_ = np.linalg.lstsq(design, y_arr, rcond=None)
    rss = float(((y_arr - design @ coef) ** 2).sum())
    return 1.0 - rss / tss


# ----------------------------------------------------------------------------- classification
def _labels(labels, n_rows: int | None = None) -> np.ndarray:
    arr = np.asarray(labels)
    if arr.ndim != 1 or arr.size == 0:
        raise ValueError(f"labels must be a non-empty 1-D array of class indices, got shape {arr.shape}")
    if not np.issubdtype(arr.dtype, np.integer):
        as_float = arr.astype(np.float64)
        if not np.all(np.isfinite(as_float)) or not np.all(as_float == np.round(as_float)):
            raise ValueError(f"labels must be integer class indices 0..n_classes-1, got dtype {arr.dtype}; "
                             "pass regime_labels(...) output")
        arr = as_float.astype(np.int64)
    if n_rows is not None and arr.shape[0] != n_rows:
        raise ValueError(f"labels has {arr.shape[0]} rows but the predictions have {n_rows}; align the rows")
    return arr


def _proba(labels, proba) -> tuple[np.ndarray, np.ndarray]:
    p = np.asarray(proba, dtype=np.float64)
    if p.ndim != 2:
        raise ValueError(f"proba must have shape (n_samples, n_classes), got {p.shape}; pass predict_proba output")
    lab = _labels(labels, p.shape[0])
    if lab.min() < 0 or lab.max() >= p.shape[1]:
        raise ValueError(f"labels must lie in 0..{p.shape[1] - 1} for {p.shape[1]} probability columns, "
                         f"got range {lab.min()}..{lab.max()}; check n_classes")
    if not np.all(np.isfinite(p)) or (p < 0).any() or (p > 1).any():
        raise ValueError("proba must hold finite probabilities in [0, 1]; pass predict_proba output")
    sums = p.sum(axis=1)
    if np.abs(sums - 1.0).max() > PROBA_SUM_TOL:
        raise ValueError(f"each row of proba must sum to 1 (within {PROBA_SUM_TOL}), worst row sums to "
                         f"{sums[np.argmax(np.abs(sums - 1.0))]:.6g}; apply softmax before scoring")
    return lab, p


def accuracy(labels, proba_or_labels) -> float:
    """Share of rows whose predicted class equals the label.

    Args:
        labels: true classes, shape (n_samples,).
        proba_or_labels: predicted classes (n_samples,) or probabilities (n_samples, n_classes);
            for probabilities the predicted class is the argmax (first on ties).
    """
    pred = np.asarray(proba_or_labels)
    if pred.ndim == 2:
        lab, p = _proba(labels, pred)
        pred_lab = p.argmax(axis=1)
    else:
        pred_lab = _labels(pred)
        lab = _labels(labels, pred_lab.shape[0])
    return float(np.mean(lab == pred_lab))


def cross_entropy(labels, proba) -> float:
    """Mean negative log-likelihood ``-mean(log p[i, labels[i]])`` (equals sklearn's ``log_loss``).

    Probabilities are clipped to ``[eps, 1 - eps]`` with ``eps`` = float64 machine epsilon, so a zero
    probability on the true class gives a large finite loss, as scikit-learn does.
    """
    lab, p = _proba(labels, proba)
    eps = np.finfo(np.float64).eps
    picked = np.clip(p[np.arange(lab.size), lab], eps, 1.0 - eps)
    return float(-np.mean(np.log(picked)))


def deviance(labels, proba) -> float:
    """Deviance ``-2 log L = 2 * n_samples * cross_entropy(labels, proba)``.

    For one categorical outcome per row the saturated model has log-likelihood 0, so the deviance
    is minus twice the total log-likelihood (common practice for multinomial models). It grows with
    the number of rows; compare windows of different length with :func:`cross_entropy`.
    """
    lab = _labels(labels)
    return 2.0 * lab.size * cross_entropy(lab, proba)


# ----------------------------------------------------------------------------- Diebold-Mariano
@dataclass(frozen=True)
class DMResult:
    """Diebold-Mariano test of equal predictive accuracy of forecasts a and b.

    ``mean_diff`` is ``mean(loss_a - loss_b)``: negative means a has the lower loss.
    ``statistic``/``pvalue``: DM (1995) with a normal reference; ``hln_statistic``/``hln_pvalue``:
    the Harvey, Leybourne and Newbold (1997) correction with Student t, ``n - 1`` degrees of freedom.
    """

    statistic: float
    pvalue: float
    hln_statistic: float
    hln_pvalue: float
    mean_diff: float
    n: int
    horizon: int
    long_run_variance: float
    alternative: str = "two-sided"


def _pvalue(stat: float, dist, alternative: str) -> float:
    if alternative == "two-sided":
        return float(2.0 * dist.sf(abs(stat)))
    if alternative == "less":
        return float(dist.cdf(stat))
    return float(dist.sf(stat))


def diebold_mariano(loss_a, loss_b, *, horizon: int = 1, alternative: str = "two-sided") -> DMResult:
    """Diebold-Mariano test with the Harvey-Leybourne-Newbold small-sample correction.

    With ``d = loss_a - loss_b`` of length ``T``, ``gamma_k = sum((d_t - dbar)(d_{t-k} - dbar)) / T``
    and ``LRV = gamma_0 + 2 sum_{k=1}^{h-1} gamma_k`` (rectangular weights, Diebold & Mariano 1995):
    ``DM = dbar / sqrt(LRV / T)`` and ``DM* = DM * sqrt((T + 1 - 2h + h(h-1)/T) / T)``.

    Args:
        loss_a: per-row losses of forecast a, shape (T,) (e.g. from :func:`loss_series`).
        loss_b: per-row losses of forecast b on the same rows, shape (T,).
        horizon: forecast horizon h >= 1 in rows; h-step forecasts have MA(h-1) loss differentials.
        alternative: "two-sided" (equal accuracy), "less" (a has the lower expected loss) or
            "greater" (b has the lower expected loss).

    Returns:
        DMResult with plain Python floats and ints.

    Raises:
        ValueError: mismatched or too short inputs, non-finite values, a bad horizon, or a
            long-run variance <= 0 (identical losses, or negative autocovariances at h > 1).
    """
    from scipy import stats  # imported here: workers that never test forecasts start faster

    a, b = _pair(loss_a, loss_b)
    if a.ndim != 1:
        raise ValueError(f"loss_a and loss_b must be 1-D per-row losses, got shape {a.shape}; use loss_series")
    if isinstance(horizon, bool) or not isinstance(horizon, (int, np.integer)) or horizon < 1:
        raise ValueError(f"horizon must be an integer >= 1, got {horizon=}; pass the forecast horizon in rows")
    if alternative not in ALTERNATIVES:
        raise ValueError(f"alternative must be one of {ALTERNATIVES}, got {alternative!r}")
    h = int(horizon)
    t = a.size
    if t < max(3, 2 * h):
        raise ValueError(f"need at least max(3, 2*horizon) = {max(3, 2 * h)} rows, got {t}; use a longer window")
    d = a - b
    dbar = float(d.mean())
    u = d - dbar
    lrv = float(u @ u) / t
    for k in range(1, h):
        lrv += 2.0 * float(u[k:] @ u[:-k]) / t
    if not lrv > 0.0:
        raise ValueError(f"long-run variance of the loss differential is {lrv:.6g} (must be > 0) for {t} rows, "
                         f"horizon {h}; the two loss series are identical or too short for this horizon")
    dm = dbar / np.sqrt(lrv / t)
    factor = np.sqrt((t + 1 - 2 * h + h * (h - 1) / t) / t)
    hln = dm * factor
    return DMResult(statistic=float(dm), pvalue=_pvalue(float(dm), stats.norm, alternative),
                    hln_statistic=float(hln), hln_pvalue=_pvalue(float(hln), stats.t(df=t - 1), alternative),
                    mean_diff=dbar, n=int(t), horizon=h, long_run_variance=lrv, alternative=alternative)


# ----------------------------------------------------------------------------- MCS and SPA (arch)
@dataclass(frozen=True)
class MCSResult:
    """Model confidence set of Hansen, Lunde and Nason (2011), computed by ``arch.bootstrap.MCS``.

    ``pvalues`` maps each model name to its MCS p-value, in arch's order (eliminated first).
    """

    included: tuple[str, ...]
    excluded: tuple[str, ...]
    pvalues: dict[str, float]
    size: float
    reps: int
    seed: int
    method: str


@dataclass(frozen=True)
class SPAResult:
    """Hansen (2005) test of superior predictive ability, computed by ``arch.bootstrap.SPA``.

    ``pvalues`` has keys "lower", "consistent", "upper"; a small p-value says some model beats the
    benchmark. ``better_models`` are the names arch finds better at ``size`` (consistent p-value).
    """

    pvalues: dict[str, float]
    better_models: tuple[str, ...]
    size: float
    reps: int
    seed: int


def _loss_frame(losses, what: str) -> pd.DataFrame:
    frame = losses.to_frame() if isinstance(losses, pd.Series) else pd.DataFrame(losses)
    frame = frame.copy()
    frame.columns = [str(c) for c in frame.columns]
    if frame.shape[0] < 2 or frame.shape[1] < 1:
        raise ValueError(f"{what} must be a rows x models table of losses, got shape {frame.shape}")
    if frame.columns.duplicated().any():
        raise ValueError(f"{what} has duplicate model names {list(frame.columns)}; name each column once")
    values = frame.to_numpy(dtype=np.float64)
    if not np.all(np.isfinite(values)):
        raise ValueError(f"{what} has {int((~np.isfinite(values)).sum())} non-finite losses; drop those rows first")
    return frame.astype(np.float64)


def _check_common(size: float, reps: int, seed: int) -> None:
    if not 0.0 < size < 1.0:
        raise ValueError(f"size must be in (0, 1), got {size=}; 0.10 is common practice")
    if isinstance(reps, bool) or not isinstance(reps, (int, np.integer)) or reps < 1:
        raise ValueError(f"reps must be an integer >= 1, got {reps=}; 1000 bootstrap replications is typical")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)):
        raise ValueError(f"seed must be an int, got {seed!r}")


def model_confidence_set(losses: pd.DataFrame, *, size: float = 0.10, reps: int = 1000, seed: int = 0,
                         block_size: int | None = None, method: str = "R") -> MCSResult:
    """The set of models not beaten at level ``size``, from a T x models table of losses.

    Args:
        losses: DataFrame (n_rows, n_models), one column per model, lower is better.
        size: test size; the set holds the best model with probability ``1 - size``.
        reps: bootstrap replications. seed: integer seed for arch's bootstrap.
        block_size: stationary-bootstrap mean block length (arch default sqrt(T) when None).
        method: "R" (range statistic) or "max", as arch.

    Returns:
        MCSResult with the names arch includes and excludes and their p-values.
    """
    from arch.bootstrap import MCS

    frame = _loss_frame(losses, "losses")
    _check_common(size, reps, seed)
    if method not in ("R", "max"):
        raise ValueError(f"method must be 'R' or 'max', got {method!r}")
    mcs = MCS(frame, size=size, reps=int(reps), block_size=block_size, method=method, seed=int(seed))
    mcs.compute()
    pv = mcs.pvalues.iloc[:, 0]
    return MCSResult(included=tuple(str(n) for n in mcs.included), excluded=tuple(str(n) for n in mcs.excluded),
                     pvalues={str(k): float(v) for k, v in pv.items()}, size=float(size), reps=int(reps),
                     seed=int(seed), method=method)


def superior_predictive_ability(bench_losses, model_losses: pd.DataFrame, *, reps: int = 1000, seed: int = 0,
                                size: float = 0.05, block_size: int | None = None) -> SPAResult:
    """Does any model beat the benchmark? Hansen's SPA test through ``arch.bootstrap.SPA``.

    Args:
        bench_losses: benchmark losses, shape (n_rows,). model_losses: DataFrame (n_rows, n_models).
        reps, seed, block_size: as :func:`model_confidence_set`.
        size: level at which ``better_models`` is read (consistent p-value, as arch).
    """
    from arch.bootstrap import SPA

    frame = _loss_frame(model_losses, "model_losses")
    bench = np.asarray(bench_losses, dtype=np.float64).reshape(-1)
    if bench.size != frame.shape[0]:
        raise ValueError(
            f"bench_losses has {bench.size} rows but model_losses has {frame.shape[0]}; score the same rows"
        )
    if not np.all(np.isfinite(bench)):
        raise ValueError("bench_losses has non-finite values; drop those rows first")
    _check_common(size, reps, seed)
    spa = SPA(bench, frame.to_numpy(), block_size=block_size, reps=int(reps), seed=int(seed))
    spa.compute()
    better = spa.better_models(pvalue=size, pvalue_type="consistent")
    names = list(frame.columns)
    return SPAResult(pvalues={str(k): float(v) for k, v in spa.pvalues.items()},
                     better_models=tuple(names[int(i)] for i in np.asarray(better).reshape(-1)),
                     size=float(size), reps=int(reps), seed=int(seed))
