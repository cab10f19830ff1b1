"""User mistakes through the real CLI: one `error:` line naming the key or file, exit 1, no traceback; and
bugs still show theirs.

Every case runs `volsweep` through typer's test runner on real files in tmp_path: the invented market of
`trainers.scenario`, study files written from the demo study, and a real record made by `volsweep run`.
Under the test runner an uncaught exception does not print a traceback to the output; it is kept in
`result.exception`. So a user error is checked by `result.exception` being the `SystemExit` of
`typer.Exit(1)`, not by the absence of the word "Traceback" alone.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest
import typer
from typer.testing import CliRunner

from sweep.cli import app
from sweep.cli.app import REPORT_BUG, handles_errors
from sweep.errors import DataError
from sweep.study import set_keys
from sweep.study.demo import demo_study_text
from trainers.scenario import write_market_csv

FIXTURES = Path(__file__).parents[2] / "fixtures" / "prices"
N_DAYS = 900
# small and quick: the settings the CLI tests of `run` use
QUICK = dict(trials="2", workers="1", max_epochs="8", har_window="250", startup_trials="1", warmup_epochs="2")

runner = CliRunner()


def invoke(*args):
    return runner.invoke(app, [str(a) for a in args])


def assert_user_error(result, *needles: str) -> str:
    """Exit 1 through typer.Exit, exactly one `error:` line, every needle in the message; returns stderr."""
    assert result.exit_code == 1, result.output
    # a traceback under CliRunner is an exception kept in result.exception; typer.Exit(1) is a SystemExit
    assert isinstance(result.exception, SystemExit), repr(result.exception)
    errors = [line for line in result.stderr.splitlines() if line.startswith("error:")]
    assert len(errors) == 1, result.stderr
    for needle in needles:
        assert needle in result.stderr, (needle, result.stderr)
    assert "Traceback" not in result.output
    assert REPORT_BUG not in result.stderr
    return result.stderr


def assert_usage_error(result, option: str) -> None:
    # click's usage errors exit with code 2 and name the option (click documentation, "Exception Handling")
    assert result.exit_code == 2, result.output
    assert isinstance(result.exception, SystemExit), repr(result.exception)
    assert option in result.output


def assert_nothing_written(folder: Path, stem: str) -> None:
    assert not (folder / f"{stem}.sqlite").exists()
    assert not (folder / f"{stem}.optuna.log").exists()


@pytest.fixture(scope="module")
def market(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("market")
    return write_market_csv(folder, seed=5, n_days=N_DAYS, instruments=("harbor_index",))["harbor_index"]


def study_file(folder: Path, prices: Path, text: str | None = None, **keys) -> Path:
    """A study file in `folder` (its record would be `s.sqlite` beside it) reading `prices`."""
    path = folder / "s.toml"
    path.write_text(set_keys(text or demo_study_text(), name='"errors"', file=f'"{prices.as_posix()}"',
                             **{**QUICK, **keys}))
    return path


def dated_text(valid_start: str, test_start: str) -> str:
    """The demo study with a split by dates instead of fractions."""
    text = demo_study_text()
    for old, new in (("valid = 0.2 ", "# valid = 0.2 "), ("test = 0.2 ", "# test = 0.2 "),
                     ("# valid_start = 2019-01-02", f"valid_start = {valid_start}"),
                     ("# test_start = 2021-01-04", f"test_start = {test_start}")):
        assert old in text
        text = text.replace(old, new)
    return text


def head_of(prices: Path, folder: Path, n_rows: int) -> Path:
    """The first n_rows rows of a price file, as a new file."""
    lines = prices.read_text().splitlines()
    path = folder / f"head{n_rows}.csv"
    path.write_text("\n".join(lines[: n_rows + 1]) + "\n")
    return path


def flat_prices(prices: Path, folder: Path) -> Path:
    """The market's dates and extra columns with open = high = low = close = 100 every day."""
    frame = pd.read_csv(prices)
    for column in ("open", "high", "low", "close"):
        frame[column] = 100.0
    path = folder / "flat.csv"
    frame.to_csv(path, index=False)
    return path


@pytest.fixture(scope="module")
def record(tmp_path_factory, market) -> Path:
    """A real record of a finished two-trial study."""
    folder = tmp_path_factory.mktemp("record")
    path = study_file(folder, market)
    result = invoke("run", path, "--no-board")
    assert result.exit_code == 0, result.output
    return path.with_suffix(".sqlite")


# ---------------------------------------------------------------- study files whose numbers do not fit the data


def test_run_with_a_split_that_leaves_no_training_rows_names_split_and_writes_nothing(tmp_path, market):
    path = study_file(tmp_path, market, valid="0.49", test="0.5")
    assert_user_error(invoke("run", path), f"study file {path}", "split: the train window is empty",
                      market.name)
    assert_nothing_written(tmp_path, "s")


