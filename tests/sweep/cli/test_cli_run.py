"""The data, run and read-back commands through typer's test runner."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from typer.testing import CliRunner

from sweep.cli import app
from sweep.study.demo import demo_study_text, write_demo
from sweep.study import set_keys
from trainers.scenario import write_market_csv

FIXTURES = Path(__file__).parents[2] / "fixtures" / "prices"
BAD_FILES = sorted(p for p in FIXTURES.glob("*.csv") if p.name != "good_small.csv")
ESTIMATOR_KEYS = {"close_to_close", "parkinson", "garman_klass", "rogers_satchell", "yang_zhang"}

runner = CliRunner()


def invoke(*args):
    return runner.invoke(app, [str(a) for a in args])


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    folder = tmp_path_factory.mktemp("cli")
    (folder / "data").mkdir()
    write_market_csv(folder / "data", seed=5, n_days=900)
    text = set_keys(demo_study_text(), name='"cli-study"', trials="3", workers="1", max_epochs="8",
                    har_window="250", startup_trials="1", warmup_epochs="2")
    path = folder / "cli.toml"
    path.write_text(text)
    result = invoke("run", path, "--no-board")
    assert result.exit_code == 0, result.output
    return path, result


def test_data_reports_estimators_of_a_good_file():
    result = invoke("data", FIXTURES / "good_small.csv", "--json", "--min-rows", "0")
    assert result.exit_code == 0, result.output
    report = json.loads(result.stdout)
    assert report["problems"] == []
    assert set(report["estimators"]) == ESTIMATOR_KEYS
    assert report["rows"] > 0 and report["first_date"] < report["last_date"]
    for stats in report["estimators"].values():
        assert set(stats) >= {"mean", "median"}


def test_data_on_demo_market_annualised_vol_is_sqrt_252_times_daily(tmp_path):
    paths = write_market_csv(tmp_path, seed=1, n_days=400)
    report = json.loads(invoke("data", paths["harbor_index"], "--json").stdout)
    gk = report["estimators"]["garman_klass"]
    # annualised volatility = sqrt(252 x mean daily variance) (common practice)
    assert gk["annualised_vol"] == pytest.approx((252 * gk["mean"]) ** 0.5)


@pytest.mark.parametrize("path", BAD_FILES, ids=lambda p: p.stem)
def test_data_names_each_problem_of_a_malformed_file(path):
    result = invoke("data", path)
    # a non-zero exit and a problem line with a fix, never a traceback
    assert result.exit_code == 1, result.output
    assert "Traceback" not in result.output
    problems = [line for line in result.stdout.splitlines() if line.strip().startswith("problem:")]
    assert problems, result.output
    assert all("fix:" in line for line in problems)


@pytest.mark.parametrize("path", BAD_FILES[:6], ids=lambda p: p.stem)
def test_run_refuses_a_malformed_price_file_with_one_error(tmp_path, path):
    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "harbor_index.csv").write_bytes(path.read_bytes())
    study_file = tmp_path / "s.toml"
    study_file.write_text(demo_study_text())
    result = invoke("run", study_file)
    assert result.exit_code == 1
    assert result.stderr.startswith("error:")
    assert "Traceback" not in result.output
    # nothing was written
    assert not (tmp_path / "s.sqlite").exists()


def test_run_prints_the_top_trials_beside_the_best_baseline(study):
    _, result = study
    assert "trials beside the best baseline" in result.stdout
    assert "baseline" in result.stdout
    assert "not advice" in result.stdout


def test_tables_printed_to_a_pipe_keep_their_values_whole(study):
    # CliRunner's output is not a terminal, like a log file or CI: rich would cut the table to 80 columns
    path, _ = study
    result = invoke("top", path.with_suffix(".sqlite"))
    assert result.exit_code == 0, result.output
    assert "best/epochs" in result.stdout and "complete" in result.stdout
    assert "\u2026" not in result.stdout  # no value ends in an ellipsis


def test_top_json_has_the_promised_fields(study):
    path, _ = study
    result = invoke("top", path.with_suffix(".sqlite"), "--json")
    assert result.exit_code == 0, result.output
    rows = json.loads(result.stdout)
    keys = {"trial", "state", "objective", "train_loss", "gap", "gap_ratio", "best_epoch", "epochs",
            "stop_reason", "params"}
    assert all(keys <= set(r) for r in rows)
    # baselines are included and marked
    assert {r["kind"] for r in rows} == {"trial", "baseline"}
    objectives = [r["objective"] for r in rows if r["objective"] is not None]
    assert objectives == sorted(objectives)


def test_top_filters_by_state_and_sorts_by_gap(study):
    path, _ = study
    rows = json.loads(invoke("top", path.with_suffix(".sqlite"), "--json", "--state", "complete",
                             "--sort", "gap").stdout)
    trials = [r for r in rows if r["kind"] == "trial"]
    assert trials and all(r["state"] == "complete" for r in trials)
    gaps = [r["gap"] for r in trials]
    assert gaps == sorted(gaps)


def test_list_and_show(study):
    path, _ = study
    db = path.with_suffix(".sqlite")
    studies = json.loads(invoke("list", db, "--json").stdout)
    assert [s["name"] for s in studies] == ["cli-study"]
    shown = json.loads(invoke("show", db, "0", "--json").stdout)
    assert shown["trial"]["trial"] == 0
    assert shown["dataset"]["rows"] == 900
    assert shown["study"]["packages"]["numpy"]
    assert len(shown["trial"]["curve"]) == shown["trial"]["epochs"]


def test_show_unknown_trial_and_missing_record_are_one_line_errors(study, tmp_path):
    path, _ = study
    result = invoke("show", path.with_suffix(".sqlite"), "99")
    assert result.exit_code == 1 and result.stderr.startswith("error:")
    result = invoke("top", tmp_path / "nothing.sqlite")
    assert result.exit_code == 1 and "Traceback" not in result.output


def test_run_refuses_a_wrong_key_in_the_study_file(tmp_path):
    study_file = tmp_path / "bad.toml"
    study_file.write_text(demo_study_text().replace("hidden_units =", "hiden_units ="))
    result = invoke("run", study_file)
    assert result.exit_code == 1
    assert "space.hiden_units" in result.stderr and "space.hidden_units" in result.stderr
    assert not (tmp_path / "bad.sqlite").exists()


def test_baselines_json_lists_every_baseline_on_both_windows(study):
    path, _ = study
    result = invoke("baselines", path, "--json")
    assert result.exit_code == 0, result.output
    report = json.loads(result.stdout)
    pairs = {(b["name"], b["window"]) for b in report["baselines"]}
    names = {"random_walk", "ewma", "har", "har_rolling", "garch"}
    assert pairs == {(n, w) for n in names for w in ("valid", "test")}
    har = next(b for b in report["baselines"] if b["name"] == "har")
    assert har["params"]


def test_features_writes_the_design_matrix_with_windows(study, tmp_path):
    import pandas as pd

    path, _ = study
    out = tmp_path / "features.csv"
    result = invoke("features", path, "--out", out)
    assert result.exit_code == 0, result.output
    frame = pd.read_csv(out, index_col="date", parse_dates=True)
    assert {"train", "valid", "test", "embargo"} == set(frame["window"])
    assert {"har_1", "har_5", "har_22", "target_h1", "target_h22"} <= set(frame.columns)
    assert frame.index.is_monotonic_increasing


def test_demo_writes_its_market_and_study(tmp_path):
    study_file = write_demo(tmp_path)
    assert study_file.read_text() == (Path(__file__).parents[3] / "studies" / "demo.toml").read_text()
    assert (tmp_path / "data" / "harbor_index.csv").exists()
