"""Plain, JSON-able summaries of a price file and a study file, behind `volsweep data`, `baselines` and
`features`. The CLI prints these; the logic lives here so it can be tested without a terminal."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd

from sweep.study.baselines import compute_baselines
from sweep.study.inputs import StudyInputs, load_study_prices, prepare_inputs
from sweep.study.spec import StudySpec
from trainers import volatility
from trainers.data import load_prices
from trainers.price_checks import PriceFileError

__all__ = ["baselines_report", "data_report", "features_frame"]


def _estimator_stats(frame: pd.DataFrame) -> dict:
    stats = {}
    for name in volatility.ESTIMATORS:
        var = volatility.daily_variance(frame, name).dropna()
        mean = float(var.mean()) if len(var) else math.nan
        stats[name] = {
            "mean": mean,
            "median": float(var.median()) if len(var) else math.nan,
            "annualised_vol": math.sqrt(volatility.TRADING_DAYS * mean) if mean >= 0 else math.nan,
            "zero_days": int((var == 0).sum()),
        }
    return stats


def data_report(path: Path, *, columns: dict | None = None, min_rows: int = 0) -> dict:
    """Rows, date range, problems and estimator statistics of a price file.

    A file with problems still gets a report: the problems are listed, and the statistics are
    computed on the rows without problems, when any remain.
    """
    try:
        data = load_prices(path, columns=columns, min_rows=min_rows)
        frame, problems, dropped = data.frame, [], []
        sha256 = data.sha256
    except PriceFileError as exc:
        problems = [str(p) for p in exc.problems]
        try:
            data = load_prices(path, columns=columns, bad_rows="drop", min_rows=0)
        except PriceFileError:
            return {"file": str(path), "rows": 0, "first_date": None, "last_date": None,
                    "sha256": None, "problems": problems, "estimators": {}}
        frame, sha256 = data.frame, data.sha256
        dropped = [str(p) for p in data.dropped]
    report = {
        "file": str(path),
        "sha256": sha256,
        "rows": int(len(frame)),
        "first_date": frame.index[0].date().isoformat() if len(frame) else None,
        "last_date": frame.index[-1].date().isoformat() if len(frame) else None,
        "columns": list(frame.columns),
        "problems": problems,
        "rows_with_problems": len(dropped),
        "estimators": _estimator_stats(frame) if len(frame) > 1 else {},
    }
    return report


def baselines_report(spec: StudySpec) -> dict:
    """Every baseline's losses on the validation and test windows, with fitted parameters."""
    price_data = load_study_prices(spec)
    inputs = prepare_inputs(spec, price_data.frame)
    rows = []
    for b in compute_baselines(spec, inputs):
        rows.append({"name": b.name, "window": b.window, "objective": b.objective,
                     "losses": b.losses, "params": b.params})
    return {
        "study": spec.study.name,
        "objective": spec.study.objective,
        "windows": {w: _window_range(inputs, w) for w in ("train", "valid", "test")},
        "baselines": rows,
    }


def _window_range(inputs: StudyInputs, window: str) -> dict:
    dates = inputs.dates(window)
    return {"rows": int(len(dates)), "first": dates[0].date().isoformat(), "last": dates[-1].date().isoformat()}


def features_frame(spec: StudySpec) -> pd.DataFrame:
    """The exact design matrix and targets the sweep uses (unscaled), with dates and windows.

    Rows in an embargo gap belong to no window and are marked "embargo".
    """
    price_data = load_study_prices(spec)
    inputs = prepare_inputs(spec, price_data.frame)
    dataset = inputs.dataset
    window = np.full(len(dataset.dates), "embargo", dtype=object)
    for name in ("train", "valid", "test"):
        window[getattr(inputs.windows, name)] = name
    out = pd.concat([dataset.X, dataset.y.add_prefix("target_")], axis=1)
    out.insert(0, "window", window)
    out.index = pd.DatetimeIndex(dataset.dates, name="date")
    return out