def test_split_dates_outside_the_data_name_the_date_key(tmp_path, market):
    path = study_file(tmp_path, market, text=dated_text("2000-01-03", "2015-01-05"))
    assert_user_error(invoke("features", path, "--out", tmp_path / "f.csv"), "split: valid_start=2000-01-03")
    assert not (tmp_path / "f.csv").exists()


def test_split_dates_too_close_leave_an_empty_validation_window(tmp_path, market):
    path = study_file(tmp_path, market, text=dated_text("2015-01-05", "2015-01-20"))
    assert_user_error(invoke("baselines", path), "split: the valid window is empty", "valid_start/test_start")


def test_too_many_folds_name_split_folds(tmp_path, market):
    path = study_file(tmp_path, market, folds="60")
    stderr = assert_user_error(invoke("run", path), "split.folds: 60 folds", "blocks of 2 rows")
    assert "mz_r2" not in stderr
    assert_nothing_written(tmp_path, "s")


def test_a_test_window_of_one_row_is_refused_before_scoring(tmp_path, market):
    # round(0.001 x 857) = 1 test row; the Mincer-Zarnowitz regression (intercept and slope) needs 3
    path = study_file(tmp_path, market, test="0.001")
    assert_user_error(invoke("baselines", path), "split: the test window gets 1 of", "split.test")


def test_a_short_file_too_short_for_the_rolling_har_names_the_baseline_keys(tmp_path, market):
    # 200 rows leave 73 training rows; the rolling HAR needs 250 (trainers.baselines.HAR_MIN_ROWS)
    path = study_file(tmp_path, head_of(market, tmp_path, 200))
    assert_user_error(invoke("run", path), "baselines: har_rolling has no forecast", "baselines.include",
                      "head200.csv")
    assert_nothing_written(tmp_path, "s")


def test_a_training_window_too_short_for_the_har_regression_names_the_baseline(tmp_path, market):
    # 4 training rows for an intercept and three HAR slopes: no degree of freedom left
    path = study_file(tmp_path, market, valid="0.48", test="0.49", include='["har"]')
    assert_user_error(invoke("baselines", path), "baselines: har h1: 4 usable rows", "split.valid")


def test_an_embargo_too_long_for_the_file_says_which_keys_set_the_rows_needed(tmp_path, market):
    path = study_file(tmp_path, market, embargo="300")
    stderr = assert_user_error(invoke("run", path), f"only {N_DAYS} rows", "3 x split.embargo = 900")
    # no row is bad, so dropping bad rows is no fix
    assert "bad_rows" not in stderr
    assert_nothing_written(tmp_path, "s")


def test_a_missing_exogenous_column_names_the_key_and_the_columns_the_file_has(tmp_path, market):
    path = study_file(tmp_path, market, exogenous='["implied_volatility"]')
    assert_user_error(invoke("features", path, "--out", tmp_path / "f.csv"),
                      "features.exogenous names 'implied_volatility'", str(market), "'implied_vol'")


def test_an_exogenous_column_named_like_a_built_feature_is_a_data_error(tmp_path, market):
    frame = pd.read_csv(market)
    frame["har_1"] = 1.0
    prices = tmp_path / "clash.csv"
    frame.to_csv(prices, index=False)
    path = study_file(tmp_path, prices, exogenous='["har_1"]')
    assert_user_error(invoke("run", path), "exogenous column 'har_1' clashes", str(prices))
    assert_nothing_written(tmp_path, "s")


def test_flat_prices_are_named_as_a_data_problem(tmp_path, market):
    prices = flat_prices(market, tmp_path)
    path = study_file(tmp_path, prices)
    assert_user_error(invoke("baselines", path), str(prices), "the prices do not move")


def test_flat_prices_in_a_classification_study_name_target_classes(tmp_path, market):
    prices = flat_prices(market, tmp_path)
    path = study_file(tmp_path, prices, task='"classification"', objective='"deviance"')
    assert_user_error(invoke("run", path), "target.classes: 3 classes need distinct cut points")
    assert_nothing_written(tmp_path, "s")


# ---------------------------------------------------------------- run: nothing is written when it fails


def test_run_on_a_price_file_with_a_nan_writes_nothing(tmp_path):
    path = study_file(tmp_path, FIXTURES / "nan_value.csv")
    assert_user_error(invoke("run", path), "nan_value.csv", "NaN value", 'data.bad_rows = "drop"')
    assert_nothing_written(tmp_path, "s")


def test_run_on_a_study_file_with_a_wrong_value_writes_nothing(tmp_path, market):
    path = study_file(tmp_path, market, horizons="[5, 1]")
    assert_user_error(invoke("run", path), "target.horizons")
    assert_nothing_written(tmp_path, "s")


