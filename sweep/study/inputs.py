"""From a study spec and its price file to the arrays, windows and scorer of a study.

Everything here is derived, never stored: the record keeps the spec text and a copy of the price rows,
and `prepare_folds` rebuilds the same arrays from them on any machine.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import pandas as pd

from sweep.errors import DataError, SpecError
from sweep.study.scores import FORECAST_FLOOR, score_forecasts
from sweep.study.spec import PRICE_COLUMNS, StudySpec
from trainers import metrics
from trainers.data import PriceData, load_prices
from trainers.features import Dataset, FeatureConfig, build_dataset, regime_labels, regime_thresholds
from trainers.price_checks import PriceFileError
from trainers.splits import Scaler, Windows, fit_scaler, split_by_dates, split_by_fraction, walk_forward

__all__ = [
    "MIN_WINDOW_ROWS",
    "SCORED_WINDOWS",
    "WINDOW_NAMES",
    "StudyInputs",
    "WindowRows",
    "WindowSpan",
    "build_study_dataset",
    "feature_config",
    "load_study_prices",
    "min_rows",
    "prepare_folds",
    "prepare_inputs",
    "split_windows",
    "valid_dates",
    "valid_labels",
    "valid_truth",
    "window_rows",
]

WINDOW_NAMES = ("train", "valid", "test")
SCORED_WINDOWS = WINDOW_NAMES[1:]  # the windows forecasts are scored on (baselines, holdouts)
# Fewest rows of any window: every window's losses include the Mincer-Zarnowitz R^2 of each horizon
# (`window_losses`), a regression on a constant and the forecast, which needs 3 rows.
MIN_WINDOW_ROWS = 3


def min_rows(spec: StudySpec) -> int:
    """Fewest price rows the file check accepts: the warm-up of the study's longest look-back, its longest
    horizon, three embargo gaps and 30 rows more.

    Whether the split's windows then get `MIN_WINDOW_ROWS` rows each depends on its fractions or dates;
    that is checked when the windows are cut (`split_windows`), naming the split's keys.
    """
    look_back = max((*spec.features.har_windows, *spec.features.extra_lags, 22), default=22)
    if spec.target.estimator == "yang_zhang":
        look_back += spec.target.yang_zhang_window
    return look_back + max(spec.target.horizons) + 3 * spec.split.embargo + 30


def load_study_prices(spec: StudySpec) -> PriceData:
    """Read and check the study's price file with its column map and bad-row rule.

    Raises:
        DataError: every problem of the file, with the fix.
    """
    needed = min_rows(spec)
    try:
        return load_prices(
            spec.data.file,
            columns=dict(spec.data.columns),
            bad_rows=spec.data.bad_rows,
            min_rows=needed,
        )
    except PriceFileError as exc:
        hints = []
        if any(f"min_rows={needed} " in p.message for p in exc.problems):
            hints.append(_rows_needed(spec, needed))
        if spec.data.bad_rows == "error" and any(p.line is not None for p in exc.problems):
            hints.append('fix the rows, or set data.bad_rows = "drop" in the study file to leave them out')
        raise DataError("\n".join([str(exc), *hints])) from exc


def _rows_needed(spec: StudySpec, needed: int) -> str:
    """Where a study's `min_rows` comes from, naming the keys that set it."""
    look_back = needed - max(spec.target.horizons) - 3 * spec.split.embargo - 30
    return (f"the study needs {needed} rows: {look_back} of look-back (features.har_windows, features.extra_lags"
            f"{', target.yang_zhang_window' if spec.target.estimator == 'yang_zhang' else ''}), "
            f"{max(spec.target.horizons)} for the longest of target.horizons, 3 x split.embargo = "
            f"{3 * spec.split.embargo} and 30 more; give a longer file or lower those settings")


@dataclass(frozen=True)
class StudyInputs:
    """The arrays one study trains and evaluates on.

    Attributes:
        dataset: features and targets before scaling, one row per forecast origin.
        windows: row positions of the train, validation and test windows.
        x_scaler: scaling of the inputs, fitted on the training window only.
        y_scaler: scaling of regression targets, fitted on the training window (None for classes).
        X: dict window -> scaled inputs, shape (n_rows, n_features).
        y: dict window -> training targets: scaled regression targets (n_rows, n_outputs) or
            class labels (n_rows,).
        truth: dict window -> level variance targets (n_rows, n_horizons), used by every score.
        task: "regression" or "classification".
        objective: the name of the validation score.
        log: whether regression targets are log variances.
        thresholds: regime cut points (classification only).
    """

    dataset: Dataset
    windows: Windows
    x_scaler: Scaler
    y_scaler: Scaler | None
    X: dict
    y: dict
    truth: dict
    labels: dict
    task: str
    objective: str
    log: bool
    horizons: tuple[int, ...]
    thresholds: np.ndarray | None

    @property
    def n_inputs(self) -> int:
        return self.X["train"].shape[1]

    @property
    def n_outputs(self) -> int:
        if self.task == "classification":
            return len(self.thresholds) + 1
        return self.y["train"].shape[1]

    def dates(self, window: str) -> pd.DatetimeIndex:
        return self.dataset.dates[getattr(self.windows, window)]

    def to_level(self, output: np.ndarray) -> np.ndarray:
        """Turn the network's raw regression output into level variance forecasts."""
        target = self.y_scaler.inverse_transform(np.asarray(output, dtype=np.float64))
        if self.log:
            return np.exp(target)
        return np.maximum(target, FORECAST_FLOOR)

    def scorer(self, window: str = "valid") -> Callable[[np.ndarray], float]:
        """The study's objective as a function of the network's raw output on `window`."""
        if self.task == "classification":
            labels = self.labels[window]
            return lambda proba: metrics.deviance(labels, proba)
        truth = self.truth[window]
        return lambda output: score_forecasts(self.objective, truth, self.to_level(output))

    def forecasts(self, output: np.ndarray) -> np.ndarray:
        """What the record keeps of a trial's output: level variances or class probabilities."""
        if self.task == "classification":
            return np.asarray(output, dtype=np.float64)
        return self.to_level(output)


