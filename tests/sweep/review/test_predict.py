"""Tests for sweep/forecast.py: networks from the record and forecasts on a new price file.

Outside references: the validation forecasts recorded during the sweep (made by the objective from the
training arrays, not by this module), and the annualisation sqrt(252 x daily variance) (common practice).
"""

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from review_study import STUDY, copy_record, review_study
from sweep import review as forecast
from sweep.cli import app
from sweep.record import Tracker
from trainers.data import PriceFileError


@pytest.fixture(scope="module")
def record(tmp_path_factory):
    return review_study(tmp_path_factory)


@pytest.fixture
def ctx(record):
    with Tracker.open(record, create=False) as t:
        yield forecast.open_study(t, None)


def _price_file(ctx) -> str:
    return ctx.tracker.load_dataset(ctx.record.dataset_sha256).source


def test_predict_file_on_the_training_prices_reproduces_the_recorded_forecasts(ctx):
    trial = ctx.tracker.load_trial(STUDY, 1)
    frame, info = forecast.predict_file(ctx, trial, _price_file(ctx))
    assert info["network"] == forecast.NETWORK_STORED
    assert list(frame.columns) == ["date", "variance_h1", "annual_vol_h1", "variance_h5", "annual_vol_h5"]
    rows = frame.set_index("date").loc[ctx.inputs.dates("valid").strftime("%Y-%m-%d")]
    # the sweep recorded these validation forecasts from its own arrays
    np.testing.assert_allclose(rows[["variance_h1", "variance_h5"]].to_numpy(), trial.valid_forecasts,
                               rtol=0, atol=1e-12)
    # annualised volatility = sqrt(252 x daily variance) (common practice)
    np.testing.assert_allclose(frame["annual_vol_h5"], np.sqrt(252 * frame["variance_h5"]), rtol=1e-15)
    # forecasts run to the file's last day, past the last row that has a target
    assert info["last_date"] == ctx.tracker.load_dataset(ctx.record.dataset_sha256).last_date
    assert info["last_date"] > ctx.inputs.dataset.dates[-1].strftime("%Y-%m-%d")


def test_network_for_retrains_when_weights_are_missing(record, tmp_path):
    with Tracker.open(copy_record(record, tmp_path), create=False) as t:
        t.db.execute("DELETE FROM vs_weights WHERE study = ? AND number = 1", [STUDY])
        ctx = forecast.open_study(t, STUDY)
        trial = t.load_trial(STUDY, 1)
        network, source = forecast.network_for(ctx, trial)
        assert source == forecast.NETWORK_RETRAINED
        # retrained from the record on this machine: the recorded validation forecasts come back
        np.testing.assert_allclose(forecast.window_forecasts(ctx.inputs, network, "valid"), trial.valid_forecasts,
                                   rtol=0, atol=1e-12)


def test_predict_file_names_a_missing_price_column(ctx, tmp_path):
    frame = pd.read_csv(_price_file(ctx)).drop(columns=["high"])
    path = tmp_path / "no_high.csv"
    frame.to_csv(path, index=False)
    with pytest.raises(PriceFileError, match="high"):
        forecast.predict_file(ctx, ctx.tracker.load_trial(STUDY, 1), path)


def test_predict_file_names_a_missing_extra_input(ctx, tmp_path):
    # the same study, asking for the file's "volume" column as an extra input
    spec = ctx.spec
    with_volume = forecast.StudyContext(ctx.tracker, ctx.record, spec.__class__(
        **{**spec.__dict__, "features": spec.features.__class__(**{**spec.features.__dict__,
                                                                    "exogenous": ("volume",)})}), ctx.inputs)
    path = tmp_path / "prices.csv"
    pd.read_csv(_price_file(ctx)).drop(columns=["volume"]).to_csv(path, index=False)
    with pytest.raises(forecast.ReviewError, match=r"lacks the column\(s\) volume .* the file has open, high"):
        forecast.predict_file(with_volume, ctx.tracker.load_trial(STUDY, 1), path)


def test_predict_file_with_too_few_rows_says_so(ctx, tmp_path):
    path = tmp_path / "short.csv"
    pd.read_csv(_price_file(ctx)).head(10).to_csv(path, index=False)
    with pytest.raises(forecast.ReviewError, match="has 10 rows, too few for one complete row"):
        forecast.predict_file(ctx, ctx.tracker.load_trial(STUDY, 1), path)


def test_cli_predict_writes_a_csv(record, ctx, tmp_path):
    out = tmp_path / "forecasts.csv"
    res = CliRunner().invoke(app, ["predict", str(record), "1", _price_file(ctx), "--out", str(out)])
    assert res.exit_code == 0, res.output
    assert "network: stored weights" in res.output
    written = pd.read_csv(out)
    assert written.columns[0] == "date" and len(written) > len(ctx.inputs.dates("valid"))
    res = CliRunner().invoke(app, ["predict", str(record), "1", str(tmp_path / "missing.csv")])
    assert res.exit_code == 1 and "does not exist" in res.stderr
