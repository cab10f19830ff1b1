"""Typed summaries of a price file and a study file, behind `volsweep data`, `baselines` and `features`.

`data_report` and `baselines_report` return frozen dataclasses whose ``to_dict()`` is the JSON the CLI
prints with ``--json``; `features_frame` is the design matrix as a DataFrame. The CLI prints these; the
logic lives here so it can be tested without a terminal.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from types import MappingProxyType
from typing import Any

import numpy as np
import pandas as pd

from sweep.study.baselines import compute_baselines
from sweep.study.inputs import WINDOW_NAMES, WindowSpan, load_study_prices, prepare_inputs
from sweep.study.spec import StudySpec
from trainers import volatility
from trainers.data import load_prices
from trainers.price_checks import PriceFileError

__all__ = [
    "BaselineRow", "BaselinesReport", "DataReport", "EstimatorStats", "baselines_report",
    "data_report", "features_frame",
]


# ---------------------------------------------------------------- data

@dataclass(frozen=True)
class EstimatorStats:
    """One daily variance estimator over a price file (``trainers.volatility``).

    Attributes:
        name: the estimator, one of ``trainers.volatility.ESTIMATORS``.
        mean: mean daily variance over the days it is defined (NaN when none).
        median: median daily variance (NaN when none).
        annualised_vol: ``sqrt(252 x mean)`` (NaN when the mean is NaN or negative).
        zero_days: days whose variance is exactly 0.
    """

    name: str
    mean: float
    median: float
    annualised_vol: float
    zero_days: int

    def to_dict(self) -> dict:
        """The statistics without the name (the name is the key in `DataReport.to_dict`)."""
        return {"mean": self.mean, "median": self.median, "annualised_vol": self.annualised_vol,
                "zero_days": self.zero_days}


@dataclass(frozen=True)
class DataReport:
    """What `volsweep data` says of a price file.

    Attributes:
        file: the path as given.
        sha256: the file's SHA-256 (None when no row could be read).
        rows: rows kept (rows with problems are left out).
        first_date, last_date: ISO dates of the first and last kept rows (None without rows).
        columns: the columns of the kept rows; None when no row could be read at all.
        problems: one line per problem, each with its fix; empty for a good file.
        rows_with_problems: rows left out for a problem (None when no row could be read).
        estimators: statistics per estimator, in ``ESTIMATORS`` order; empty with fewer than 2 rows.
    """

    file: str
    sha256: str | None
    rows: int
    first_date: str | None
    last_date: str | None
    columns: tuple[str, ...] | None
    problems: tuple[str, ...]
    rows_with_problems: int | None
    estimators: tuple[EstimatorStats, ...]

    @property
    def readable(self) -> bool:
        """Whether any row could be read (an unreadable file has no columns and a shorter JSON)."""
        return self.columns is not None

    def to_dict(self) -> dict:
        estimators = {s.name: s.to_dict() for s in self.estimators}
        if not self.readable:
            return {"file": self.file, "rows": self.rows, "first_date": self.first_date,
                    "last_date": self.last_date, "sha256": self.sha256, "problems": list(self.problems),
                    "estimators": estimators}
        return {"file": self.file, "sha256": self.sha256, "rows": self.rows, "first_date": self.first_date,
                "last_date": self.last_date, "columns": list(self.columns), "problems": list(self.problems),
                "rows_with_problems": self.rows_with_problems, "estimators": estimators}


def _estimator_stats(frame: pd.DataFrame) -> tuple[EstimatorStats, ...]:
    stats = []
    for name in volatility.ESTIMATORS:
        var = volatility.daily_variance(frame, name).dropna()
        mean = float(var.mean()) if len(var) else math.nan
        stats.append(EstimatorStats(
            name=name,
            mean=mean,
            median=float(var.median()) if len(var) else math.nan,
            # annualised volatility = sqrt(252 x daily variance) (common practice)
            annualised_vol=math.sqrt(volatility.TRADING_DAYS * mean) if mean >= 0 else math.nan,
            zero_days=int((var == 0).sum()),
        ))
    return tuple(stats)


def data_report(path: Path, *, columns: dict | None = None, min_rows: int = 0) -> DataReport:
    """Rows, date range, problems and estimator statistics of a price file.

    A file with problems still gets a report: the problems are listed, and the statistics are
    computed on the rows without problems, when any remain.

    Args:
        path: the price file (CSV).
        columns: renames for the reader (``trainers.data.load_prices``).
        min_rows: fewest rows accepted without a problem.
    """
    try:
        data = load_prices(path, columns=columns, min_rows=min_rows)
        frame, problems, dropped = data.frame, (), ()
        sha256 = data.sha256
    except PriceFileError as exc:
        problems = tuple(str(p) for p in exc.problems)
        try:
            data = load_prices(path, columns=columns, bad_rows="drop", min_rows=0)
        except PriceFileError:
            return DataReport(file=str(path), sha256=None, rows=0, first_date=None, last_date=None,
                              columns=None, problems=problems, rows_with_problems=None, estimators=())
        frame, sha256 = data.frame, data.sha256
        dropped = tuple(str(p) for p in data.dropped)
    return DataReport(
        file=str(path),
        sha256=sha256,
        rows=int(len(frame)),
        first_date=frame.index[0].date().isoformat() if len(frame) else None,
        last_date=frame.index[-1].date().isoformat() if len(frame) else None,
        columns=tuple(frame.columns),
        problems=problems,
        rows_with_problems=len(dropped),
        estimators=_estimator_stats(frame) if len(frame) > 1 else (),
    )


# ---------------------------------------------------------------- baselines

@dataclass(frozen=True)
class BaselineRow:
    """One baseline on one window: its objective, every loss, and its fitted parameters (read-only)."""

    name: str
    window: str
    objective: float
    losses: Mapping[str, float]
    params: Mapping[str, Any]

    def __post_init__(self):
        object.__setattr__(self, "losses", MappingProxyType(dict(self.losses)))
        object.__setattr__(self, "params", MappingProxyType(dict(self.params)))

    def to_dict(self) -> dict:
        return {"name": self.name, "window": self.window, "objective": self.objective,
                "losses": dict(self.losses), "params": dict(self.params)}


@dataclass(frozen=True)
class BaselinesReport:
    """What `volsweep baselines` says of a study file.

    Attributes:
        study: the study's name.
        objective: the name of its objective.
        windows: the train, valid and test windows, in that order.
        baselines: every baseline on the validation and test windows.
    """

    study: str
    objective: str
    windows: dict[str, WindowSpan]
    baselines: tuple[BaselineRow, ...]

    def to_dict(self) -> dict:
        return {"study": self.study, "objective": self.objective,
                "windows": {name: w.to_dict() for name, w in self.windows.items()},
                "baselines": [b.to_dict() for b in self.baselines]}


def baselines_report(spec: StudySpec) -> BaselinesReport:
    """Every baseline's losses on the validation and test windows, with fitted parameters."""
    price_data = load_study_prices(spec)
    inputs = prepare_inputs(spec, price_data.frame)
    return BaselinesReport(
        study=spec.study.name,
        objective=spec.study.objective,
        windows={w: WindowSpan.from_dates(inputs.dates(w)) for w in WINDOW_NAMES},
        baselines=tuple(BaselineRow(name=b.name, window=b.window, objective=b.objective, losses=b.losses,
                                    params=b.params) for b in compute_baselines(spec, inputs)),
    )


def features_frame(spec: StudySpec) -> pd.DataFrame:
    """The exact design matrix and targets the sweep uses (unscaled), with dates and windows.

    Rows in an embargo gap belong to no window and are marked "embargo".
    """
    price_data = load_study_prices(spec)
    inputs = prepare_inputs(spec, price_data.frame)
    dataset = inputs.dataset
    window = np.full(len(dataset.dates), "embargo", dtype=object)
    for name in WINDOW_NAMES:
        window[getattr(inputs.windows, name)] = name
    out = pd.concat([dataset.X, dataset.y.add_prefix("target_")], axis=1)
    out.insert(0, "window", window)
    out.index = pd.DatetimeIndex(dataset.dates, name="date")
    return out
