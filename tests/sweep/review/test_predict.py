"""Tests for sweep/review/predict.py: forecasts of a recorded trial on a new price file.

Outside references: the validation forecasts recorded during the sweep (made by the objective from the
training arrays, not by this module), and the annualisation sqrt(252 x daily variance) (common practice).
"""

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from review_study import STUDY
from sweep import review
from sweep.cli import app
from trainers.data import PriceFileError

# the summary the prediction carries (the same keys the info dict had before the results were typed)
PREDICTION_KEYS = ["study", "trial", "file", "rows", "first_date", "last_date", "network", "dropped_rows", "columns"]


@pytest.fixture
def ctx(tracker):
    return review.open_study(tracker, None)


def _price_file(ctx) -> str:
    return ctx.tracker.load_dataset(ctx.record.dataset_sha256).source


def test_predict_file_on_the_training_prices_reproduces_the_recorded_forecasts(ctx):
    trial = ctx.tracker.load_trial(STUDY, 1)
    made = review.predict_file(ctx, trial, _price_file(ctx))
    frame = made.frame
    assert made.network == review.NETWORK_STORED
    assert list(frame.columns) == ["date", "variance_h1", "annual_vol_h1", "variance_h5", "annual_vol_h5"]
    rows = frame.set_index("date").loc[ctx.inputs.dates("valid").strftime("%Y-%m-%d")]
    # the sweep recorded these validation forecasts from its own arrays
    np.testing.assert_allclose(rows[["variance_h1", "variance_h5"]].to_numpy(), trial.valid_forecasts,
                               rtol=0, atol=1e-12)
    # annualised volatility = sqrt(252 x daily variance) (common practice)
    np.testing.assert_allclose(frame["annual_vol_h5"], np.sqrt(252 * frame["variance_h5"]), rtol=1e-15)
    # forecasts run to the file's last day, past the last row that has a target
    assert made.last_date == ctx.tracker.load_dataset(ctx.record.dataset_sha256).last_date
    assert made.last_date > ctx.inputs.dataset.dates[-1].strftime("%Y-%m-%d")


def test_prediction_summary_describes_its_frame(ctx):
    path = _price_file(ctx)
    made = review.predict_file(ctx, ctx.tracker.load_trial(STUDY, 1), path)
    data = made.to_dict()
    assert list(data) == PREDICTION_KEYS
    # the summary names the frame it comes with: its rows, first and last date and columns
    assert (data["rows"], data["first_date"], data["last_date"]) == (
        len(made.frame), made.frame["date"].iloc[0], made.frame["date"].iloc[-1])
    assert data["columns"] == list(made.frame.columns)
    assert (data["study"], data["trial"], data["file"], data["dropped_rows"]) == (STUDY, 1, str(path), [])


def test_predict_file_names_a_missing_price_column(ctx, tmp_path):
    frame = pd.read_csv(_price_file(ctx)).drop(columns=["high"])
    path = tmp_path / "no_high.csv"
    frame.to_csv(path, index=False)
    with pytest.raises(PriceFileError, match="high"):
        review.predict_file(ctx, ctx.tracker.load_trial(STUDY, 1), path)


def test_predict_file_names_a_missing_extra_input(ctx, tmp_path):
    # the same study, asking for the file's "volume" column as an extra input
    spec = ctx.spec
    with_volume = review.StudyContext(ctx.tracker, ctx.record, spec.__class__(
        **{**spec.__dict__, "features": spec.features.__class__(**{**spec.features.__dict__,
                                                                    "exogenous": ("volume",)})}), ctx.inputs)
    path = tmp_path / "prices.csv"
    pd.read_csv(_price_file(ctx)).drop(columns=["volume"]).to_csv(path, index=False)
    with pytest.raises(review.ReviewError, match=r"lacks the column\(s\) volume .* the file has open, high"):
        review.predict_file(with_volume, ctx.tracker.load_trial(STUDY, 1), path)


def test_predict_file_with_too_few_rows_says_so(ctx, tmp_path):
    path = tmp_path / "short.csv"
    pd.read_csv(_price_file(ctx)).head(10).to_csv(path, index=False)
    with pytest.raises(review.ReviewError, match="has 10 rows, too few for one complete row"):
        review.predict_file(ctx, ctx.tracker.load_trial(STUDY, 1), path)


def test_cli_predict_writes_a_csv(review_record, ctx, tmp_path):
    out = tmp_path / "forecasts.csv"
    res = CliRunner().invoke(app, ["predict", str(review_record), "1", _price_file(ctx), "--out", str(out)])
    assert res.exit_code == 0, res.output
    assert "network: stored weights" in res.output
    written = pd.read_csv(out)
    assert written.columns[0] == "date" and len(written) > len(ctx.inputs.dates("valid"))
    res = CliRunner().invoke(app, ["predict", str(review_record), "1", str(tmp_path / "missing.csv")])
    assert res.exit_code == 1 and "does not exist" in res.stderr
