"""Chronological train / validation / test windows with an embargo, and train-only scaling.

Windows hold integer row positions into ``Dataset`` rows, in time order: train, then
validation, then test. A target on row ``t`` averages the proxy over ``t+1 .. t+h``, so the
last ``embargo`` rows of each earlier window are dropped before the next window begins; with
``embargo >= max(horizons)`` no training target overlaps the validation window and no
validation target overlaps the test window::

    |---- train ----|embargo|---- valid ----|embargo|---- test ----|
    max(train) + embargo < min(valid);  max(valid) + embargo < min(test)

The embargo counts dataset rows. ``build_dataset`` drops rows only at the two ends unless the
proxy or an exogenous column has gaps; a gap makes ``embargo`` rows span more trading days, never fewer, so the
guarantee holds.

Example:
    >>> w = split_by_fraction(len(ds.dates), valid=0.2, test=0.2, embargo=22)
    >>> scaler = fit_scaler(ds.X.iloc[w.train])
    >>> X_train = scaler.transform(ds.X.iloc[w.train])
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

__all__ = [
    "Scaler",
    "Windows",
    "fit_scaler",
    "split_by_dates",
    "split_by_fraction",
    "walk_forward",
]


@dataclass(frozen=True)
class Windows:
    """Row positions of the three windows.

    Attributes:
        train, valid, test: increasing int64 arrays of row positions, in that time order.
        embargo: rows dropped from the end of train and of valid before the next window.
    """

    train: np.ndarray
    valid: np.ndarray
    test: np.ndarray
    embargo: int

    def __post_init__(self) -> None:
        for name in ("train", "valid", "test"):
            arr = np.asarray(getattr(self, name))
            if arr.ndim != 1 or (arr.size and not np.issubdtype(arr.dtype, np.integer)):
                raise ValueError(f"Windows.{name} must be a 1-d integer array of row positions, got {arr.dtype} {arr.shape}")
            arr = arr.astype(np.int64)
            if arr.size and np.any(np.diff(arr) <= 0):
                raise ValueError(f"Windows.{name} positions must be strictly increasing")
            arr.setflags(write=False)
            object.__setattr__(self, name, arr)
        _check_embargo(self.embargo)
        object.__setattr__(self, "embargo", int(self.embargo))
        for a, b in (("train", "valid"), ("valid", "test")):
            first, second = getattr(self, a), getattr(self, b)
            if first.size and second.size and first[-1] + self.embargo >= second[0]:
                raise ValueError(
                    f"Windows.{a} must end more than embargo={self.embargo} rows before {b} starts, "
                    f"got last {a} row {int(first[-1])} and first {b} row {int(second[0])}"
                )

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Windows):
            return NotImplemented
        return self.embargo == other.embargo and all(
            np.array_equal(getattr(self, k), getattr(other, k)) for k in ("train", "valid", "test")
        )

    def summary(self) -> dict:
        """Plain ints for a record: first and last row and size of each window, and the embargo.

        Returns:
            ``{"train": {"first": 0, "last": 577, "n_rows": 578}, "valid": {...}, "test": {...},
            "embargo": 22}``; an empty window has ``first`` and ``last`` None.
        """
        out: dict = {}
        for name in ("train", "valid", "test"):
            arr = getattr(self, name)
            out[name] = {"first": int(arr[0]) if arr.size else None,
                         "last": int(arr[-1]) if arr.size else None, "n_rows": int(arr.size)}
        out["embargo"] = self.embargo
        return out


def _check_embargo(embargo) -> None:
    if isinstance(embargo, bool) or not isinstance(embargo, (int, np.integer)) or embargo < 0:
        raise ValueError(
            f"embargo must be an integer >= 0 (rows), got {embargo=!r}; use at least the longest "
            "forecast horizon, e.g. 22"
        )


def _check_n_rows(n_rows) -> int:
    if isinstance(n_rows, bool) or not isinstance(n_rows, (int, np.integer)) or n_rows < 1:
        raise ValueError(f"n_rows must be a positive integer, got {n_rows=!r}; pass len(dataset.dates)")
    return int(n_rows)


def _check_fraction(name: str, value) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.floating)) or not 0.0 < value < 1.0:
        raise ValueError(f"{name} must be a fraction strictly between 0 and 1, got {name}={value!r}; e.g. 0.2")
    return float(value)


def _block(start: int, stop: int) -> np.ndarray:
    return np.arange(max(start, 0), max(stop, 0), dtype=np.int64)


def _windows(n_rows: int, valid_start: int, test_start: int, embargo: int, hint: str) -> Windows:
    """Windows from two boundaries, naming the first empty window."""
    train = _block(0, valid_start - embargo)
    valid = _block(valid_start, test_start - embargo)
    test = _block(test_start, n_rows)
    for name, arr in (("train", train), ("valid", valid), ("test", test)):
        if arr.size == 0:
            raise ValueError(
                f"the {name} window is empty: {n_rows} rows, validation starts at row {valid_start}, "
                f"test at row {test_start}, embargo={embargo}; {hint}"
            )
    return Windows(train=train, valid=valid, test=test, embargo=embargo)


def split_by_fraction(n_rows: int, *, valid: float = 0.2, test: float = 0.2, embargo: int = 22) -> Windows:
    """Train / validation / test by fractions of the rows, in time order.

    The test window is the last ``round(test * n_rows)`` rows (rounded to the nearest
    integer), the validation window the ``round(valid * n_rows)`` rows before it; the embargo is then cut from the end of train and
    of validation.

    Args:
        n_rows: number of dataset rows.
        valid, test: fractions in (0, 1) with ``valid + test < 1``.
        embargo: rows cut before each boundary, >= 0 (use >= the longest horizon).

    Returns:
        Windows.

    Raises:
        ValueError: bad fractions or embargo, or a window left empty (named in the message).
    """
    n_rows = _check_n_rows(n_rows)
    valid = _check_fraction("valid", valid)
    test = _check_fraction("test", test)
    if valid + test >= 1.0:
        raise ValueError(
            f"valid + test must be < 1 to leave rows for training, got valid={valid} + test={test}; "
            "lower them, e.g. valid=0.2, test=0.2"
        )
    _check_embargo(embargo)
    test_start = n_rows - int(round(test * n_rows))
    valid_start = test_start - int(round(valid * n_rows))
    return _windows(n_rows, valid_start, test_start, int(embargo),
                    "lower the embargo, change the valid/test fractions, or use a longer price file")


def split_by_dates(dates, *, valid_start, test_start, embargo: int = 22) -> Windows:
    """Train / validation / test by the first dates of validation and test.

    Args:
        dates: increasing dates of the dataset rows (``Dataset.dates``).
        valid_start: first validation date (str or Timestamp); the window starts at the first
            row on or after it.
        test_start: first test date, after ``valid_start``.
        embargo: rows cut before each boundary, >= 0.

    Returns:
        Windows.

    Raises:
        ValueError: unsorted dates, bad or out-of-range boundaries, or an empty window.
    """
    index = pd.DatetimeIndex(dates)
    if len(index) == 0:
        raise ValueError("dates is empty; pass Dataset.dates of a non-empty dataset")
    if not index.is_monotonic_increasing or index.has_duplicates:
        raise ValueError("dates must be strictly increasing; sort the price file and drop repeated dates")
    _check_embargo(embargo)
    try:
        v0, t0 = pd.Timestamp(valid_start), pd.Timestamp(test_start)
    except (TypeError, ValueError) as exc:
        raise ValueError(
            f"valid_start and test_start must be dates like '2015-01-02', got {valid_start!r}, {test_start!r}"
        ) from exc
    if index.tz is not None:
        v0 = v0.tz_localize(index.tz) if v0.tz is None else v0
        t0 = t0.tz_localize(index.tz) if t0.tz is None else t0
    if not v0 < t0:
        raise ValueError(f"valid_start must be before test_start, got {v0.date()} and {t0.date()}; swap or fix them")
    for name, d in (("valid_start", v0), ("test_start", t0)):
        if not index[0] < d <= index[-1]:
            raise ValueError(
                f"{name}={d.date()} is outside the dataset's dates ({index[0].date()} to "
                f"{index[-1].date()}, after the first); pick a date inside that range"
            )
    return _windows(len(index), int(index.searchsorted(v0)), int(index.searchsorted(t0)), int(embargo),
                    "lower the embargo or move valid_start/test_start")


def walk_forward(n_rows: int, *, n_folds: int, valid_size: int, embargo: int = 22, expanding: bool = True,
                 test: float = 0.2, train_size: int | None = None) -> list[Windows]:
    """Walk-forward folds over the rows before a shared final test window.

    The test window is the last ``round(test * n_rows)`` rows. Before it, leaving ``embargo``
    rows, sit ``n_folds`` consecutive validation blocks of ``valid_size`` rows. Fold ``k``
    trains on rows ending ``embargo`` rows before its validation block: from row 0
    (``expanding=True``) or the ``train_size`` rows before that (``expanding=False``; by default
    the length of the first fold's training window, so every fold trains on the same amount).

    Args:
        n_rows: number of dataset rows.
        n_folds: number of folds, >= 1.
        valid_size: rows per validation block, >= 1.
        embargo: rows cut before each boundary, >= 0.
        expanding: growing training windows if true, rolling ones of fixed length if false.
        test: fraction of rows in the final test window, in (0, 1).
        train_size: rows per rolling training window (ignored when expanding).

    Returns:
        ``n_folds`` Windows in time order, all with the same ``test``.

    Raises:
        ValueError: bad arguments, or folds that do not fit (the message says how many rows
            are needed).
    """
    n_rows = _check_n_rows(n_rows)
    test = _check_fraction("test", test)
    _check_embargo(embargo)
    embargo = int(embargo)
    for name, value in (("n_folds", n_folds), ("valid_size", valid_size)):
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 1:
            raise ValueError(f"{name} must be a positive integer, got {name}={value!r}")
    test_start = n_rows - int(round(test * n_rows))
    first_valid = test_start - embargo - n_folds * valid_size
    first_train = first_valid - embargo
    if first_train < 1 or test_start >= n_rows:
        need = n_folds * valid_size + 2 * embargo + 1
        raise ValueError(
            f"{n_folds} folds of valid_size={valid_size} with embargo={embargo} do not fit: the "
            f"{test_start} rows before the test window leave the first fold's train window "
            f"{max(first_train, 0)} rows (at least {need} rows are needed before the test window, "
            f"and the test window must not be empty); use fewer folds, a smaller valid_size or "
            "embargo, or a smaller test fraction"
        )
    if not expanding:
        size = first_train if train_size is None else train_size
        if isinstance(size, bool) or not isinstance(size, (int, np.integer)) or not 1 <= size <= first_train:
            raise ValueError(
                f"train_size must be an integer from 1 to {first_train} (the rows before the first "
                f"fold's embargo), got {train_size=!r}; leave it unset to use {first_train}"
            )
    test_rows = _block(test_start, n_rows)
    folds = []
    for k in range(n_folds):
        v0 = first_valid + k * valid_size
        stop = v0 - embargo
        start = 0 if expanding else stop - int(size)
        folds.append(Windows(train=_block(start, stop), valid=_block(v0, v0 + valid_size),
                             test=test_rows, embargo=embargo))
    return folds


@dataclass(frozen=True)
class Scaler:
    """Standardisation ``(X - mean) / scale`` with statistics of the training window.

    Attributes:
        mean: column means, shape (n_features,).
        scale: column standard deviations (divisor n), 1 for constant columns, shape (n_features,).
    """

    mean: np.ndarray
    scale: np.ndarray

    def __post_init__(self) -> None:
        mean = np.array(self.mean, dtype=np.float64)
        scale = np.array(self.scale, dtype=np.float64)
        if mean.ndim != 1 or scale.shape != mean.shape:
            raise ValueError(f"Scaler mean and scale must be 1-d of one length, got shapes {mean.shape} and {scale.shape}")
        if not (np.isfinite(mean).all() and np.isfinite(scale).all() and (scale > 0).all()):
            raise ValueError("Scaler needs finite means and finite scales > 0; build it with fit_scaler(X_train)")
        mean.setflags(write=False)
        scale.setflags(write=False)
        object.__setattr__(self, "mean", mean)
        object.__setattr__(self, "scale", scale)

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Scaler):
            return NotImplemented
        return np.array_equal(self.mean, other.mean) and np.array_equal(self.scale, other.scale)

    def _check(self, X):
        arr = np.asarray(X, dtype=np.float64)
        if arr.ndim != 2 or arr.shape[1] != self.mean.shape[0]:
            raise ValueError(
                f"X must have shape (n_samples, {self.mean.shape[0]}) like the training features, got {arr.shape}"
            )
        return arr

    def _wrap(self, X, values):
        if isinstance(X, pd.DataFrame):
            return pd.DataFrame(values, index=X.index, columns=X.columns)
        return values

    def transform(self, X):
        """``(X - mean) / scale``; a DataFrame comes back as a DataFrame, else an array."""
        return self._wrap(X, (self._check(X) - self.mean) / self.scale)

    def inverse_transform(self, X):
        """``X * scale + mean``, undoing ``transform``."""
        return self._wrap(X, self._check(X) * self.scale + self.mean)


def fit_scaler(X_train) -> Scaler:
    """Column means and standard deviations of the training rows only.

    Constant columns get scale 1 (so they transform to 0). A column counts as constant when
    its variance is within floating-point round-off of zero, with the bound scikit-learn's
    ``StandardScaler`` uses: ``var <= n eps var + (n eps mean)^2``.

    Args:
        X_train: shape (n_samples, n_features), finite.

    Returns:
        Scaler.

    Raises:
        ValueError: not 2-d, empty, or holding NaN/inf.
    """
    arr = np.asarray(X_train, dtype=np.float64)
    if arr.ndim != 2 or arr.shape[0] == 0:
        raise ValueError(f"X_train must be a non-empty 2-d array (n_samples, n_features), got shape {arr.shape}")
    if not np.isfinite(arr).all():
        raise ValueError(
            f"X_train holds {int((~np.isfinite(arr)).sum())} NaN or infinite value(s); "
            "build features with build_dataset, which drops incomplete rows"
        )
    mean = arr.mean(axis=0)
    var = arr.var(axis=0)
    n = arr.shape[0]
    eps = np.finfo(np.float64).eps
    constant = var <= n * eps * var + (n * mean * eps) ** 2
    return Scaler(mean=mean, scale=np.where(constant, 1.0, np.sqrt(var)))
