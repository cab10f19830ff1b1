"""Features, forecast targets and regime classes from a daily variance proxy.

Timing: the row of date ``t`` is a forecast origin. Its features use prices up to and
including ``t``; its targets use the proxy on ``t+1 .. t+h`` only. Nothing else looks ahead.

Features (columns of ``Dataset.X``, in this order):
    * ``har_<w>`` for each ``w`` in ``FeatureConfig.har_windows``: the mean proxy over the last
      ``w`` days ``t-w+1 .. t`` (Corsi, F. (2009), "A simple approximate long-memory model of
      realized volatility", Journal of Financial Econometrics 7(2), 174-196: daily, weekly and
      monthly components with w = 1, 5, 22);
    * ``lag_<k>`` for each ``k`` in ``extra_lags``: the proxy on day ``t-k``;
    * ``return`` and ``abs_return``: the log return of day ``t`` and its absolute value;
    * each column named in ``exogenous``, as recorded on day ``t``.

Targets (columns of ``Dataset.y``): ``h<h>`` = mean proxy over ``t+1 .. t+h``.

With ``log=True`` every variance feature and target is ``ln(max(value, floor))``: the log of
the mean, never the mean of logs. The floor exists because the proxies are exactly zero on
some days (Parkinson and Rogers-Satchell on a day with high == low, close-to-close on an
unchanged close; see ``trainers.volatility``), and ``ln(0)`` is ``-inf``.

Example:
    >>> ds = build_dataset(frame, estimator="garman_klass", horizons=(1, 5, 22))
    >>> ds.X.columns.tolist()
    ['har_1', 'har_5', 'har_22']
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from trainers.volatility import daily_variance, log_returns

__all__ = [
    "Dataset",
    "FeatureConfig",
    "build_dataset",
    "feature_frame",
    "regime_labels",
    "regime_thresholds",
    "target_frame",
]


def _positive_ints(name: str, values, *, allow_empty: bool = True) -> tuple[int, ...]:
    try:
        items = tuple(values)
    except TypeError:
        raise ValueError(f"{name} must be a tuple of positive integers, got {values!r}; e.g. (1, 5, 22)") from None
    bad = [v for v in items if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or v < 1]
    if bad:
        raise ValueError(f"{name} must hold positive integers, got {items!r} (bad: {bad!r}); e.g. (1, 5, 22)")
    if len(set(items)) != len(items):
        raise ValueError(f"{name} has repeated values, got {items!r}; list each value once")
    if not items and not allow_empty:
        raise ValueError(f"{name} must not be empty, got {items!r}; e.g. (1, 5, 22)")
    return tuple(int(v) for v in items)


@dataclass(frozen=True)
class FeatureConfig:
    """Which features to build and in which scale.

    Attributes:
        har_windows: HAR averaging windows in days (Corsi, 2009, uses 1, 5, 22).
        log: features and regression targets as ``ln(max(mean variance, floor))``.
        floor: the variance floor applied before the log, > 0. The proxies are exactly zero on
            some days (for example Parkinson when high == low), and ``ln(0) = -inf``.
        extra_lags: add the proxy on day ``t-k`` for each ``k`` (level or floored log).
        returns: add the day's log return as ``return``.
        abs_returns: add its absolute value as ``abs_return``.
        exogenous: extra numeric columns of the price frame, taken as of day ``t``.
    """

    har_windows: tuple[int, ...] = (1, 5, 22)
    log: bool = True
    floor: float = 1e-10
    extra_lags: tuple[int, ...] = ()
    returns: bool = False
    abs_returns: bool = False
    exogenous: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        object.__setattr__(self, "har_windows", _positive_ints("har_windows", self.har_windows))
        object.__setattr__(self, "extra_lags", _positive_ints("extra_lags", self.extra_lags))
        for name in ("log", "returns", "abs_returns"):
            if not isinstance(getattr(self, name), (bool, np.bool_)):
                raise ValueError(f"{name} must be true or false, got {getattr(self, name)!r}")
        if not (isinstance(self.floor, (int, float, np.floating)) and np.isfinite(self.floor) and self.floor > 0):
            raise ValueError(
                f"floor must be a finite number > 0, got floor={self.floor!r}; the default 1e-10 "
                "(a daily volatility of 0.001%) sits far below any real daily variance"
            )
        exo = (self.exogenous,) if isinstance(self.exogenous, str) else tuple(self.exogenous)
        if not all(isinstance(c, str) and c for c in exo) or len(set(exo)) != len(exo):
            raise ValueError(f"exogenous must be distinct column names, got {self.exogenous!r}")
        object.__setattr__(self, "exogenous", exo)
        if not (self.har_windows or self.extra_lags or self.returns or self.abs_returns or exo):
            raise ValueError(
                "FeatureConfig selects no features (har_windows and extra_lags empty, returns, "
                "abs_returns false, no exogenous); set har_windows=(1, 5, 22)"
            )


@dataclass(frozen=True)
class Dataset:
    """Model-ready rows: one per forecast origin with complete features and targets.

    Attributes:
        dates: the forecast origins ``t``, shape (n_rows,).
        X: features known at ``t``, shape (n_rows, n_features), index ``dates``.
        y: regression targets ``h1``, ``h5``, ... (mean proxy over ``t+1 .. t+h``, log if
            ``config.log``), shape (n_rows, n_horizons), index ``dates``.
        variance: the daily proxy in levels on the full frame index.
        returns: daily log returns on the full frame index.
        estimator: the proxy's name.
        horizons: the forecast horizons in days, in the order of ``y``'s columns.
        config: the feature settings used.
    """

    dates: pd.DatetimeIndex
    X: pd.DataFrame
    y: pd.DataFrame
    variance: pd.Series
    returns: pd.Series
    estimator: str = ""
    horizons: tuple[int, ...] = ()
    config: FeatureConfig = FeatureConfig()

    @property
    def n_rows(self) -> int:
        return len(self.dates)


def _scale(values: pd.Series | pd.DataFrame, config: FeatureConfig):
    if not config.log:
        return values
    return np.log(values.clip(lower=config.floor))


def feature_frame(variance: pd.Series, returns: pd.Series, frame: pd.DataFrame | None = None,
                  config: FeatureConfig = FeatureConfig()) -> pd.DataFrame:
    """Features on every day of the proxy's index (NaN during warm-up).

    Args:
        variance: daily proxy in levels, in date order.
        returns: daily log returns on the same index.
        frame: the price frame, needed only for ``config.exogenous``.
        config: which features.

    Returns:
        DataFrame on ``variance.index`` with the columns described in the module docstring.
    """
    cols: dict[str, pd.Series] = {}
    for w in config.har_windows:
        cols[f"har_{w}"] = _scale(variance.rolling(w).mean(), config)
    for k in config.extra_lags:
        cols[f"lag_{k}"] = _scale(variance.shift(k), config)
    if config.returns:
        cols["return"] = returns
    if config.abs_returns:
        cols["abs_return"] = returns.abs()
    if config.exogenous:
        if frame is None:
            raise ValueError("exogenous columns need the price frame; pass frame=")
        missing = [c for c in config.exogenous if c not in frame.columns]
        if missing:
            raise ValueError(
                f"exogenous column(s) {missing} are not in the price frame (it has "
                f"{list(frame.columns)}); fix the names in the study's features.exogenous"
            )
        for c in config.exogenous:
            if c in cols:
                raise ValueError(f"exogenous column {c!r} clashes with a built feature name; rename it in the file")
            try:
                cols[c] = frame[c].astype(np.float64)
            except (TypeError, ValueError) as exc:
                raise ValueError(f"exogenous column {c!r} is not numeric (dtype {frame[c].dtype})") from exc
    return pd.DataFrame(cols, index=variance.index)


def target_frame(variance: pd.Series, horizons, config: FeatureConfig = FeatureConfig()) -> pd.DataFrame:
    """Targets ``h<h>``: the mean proxy over ``t+1 .. t+h`` (log of the mean if ``config.log``).

    Returns:
        DataFrame on ``variance.index``; the last ``h`` rows of column ``h<h>`` are NaN.
    """
    horizons = _positive_ints("horizons", horizons, allow_empty=False)
    cols = {f"h{h}": _scale(variance.rolling(h).mean().shift(-h), config) for h in horizons}
    return pd.DataFrame(cols, index=variance.index)


def build_dataset(frame: pd.DataFrame, *, estimator: str = "garman_klass", horizons=(1, 5, 22),
                  config: FeatureConfig = FeatureConfig(), **est_kwargs) -> Dataset:
    """Proxy, features and targets for one price frame; incomplete rows dropped.

    Rows with any NaN feature or target are dropped: the warm-up at the start (the longest HAR
    window or lag, plus the estimator's own warm-up) and the last ``max(horizons)`` rows.

    Args:
        frame: price frame (DatetimeIndex ``date``; open, high, low, close; extra columns).
        estimator: a name from ``trainers.volatility.ESTIMATORS``.
        horizons: forecast horizons in days, e.g. (1, 5, 22).
        config: feature settings.
        **est_kwargs: estimator options (``window`` for yang_zhang).

    Returns:
        Dataset.

    Raises:
        ValueError: bad horizons, unknown estimator or columns, or no complete row left.
    """
    horizons = _positive_ints("horizons", horizons, allow_empty=False)
    if not isinstance(config, FeatureConfig):
        raise TypeError(f"config must be a FeatureConfig, got {type(config).__name__}")
    if isinstance(frame, pd.DataFrame) and not frame.index.is_monotonic_increasing:
        raise ValueError("price frame rows are not in date order; sort it with frame.sort_index()")
    if isinstance(frame, pd.DataFrame) and frame.index.has_duplicates:
        raise ValueError(
            f"price frame has {int(frame.index.duplicated().sum())} repeated date(s); keep one row per day"
        )
    variance = daily_variance(frame, estimator, **est_kwargs)
    returns = log_returns(frame)
    X = feature_frame(variance, returns, frame, config)
    y = target_frame(variance, horizons, config)
    keep = (X.notna().all(axis=1) & y.notna().all(axis=1)).to_numpy()
    if not keep.any():
        warm = max(config.har_windows + tuple(k + 1 for k in config.extra_lags) + (1,))
        raise ValueError(
            f"no complete rows: the frame has {len(frame)} rows, features need about {warm} days "
            f"of history and targets {max(horizons)} days ahead (plus the {estimator} warm-up); "
            "use a longer price file or shorter har_windows/horizons"
        )
    dates = pd.DatetimeIndex(frame.index[keep], name="date")
    return Dataset(
        dates=dates,
        X=X.loc[keep].set_axis(dates, axis=0),
        y=y.loc[keep].set_axis(dates, axis=0),
        variance=variance,
        returns=returns,
        estimator=estimator,
        horizons=horizons,
        config=config,
    )


def _finite_1d(name: str, values) -> np.ndarray:
    arr = np.asarray(values, dtype=np.float64)
    if arr.ndim != 1 or arr.size == 0:
        raise ValueError(f"{name} must be a non-empty 1-d array, got shape {arr.shape}; pass one target column")
    if not np.isfinite(arr).all():
        raise ValueError(
            f"{name} holds {int((~np.isfinite(arr)).sum())} NaN or infinite value(s); "
            "use Dataset.y rows (complete) or drop them first"
        )
    return arr


def regime_thresholds(values, n_classes: int = 3) -> np.ndarray:
    """Quantile cut points that split the training window into equally full classes.

    Pass the training window's values only, so later windows are classified with cut points
    learned from the past.

    Args:
        values: shape (n,), e.g. one target column on the training rows (level or log: the
            classes are the same because the log is increasing).
        n_classes: number of classes, >= 2.

    Returns:
        Increasing cut points, shape (n_classes - 1,): the ``j / n_classes`` quantiles.

    Raises:
        ValueError: bad ``n_classes``, non-finite values, or cut points that coincide.
    """
    if isinstance(n_classes, bool) or not isinstance(n_classes, (int, np.integer)) or n_classes < 2:
        raise ValueError(f"n_classes must be an integer >= 2, got {n_classes=!r}; e.g. 3 (calm, normal, turbulent)")
    arr = _finite_1d("values", values)
    cuts = np.quantile(arr, np.arange(1, n_classes) / n_classes)
    if np.any(np.diff(cuts) <= 0):
        raise ValueError(
            f"{n_classes} classes need distinct cut points, got {cuts.tolist()} (many equal values); "
            "use fewer classes or a longer training window"
        )
    return cuts


def regime_labels(values, thresholds) -> np.ndarray:
    """Class of each value: 0 below the first cut point (calm), ``len(thresholds)`` above the last.

    A value equal to a cut point goes to the upper class.

    Args:
        values: shape (n,), same scale as the thresholds.
        thresholds: increasing cut points from ``regime_thresholds``.

    Returns:
        int64 array of shape (n,) with classes ``0 .. len(thresholds)``.
    """
    arr = _finite_1d("values", values)
    cuts = np.asarray(thresholds, dtype=np.float64)
    if cuts.ndim != 1 or cuts.size == 0 or not np.isfinite(cuts).all() or np.any(np.diff(cuts) <= 0):
        raise ValueError(
            f"thresholds must be a non-empty increasing 1-d array of finite values, got {cuts.tolist()}; "
            "build them with regime_thresholds(train_values, n_classes)"
        )
    return np.searchsorted(cuts, arr, side="right").astype(np.int64)
