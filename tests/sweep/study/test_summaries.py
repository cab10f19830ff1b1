"""Tests for sweep/study/summaries.py: the reports of `volsweep data`, `baselines` and `features`.

`data_report`'s statistics are checked against the published estimator formulas computed here with
numpy on the file as read by the `csv` module (not by the project's reader):

* close to close: the squared daily log return r_t^2 (the classical one-day proxy);
* Parkinson (1980), "The extreme value method for estimating the variance of the rate of return":
  ln(H/L)^2 / (4 ln 2);
* Garman and Klass (1980), "On the estimation of security price volatilities from historical data":
  0.5 ln(H/L)^2 - (2 ln 2 - 1) ln(C/O)^2;
* Rogers and Satchell (1991), "Estimating variance from high, low and closing prices":
  ln(H/C) ln(H/O) + ln(L/C) ln(L/O).

The annualisation sqrt(252 x mean daily variance) is common practice (252 trading days a year).
Price data comes from the invented market of `trainers/scenario.py` and the fixtures in
tests/fixtures/prices.
"""

from __future__ import annotations

import csv
import hashlib
import math
from pathlib import Path

import numpy as np
import pytest

from sweep.study import (
    BaselinesReport, DataReport, EstimatorStats, baselines_report, data_report, features_frame, load_spec, set_keys,
)
from sweep.study.demo import demo_study_text
from trainers.scenario import write_market_csv

FIXTURES = Path(__file__).parents[2] / "fixtures" / "prices"
LN2 = math.log(2.0)
ESTIMATOR_ORDER = ["close_to_close", "parkinson", "garman_klass", "rogers_satchell", "yang_zhang"]
BASELINE_NAMES = {"random_walk", "ewma", "har", "har_rolling", "garch"}

# two days with a zero: 2021-01-05 is flat (O = H = L = C = the previous close), 2021-01-08 opens at its
# high and closes at its low, where both Rogers-Satchell products vanish: ln(H/O) = 0 and ln(L/C) = 0
TINY = """date,open,high,low,close
2021-01-04,100,102,99,101
2021-01-05,101,101,101,101
2021-01-06,101,103,100,102
2021-01-07,102,104,101,103
2021-01-08,103,103,101,101
"""


def read_ohlc(path: Path, *, skip_dates=()) -> dict[str, np.ndarray]:
    """Open, high, low, close of a price file, read with the csv module (headers in any case)."""
    with open(path, newline="", encoding="utf-8") as f:
        rows = [{k.lower(): v for k, v in row.items()} for row in csv.DictReader(f)]
    rows = [r for r in rows if r["date"] not in skip_dates]
    return {c: np.array([float(r[c]) for r in rows]) for c in ("open", "high", "low", "close")}