def split_windows(spec: StudySpec, dataset: Dataset) -> list[Windows]:
    """The study's windows: one chronological split, or one Windows per walk-forward fold.

    With `split.folds = K`, `split.valid` is the share of rows in all K validation blocks together,
    cut into K equal blocks back to back; every fold keeps the same final test window.
    """
    split = spec.split
    n_rows = len(dataset.dates)
    span = (f"the {n_rows} rows of {spec.data.file.name} with complete features and targets, "
            f"{dataset.dates[0].date()} to {dataset.dates[-1].date()}")
    try:
        if split.folds:
            valid_size = int(split.valid * n_rows) // split.folds
            if valid_size < MIN_WINDOW_ROWS:
                raise SpecError([f"split.folds: {split.folds} folds cut split.valid = {split.valid} of {span} "
                                 f"into blocks of {valid_size} rows, fewer than {MIN_WINDOW_ROWS}; use fewer "
                                 "folds, a larger split.valid or a longer price file"], path=spec.path)
            folds = walk_forward(n_rows, n_folds=split.folds, valid_size=valid_size, embargo=split.embargo,
                                 expanding=split.expanding, test=split.test)
        elif split.valid_start is not None:
            folds = [split_by_dates(dataset.dates, valid_start=split.valid_start, test_start=split.test_start,
                                    embargo=split.embargo)]
        else:
            folds = [split_by_fraction(n_rows, valid=split.valid, test=split.test, embargo=split.embargo)]
    except ValueError as exc:  # the split's settings do not fit the rows; trainers.splits names the window
        raise SpecError([f"split: {exc} (on {span})"], path=spec.path) from exc
    for k, windows in enumerate(folds):
        for name in WINDOW_NAMES:
            size = len(getattr(windows, name))
            if size < MIN_WINDOW_ROWS:
                fold = f" of fold {k + 1}" if len(folds) > 1 else ""
                raise SpecError([f"split: the {name} window{fold} gets {size} of {span}; it needs at least "
                                 f"{MIN_WINDOW_ROWS}: widen it (split.valid, split.test, split.valid_start, "
                                 "split.test_start), lower split.embargo, or give a longer price file"],
                                path=spec.path)
    return folds


def feature_config(spec: StudySpec) -> FeatureConfig:
    f = spec.features
    return FeatureConfig(
        har_windows=tuple(f.har_windows),
        log=spec.target.scale == "log",
        extra_lags=tuple(f.extra_lags),
        returns=f.returns,
        abs_returns=f.abs_returns,
        exogenous=tuple(f.exogenous),
    )


def build_study_dataset(spec: StudySpec, frame: pd.DataFrame) -> Dataset:
    """Daily variance, features and targets of a study, before any split."""
    kwargs = {}
    if spec.target.estimator == "yang_zhang":
        kwargs["window"] = spec.target.yang_zhang_window
    missing = [c for c in spec.features.exogenous if c not in frame.columns]
    if missing:
        extra = [c for c in frame.columns if c not in PRICE_COLUMNS]
        raise DataError(f"features.exogenous names {', '.join(map(repr, missing))}, not a column of "
                        f"{spec.data.file}; its extra columns are {', '.join(map(repr, extra)) or 'none'}; "
                        "fix the names in the study file or add the column to the price file")
    try:
        return build_dataset(
            frame,
            estimator=spec.target.estimator,
            horizons=tuple(spec.target.horizons),
            config=feature_config(spec),
            **kwargs,
        )
    except ValueError as exc:  # trainers.features: a column clash, or no complete row for these settings
        raise DataError(f"cannot build the study's features and targets from {spec.data.file}: {exc}") from exc


def prepare_folds(spec: StudySpec, frame: pd.DataFrame) -> list[StudyInputs]:
    """Every array a study trains on, one StudyInputs per fold (one for a single split).

    Args:
        spec: the study's `StudySpec`.
        frame: the price frame (DatetimeIndex, open/high/low/close and extra columns).

    Returns:
        A list of StudyInputs, oldest fold first; each fold's scaling is fitted on its own
        training window.
    """
    dataset = build_study_dataset(spec, frame)
    return [_inputs_for(spec, dataset, windows) for windows in split_windows(spec, dataset)]


