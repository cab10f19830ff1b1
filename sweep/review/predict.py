"""Forecasts of a recorded trial on a new price file, with the study's features and scaling.

The file is read like the study's own (same column map and bad-row rule); its features are built by the
same code and scaled with the scaler fitted on the record's training window.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from sweep.errors import ReviewError
from sweep.record import TrialRecord
from sweep.review.context import StudyContext, network_for, network_forecasts
from sweep.study import feature_config
from trainers.data import load_prices
from trainers.features import feature_frame
from trainers.volatility import TRADING_DAYS, daily_variance, log_returns

__all__ = ["Prediction", "predict_file"]


@dataclass(frozen=True)
class Prediction:
    """Forecasts of a trial on a price file (``frame``) and what they are: file, rows, dates, network.

    ``frame`` has ``date`` then, for regression, ``variance_h<h>`` and ``annual_vol_h<h>`` per horizon;
    for classification ``prob_<k>`` per regime and ``regime``. ``to_dict()`` gives the summary without
    the frame.
    """

    study: str
    trial: int
    file: str
    rows: int
    first_date: str
    last_date: str
    network: str
    dropped_rows: tuple[str, ...]
    columns: tuple[str, ...]
    frame: pd.DataFrame = field(repr=False, compare=False)

    def to_dict(self) -> dict:
        return {"study": self.study, "trial": self.trial, "file": self.file, "rows": self.rows,
                "first_date": self.first_date, "last_date": self.last_date, "network": self.network,
                "dropped_rows": list(self.dropped_rows), "columns": list(self.columns)}


def _new_features(ctx: StudyContext, path: Path) -> tuple[pd.DataFrame, list]:
    spec = ctx.spec
    data = load_prices(path, columns=dict(spec.data.columns), bad_rows=spec.data.bad_rows)
    frame = data.frame
    missing = [c for c in spec.features.exogenous if c not in frame.columns]
    if missing:
        raise ReviewError(
            f"{path} lacks the column(s) {', '.join(missing)} that study {ctx.name!r} uses as inputs "
            f"(features.exogenous); the file has {', '.join(frame.columns)}; add them to the file, or map "
            "its headers as the study's data.columns does"
        )
    kwargs = {"window": spec.target.yang_zhang_window} if spec.target.estimator == "yang_zhang" else {}
    variance = daily_variance(frame, spec.target.estimator, **kwargs)
    X = feature_frame(variance, log_returns(frame), frame, feature_config(spec))
    expected = list(ctx.inputs.dataset.X.columns)
    if list(X.columns) != expected:  # the same code builds both, so this guards against a changed spec reader
        raise ReviewError(f"features of {path} come out as {list(X.columns)}, the study used {expected}")
    X = X.loc[X.notna().all(axis=1)]
    if X.empty:
        longest = max(tuple(spec.features.har_windows) + tuple(k + 1 for k in spec.features.extra_lags) + (1,))
        raise ReviewError(
            f"{path} has {len(frame)} rows, too few for one complete row of features (the study's inputs "
            f"look back about {longest} days, plus the {spec.target.estimator} warm-up); give a longer file"
        )
    return X, list(data.dropped)


def predict_file(ctx: StudyContext, trial: TrialRecord, path: str | Path) -> Prediction:
    """Forecasts of a recorded trial on a new daily price file, one row per date with complete features.

    The file must have the columns the study used (open, high, low, close under the study's
    ``data.columns`` headers, plus any ``features.exogenous`` column). Features are built as the study
    built them and scaled with the scaler fitted on the record's training window.

    Returns:
        A ``Prediction``. Regression: its ``frame`` has ``date`` then, per horizon ``h``,
        ``variance_h<h>`` (mean daily variance over the next h days, level) and ``annual_vol_h<h>``
        (``sqrt(252 x variance)``). Classification: ``prob_<k>`` per regime (0 = calm) and ``regime``.
        The other fields name the file, the rows, the dates and where the network came from.

    Raises:
        PriceFileError: the file is missing or has bad rows (every problem listed).
        ReviewError: a column the study uses is missing, or too few rows.
    """
    path = Path(path)
    X, dropped = _new_features(ctx, path)
    network, source = network_for(ctx, trial)
    forecasts = network_forecasts(ctx.inputs, network, ctx.inputs.x_scaler.transform(X.to_numpy(np.float64)))
    out = pd.DataFrame({"date": X.index.strftime("%Y-%m-%d")})
    if ctx.inputs.task == "classification":
        for k in range(forecasts.shape[1]):
            out[f"prob_{k}"] = forecasts[:, k]
        out["regime"] = forecasts.argmax(axis=1)
    else:
        for j, h in enumerate(ctx.inputs.horizons):
            variance = forecasts[:, j]  # already level and floored (StudyInputs.to_level)
            out[f"variance_h{h}"] = variance
            out[f"annual_vol_h{h}"] = np.sqrt(TRADING_DAYS * variance)
    return Prediction(study=ctx.name, trial=trial.number, file=str(path), rows=int(len(out)),
                      first_date=out["date"].iloc[0], last_date=out["date"].iloc[-1], network=source,
                      dropped_rows=tuple(str(p) for p in dropped), columns=tuple(out.columns), frame=out)