@pytest.mark.parametrize("storage, needle", [
    ("nodb://nowhere", "optuna storage nodb://nowhere cannot be opened"),
    ("{tmp}/missing/journal.log", "folder {tmp}/missing does not exist"),
])
def test_run_with_a_storage_that_cannot_be_opened_names_it_and_writes_nothing(tmp_path, market, storage, needle):
    path = study_file(tmp_path, market)
    storage, needle = storage.format(tmp=tmp_path), needle.format(tmp=tmp_path)
    assert_user_error(invoke("run", path, "--storage", storage), needle, "--storage")
    assert_nothing_written(tmp_path, "s")


def test_run_into_a_missing_folder_names_the_folder(tmp_path, market):
    path = study_file(tmp_path, market)
    assert_user_error(invoke("run", path, "--db", tmp_path / "no" / "x.sqlite"), f"folder {tmp_path / 'no'}")
    assert not (tmp_path / "no").exists()


def test_demo_into_a_file_names_the_dir_option(tmp_path):
    in_the_way = tmp_path / "a-file"
    in_the_way.write_text("not a folder")
    assert_user_error(invoke("demo", "--dir", in_the_way, "--trials", "1"), str(in_the_way), "--dir")


# ---------------------------------------------------------------- files the commands write


def test_features_to_a_missing_folder_names_the_folder_and_the_out_option(tmp_path, market):
    path = study_file(tmp_path, market)
    assert_user_error(invoke("features", path, "--out", tmp_path / "no" / "f.csv"),
                      f"folder {tmp_path / 'no'} does not exist", "--out")


def test_predict_to_a_folder_names_the_out_option(tmp_path, record, market):
    assert_user_error(invoke("predict", record, "0", market, "--out", tmp_path), "it is a folder", "--out")


# ---------------------------------------------------------------- review commands on a real record


def test_predict_on_a_file_too_short_for_the_features_names_the_file(record):
    short = FIXTURES / "too_few_rows.csv"
    assert_user_error(invoke("predict", record, "0", short), str(short), "too few for one complete row")


def test_note_with_empty_text_is_a_user_error(record):
    assert_user_error(invoke("note", record, "0", "  "), "a note needs text")


def test_an_unknown_trial_and_study_are_named(record):
    assert_user_error(invoke("show", record, "99"), "no trial 99", "numbers 0-1")
    assert_user_error(invoke("replay", record, "0", "--study", "nope"), "no study named 'nope'", "errors")


# Sort keys, states and windows are checked by our own functions (ranking, compare), not by typer choices:
# the allowed values come from the constants those library functions check against, and the message is the
# same one `error:` line as every other user mistake.
@pytest.mark.parametrize("args, needles", [
    (("top", "--sort", "speed"), ("unknown sort key 'speed'", "gap_ratio")),
    (("top", "--state", "done"), ("unknown state 'done'", "complete, pruned, failed, running")),
    (("compare", "--window", "holdout"), ("window must be one of valid, test", "--window valid")),
])
def test_a_value_outside_a_fixed_set_lists_the_allowed_ones(record, args, needles):
    assert_user_error(invoke(args[0], record, *args[1:]), *needles)


@pytest.mark.parametrize("args, option", [
    (("top", "-n", "0"), "-n"),
    (("confirm", "--top", "0"), "--top"),
    (("confirm", "--seeds", "0"), "--seeds"),
    (("compare", "--top", "0"), "--top"),
])
def test_counts_below_one_are_usage_errors_of_typer(record, args, option):
    assert_usage_error(invoke(args[0], record, *args[1:]), option)


# ---------------------------------------------------------------- the handler itself


def _ratio(a: float, b: float) -> float:
    return a / b


def test_a_bug_is_not_swallowed_its_exception_propagates_after_the_report_line(capsys):
    with pytest.raises(ZeroDivisionError):
        handles_errors(_ratio)(1.0, 0.0)
    assert REPORT_BUG in capsys.readouterr().err


def test_a_bug_in_a_command_keeps_its_traceback_under_the_cli():
    bug_app = typer.Typer()
    bug_app.command()(handles_errors(lambda: _ratio(1.0, 0.0)))
    result = runner.invoke(bug_app, [])
    # the exception reaches the runner (a traceback for a person), with the report line on stderr
    assert isinstance(result.exception, ZeroDivisionError)
    assert REPORT_BUG in result.stderr
    assert "error:" not in result.stderr


def test_a_named_error_in_a_command_is_one_line_and_exit_1():
    def refuse() -> None:
        raise DataError("price file p.csv: too short; give a longer file")

    named_app = typer.Typer()
    named_app.command()(handles_errors(refuse))
    assert_user_error(runner.invoke(named_app, []), "error: price file p.csv: too short")