def prepare_inputs(spec: StudySpec, frame: pd.DataFrame) -> StudyInputs:
    """The arrays of the study's final model: the single split, or the latest walk-forward fold."""
    return prepare_folds(spec, frame)[-1]


def _inputs_for(spec: StudySpec, dataset: Dataset, windows: Windows) -> StudyInputs:
    X_all = dataset.X.to_numpy(dtype=np.float64)
    log = spec.target.scale == "log"
    y_target = dataset.y.to_numpy(dtype=np.float64)
    truth_all = np.exp(y_target) if log else y_target
    x_scaler = fit_scaler(X_all[windows.train])
    X = {w: x_scaler.transform(X_all[getattr(windows, w)]) for w in WINDOW_NAMES}
    truth = {w: truth_all[getattr(windows, w)] for w in WINDOW_NAMES}
    labels: dict = {}
    thresholds = None
    y_scaler = None
    if spec.target.task == "classification":
        # The regime of the first horizon's mean variance, cut at training-window quantiles.
        first = truth_all[:, 0]
        try:
            thresholds = regime_thresholds(first[windows.train], spec.target.classes)
        except ValueError as exc:  # cut points that coincide: too many classes for these variances
            raise SpecError([f"target.classes: {exc} ({len(windows.train)} training rows of "
                             f"{spec.data.file.name})"], path=spec.path) from exc
        labels = {w: regime_labels(first[getattr(windows, w)], thresholds) for w in WINDOW_NAMES}
        y = dict(labels)
    else:
        _check_target_varies(spec, dataset, windows, truth)
        y_scaler = fit_scaler(y_target[windows.train])
        y = {w: y_scaler.transform(y_target[getattr(windows, w)]) for w in WINDOW_NAMES}
    return StudyInputs(
        dataset=dataset,
        windows=windows,
        x_scaler=x_scaler,
        y_scaler=y_scaler,
        X=X,
        y=y,
        truth=truth,
        labels=labels,
        task=spec.target.task,
        objective=spec.study.objective,
        log=log,
        horizons=tuple(spec.target.horizons),
        thresholds=thresholds,
    )


def _check_target_varies(spec: StudySpec, dataset: Dataset, windows: Windows, truth: dict) -> None:
    """A window whose target does not vary cannot be scored (no R^2, no forecast to choose): flat prices."""
    for name in WINDOW_NAMES:
        flat = [h for j, h in enumerate(spec.target.horizons) if np.ptp(truth[name][:, j]) == 0]
        if flat:
            dates = dataset.dates[getattr(windows, name)]
            raise DataError(
                f"{spec.data.file}: the {spec.target.estimator} variance target of horizon {flat[0]} is "
                f"the same on every row of the {name} window ({dates[0].date()} to {dates[-1].date()}): "
                "the prices do not move there; check open/high/low/close of those dates"
            )


@dataclass(frozen=True)
class WindowSpan:
    """One window of a study's rows: how many, and the first and last date (ISO text)."""

    rows: int
    first: str
    last: str

    @classmethod
    def from_dates(cls, dates) -> WindowSpan:
        """The span of a non-empty ``DatetimeIndex`` (``StudyInputs.dates(window)``)."""
        return cls(rows=int(len(dates)), first=dates[0].date().isoformat(), last=dates[-1].date().isoformat())

    def to_dict(self) -> dict:
        """``{"rows", "first", "last"}``."""
        return {"rows": self.rows, "first": self.first, "last": self.last}


@dataclass(frozen=True)
class WindowRows:
    """The rows of one window across folds: level truth, class labels (classification) and dates."""

    truth: np.ndarray
    labels: np.ndarray | None
    dates: pd.DatetimeIndex


def window_rows(folds, window: str) -> WindowRows:
    """The validation window spans every fold's block (oldest first, the rows of recorded validation
    forecasts); the training and test windows are the latest fold's."""
    folds = [folds] if isinstance(folds, StudyInputs) else list(folds)
    if window != "valid" or len(folds) == 1:
        last = folds[-1]
        return WindowRows(last.truth[window], last.labels.get(window), last.dates(window))
    labels = valid_labels(folds) if folds[-1].task == "classification" else None
    return WindowRows(valid_truth(folds), labels, valid_dates(folds))


def valid_truth(folds: list[StudyInputs]) -> np.ndarray:
    """Level truth of every fold's validation block, oldest first (rows of the recorded forecasts)."""
    return np.concatenate([f.truth["valid"] for f in folds])


def valid_labels(folds: list[StudyInputs]) -> np.ndarray:
    return np.concatenate([f.labels["valid"] for f in folds])


def valid_dates(folds: list[StudyInputs]) -> pd.DatetimeIndex:
    return folds[0].dates("valid").append([f.dates("valid") for f in folds[1:]])


