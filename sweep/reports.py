"""Plain, JSON-able summaries behind the read-only commands (`data`, `baselines`, `features`, `top`,
`list`, `show`). The CLI prints these; the logic lives here so it can be tested without a terminal."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd

from sweep.engine import _load_price_data
from sweep.inputs import compute_baselines, prepare_inputs
from sweep.ranking import rank_rows, trial_row
from sweep.tracker import Tracker
from trainers import volatility
from trainers.data import PriceFileError, load_prices

__all__ = [
    "TRADING_DAYS",
    "data_report",
    "baselines_report",
    "features_frame",
    "top_report",
    "list_report",
    "show_report",
]

TRADING_DAYS = 252  # annualisation: sqrt(252) x daily volatility (common practice)


def _estimator_stats(frame: pd.DataFrame) -> dict:
    stats = {}
    for name in volatility.ESTIMATORS:
        var = volatility.daily_variance(frame, name).dropna()
        mean = float(var.mean()) if len(var) else math.nan
        stats[name] = {
            "mean": mean,
            "median": float(var.median()) if len(var) else math.nan,
            "annualised_vol": math.sqrt(TRADING_DAYS * mean) if mean >= 0 else math.nan,
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


def baselines_report(spec) -> dict:
    """Every baseline's losses on the validation and test windows, with fitted parameters."""
    price_data = _load_price_data(spec)
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


def _window_range(inputs, window: str) -> dict:
    dates = inputs.dates(window)
    return {"rows": int(len(dates)), "first": dates[0].date().isoformat(), "last": dates[-1].date().isoformat()}


def features_frame(spec) -> pd.DataFrame:
    """The exact design matrix and targets the sweep uses (unscaled), with dates and windows.

    Rows in an embargo gap belong to no window and are marked "embargo".
    """
    price_data = _load_price_data(spec)
    inputs = prepare_inputs(spec, price_data.frame)
    dataset = inputs.dataset
    window = np.full(len(dataset.dates), "embargo", dtype=object)
    for name in ("train", "valid", "test"):
        window[getattr(inputs.windows, name)] = name
    out = pd.concat([dataset.X, dataset.y.add_prefix("target_")], axis=1)
    out.insert(0, "window", window)
    out.index = pd.DatetimeIndex(dataset.dates, name="date")
    return out


def top_report(tracker: Tracker, *, study=None, n=20, sort="objective", states=None) -> dict:
    """The ranking of a study, baselines included and marked."""
    record = tracker.find_study(study)
    trials = tracker.load_trials(record.name)
    rows = rank_rows(trials, tracker.load_baselines(record.name), sort=sort,
                     states=tuple(states) if states else None)
    return {"study": record.name, "objective": record.objective, "rows": rows[:n]}


def list_report(tracker: Tracker) -> list[dict]:
    return tracker.list_studies()


def show_report(tracker: Tracker, number: int, *, study=None) -> dict:
    """One trial in full, with the study's provenance."""
    record = tracker.find_study(study)
    t = tracker.load_trial(record.name, number)
    dataset = tracker.load_dataset(record.dataset_sha256)
    return {
        "study": {
            "name": record.name,
            "created": record.created,
            "objective": record.objective,
            "code_version": record.code_version,
            "git_commit": record.git_commit,
            "python": record.python,
            "platform": record.platform,
            "packages": record.packages,
            "spec_hash": record.spec_hash,
        },
        "dataset": {
            "sha256": dataset.sha256,
            "source": dataset.source,
            "rows": dataset.n_rows,
            "first_date": dataset.first_date,
            "last_date": dataset.last_date,
        },
        "trial": {
            **trial_row(t),
            "seed": t.seed,
            "started": t.started,
            "finished": t.finished,
            "error": t.error,
            "worker": t.worker,
            "curve": [
                {"epoch": e.epoch, "train_loss": e.train_loss, "valid_loss": e.valid_loss,
                 "valid_score": e.valid_score, "seconds": e.seconds}
                for e in t.epochs
            ],
            "has_weights": t.weights is not None,
        },
    }