def formula_variances(p: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Daily variances by the published formulas (module docstring); close to close has no first day."""
    o, h, lo, c = p["open"], p["high"], p["low"], p["close"]
    return {
        "close_to_close": np.log(c[1:] / c[:-1]) ** 2,
        "parkinson": np.log(h / lo) ** 2 / (4 * LN2),
        "garman_klass": 0.5 * np.log(h / lo) ** 2 - (2 * LN2 - 1) * np.log(c / o) ** 2,
        "rogers_satchell": np.log(h / c) * np.log(h / o) + np.log(lo / c) * np.log(lo / o),
    }


def stats_by_name(report: DataReport) -> dict[str, EstimatorStats]:
    return {s.name: s for s in report.estimators}


@pytest.fixture(scope="module")
def market_file(tmp_path_factory) -> Path:
    return write_market_csv(tmp_path_factory.mktemp("market"), seed=3, n_days=300)["harbor_index"]


# ---------------------------------------------------------------- data_report

@pytest.mark.parametrize("name", ["close_to_close", "parkinson", "garman_klass", "rogers_satchell"])
def test_data_report_estimators_match_the_published_formulas(market_file, name):
    report = data_report(market_file)
    stats = stats_by_name(report)[name]
    expected = formula_variances(read_ohlc(market_file))[name]
    assert stats.mean == pytest.approx(expected.mean(), rel=1e-10)
    assert stats.median == pytest.approx(np.median(expected), rel=1e-10)
    # annualised volatility = sqrt(252 x mean daily variance) (common practice)
    assert stats.annualised_vol == pytest.approx(math.sqrt(252 * expected.mean()), rel=1e-10)
    assert stats.zero_days == int((expected == 0).sum())


def test_data_report_describes_the_file(market_file):
    report = data_report(market_file)
    assert isinstance(report, DataReport) and report.readable
    prices = read_ohlc(market_file)
    with open(market_file, encoding="utf-8") as f:
        lines = f.read().splitlines()
    assert report.rows == len(prices["close"]) == len(lines) - 1 == 300
    assert (report.first_date, report.last_date) == (lines[1].split(",")[0], lines[-1].split(",")[0])
    assert report.columns[:4] == ("open", "high", "low", "close")
    assert (report.problems, report.rows_with_problems) == ((), 0)
    # the SHA-256 of the file's bytes, by the standard library's hashlib
    assert report.sha256 == hashlib.sha256(market_file.read_bytes()).hexdigest()
    assert [s.name for s in report.estimators] == ESTIMATOR_ORDER


def test_data_report_parkinson_of_a_tiny_file_by_hand(tmp_path):
    path = tmp_path / "tiny.csv"
    path.write_text(TINY)
    stats = stats_by_name(data_report(path))
    # Parkinson (1980): ln(H/L)^2 / (4 ln 2) for each day, worked day by day (the flat day is 0)
    days = [math.log(102 / 99) ** 2, 0.0, math.log(103 / 100) ** 2, math.log(104 / 101) ** 2,
            math.log(103 / 101) ** 2]
    days = [d / (4 * LN2) for d in days]
    assert stats["parkinson"].mean == pytest.approx(sum(days) / 5, rel=1e-12)
    assert stats["parkinson"].median == pytest.approx(sorted(days)[2], rel=1e-12)
    assert stats["parkinson"].annualised_vol == pytest.approx(math.sqrt(252 * sum(days) / 5), rel=1e-12)


def test_data_report_counts_zero_days_by_estimator(tmp_path):
    path = tmp_path / "tiny.csv"
    path.write_text(TINY)
    stats = stats_by_name(data_report(path))
    # the flat day is zero for every estimator; Rogers-Satchell is also zero on the open-high close-low day
    zeros = {name: s.zero_days for name, s in stats.items() if name != "yang_zhang"}
    assert zeros == {"close_to_close": 1, "parkinson": 1, "garman_klass": 1, "rogers_satchell": 2}


def test_data_report_estimator_without_a_defined_day_is_nan(tmp_path):
    path = tmp_path / "tiny.csv"
    path.write_text(TINY)
    yz = stats_by_name(data_report(path))["yang_zhang"]
    # Yang-Zhang needs a 22-day window (the module's default), which 5 rows never fill
    assert math.isnan(yz.mean) and math.isnan(yz.median) and math.isnan(yz.annualised_vol)
    assert yz.zero_days == 0


def test_data_report_lists_problems_and_summarises_the_good_rows():
    path = FIXTURES / "high_below_close.csv"
    report = data_report(path)
    assert len(report.problems) == 1 and "fix:" in report.problems[0]
    bad_date = "2021-01-11"
    assert bad_date in report.problems[0]
    # the statistics cover the rows without problems only
    good = read_ohlc(path, skip_dates={bad_date})
    assert (report.rows, report.rows_with_problems) == (len(good["close"]), 1)
    expected = formula_variances(good)["parkinson"]
    assert stats_by_name(report)["parkinson"].mean == pytest.approx(expected.mean(), rel=1e-10)


def test_data_report_of_an_unreadable_file_has_the_short_shape():
    report = data_report(FIXTURES / "empty.csv")
    assert not report.readable
    assert (report.rows, report.sha256, report.estimators) == (0, None, ())
    assert report.problems and all("fix:" in p for p in report.problems)
    as_dict = report.to_dict()
    # the JSON of `volsweep data --json` for a file with no readable row
    assert list(as_dict) == ["file", "rows", "first_date", "last_date", "sha256", "problems", "estimators"]
    assert as_dict["estimators"] == {} and as_dict["problems"] == list(report.problems)


def test_data_report_to_dict_is_the_json_shape(market_file):
    report = data_report(market_file)
    as_dict = report.to_dict()
    assert list(as_dict) == ["file", "sha256", "rows", "first_date", "last_date", "columns", "problems",
                             "rows_with_problems", "estimators"]
    assert list(as_dict["estimators"]) == ESTIMATOR_ORDER
    parkinson = stats_by_name(report)["parkinson"]
    assert as_dict["estimators"]["parkinson"] == {"mean": parkinson.mean, "median": parkinson.median,
                                                  "annualised_vol": parkinson.annualised_vol,
                                                  "zero_days": parkinson.zero_days}
    assert as_dict["columns"] == list(report.columns) and as_dict["file"] == str(market_file)


# ---------------------------------------------------------------- baselines_report and features_frame

@pytest.fixture(scope="module")
def spec(tmp_path_factory):
    folder = tmp_path_factory.mktemp("study")
    write_market_csv(folder / "data", seed=5, n_days=900)
    # an EWMA decay other than RiskMetrics' 0.94, to see the study's own value come through
    text = set_keys(demo_study_text(), name='"summaries"', har_window="250", ewma_lambda="0.9")
    (folder / "s.toml").write_text(text)
    return load_spec(folder / "s.toml")


@pytest.fixture(scope="module")
def baselines(spec) -> BaselinesReport:
    return baselines_report(spec)


def test_baselines_report_scores_every_baseline_on_both_windows(spec, baselines):
    assert (baselines.study, baselines.objective) == ("summaries", "qlike")
    assert {(b.name, b.window) for b in baselines.baselines} == {(n, w) for n in BASELINE_NAMES
                                                                 for w in ("valid", "test")}
    # the objective is the study's own loss (qlike) of each row
    assert all(b.objective == b.losses["qlike"] for b in baselines.baselines)
    ewma = next(b for b in baselines.baselines if b.name == "ewma" and b.window == "valid")
    assert ewma.params["lambda"] == 0.9


def test_baselines_report_windows_follow_the_split_with_the_embargo(spec, baselines):
    windows = baselines.windows
    assert list(windows) == ["train", "valid", "test"]
    frame = features_frame(spec)
    labels = frame["window"].to_numpy()
    dates = [d.date().isoformat() for d in frame.index]
    for name, w in windows.items():
        rows = np.flatnonzero(labels == name)
        assert (w.rows, w.first, w.last) == (len(rows), dates[rows[0]], dates[rows[-1]])
    # the study file's embargo (22 rows) separates the windows
    assert dates.index(windows["valid"].first) - dates.index(windows["train"].last) - 1 == 22
    assert dates.index(windows["test"].first) - dates.index(windows["valid"].last) - 1 == 22


def test_baselines_report_to_dict_is_the_json_shape(baselines):
    as_dict = baselines.to_dict()
    assert list(as_dict) == ["study", "objective", "windows", "baselines"]
    assert list(as_dict["windows"]) == ["train", "valid", "test"]
    assert list(as_dict["windows"]["train"]) == ["rows", "first", "last"]
    assert all(list(b) == ["name", "window", "objective", "losses", "params"] for b in as_dict["baselines"])
    assert type(as_dict["baselines"][0]["params"]) is dict and type(as_dict["baselines"][0]["losses"]) is dict


def test_features_frame_marks_every_row_with_its_window(spec):
    frame = features_frame(spec)
    assert frame.index.is_monotonic_increasing and frame.index.name == "date"
    assert set(frame["window"]) == {"train", "valid", "test", "embargo"}
    # two embargo gaps of 22 rows (the study file's embargo)
    assert (frame["window"] == "embargo").sum() == 44
    assert {"har_1", "har_5", "har_22", "target_h1", "target_h5", "target_h22"} <= set(frame.columns)
