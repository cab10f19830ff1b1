"""`volsweep run` and `volsweep demo` through typer's test runner (the reading commands: test_reading.py)."""

from __future__ import annotations

from pathlib import Path

import pytest
from typer.testing import CliRunner

from sweep.cli import app
from sweep.record import Tracker
from sweep.study import set_keys
from sweep.study.demo import demo_study_text, write_demo
from trainers.scenario import write_market_csv

FIXTURES = Path(__file__).parents[2] / "fixtures" / "prices"
BAD_FILES = sorted(p for p in FIXTURES.glob("*.csv") if p.name != "good_small.csv")

runner = CliRunner()


def invoke(*args):
    return runner.invoke(app, [str(a) for a in args])


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


def test_run_refuses_a_wrong_key_in_the_study_file(tmp_path):
    study_file = tmp_path / "bad.toml"
    study_file.write_text(demo_study_text().replace("hidden_units =", "hiden_units ="))
    result = invoke("run", study_file)
    assert result.exit_code == 1
    assert "space.hiden_units" in result.stderr and "space.hidden_units" in result.stderr
    assert not (tmp_path / "bad.sqlite").exists()


def test_demo_writes_its_market_and_study(tmp_path):
    study_file = write_demo(tmp_path)
    assert study_file.read_text() == (Path(__file__).parents[3] / "studies" / "demo.toml").read_text()
    assert (tmp_path / "data" / "harbor_index.csv").exists()


def test_run_exits_1_when_every_trial_of_the_run_failed(tmp_path):
    # a learning rate this large makes every network diverge before its first finite score: each trial
    # fails (with its error in the record), the run says so and exits 1, not 0
    (tmp_path / "data").mkdir()
    write_market_csv(tmp_path / "data", seed=3, n_days=700, instruments=["harbor_index"])
    text = set_keys(demo_study_text(), name='"diverge"', trials="2", workers="1", max_epochs="12",
                    file='"data/harbor_index.csv"', learning_rate="1e12", har_window="250")
    (tmp_path / "diverge.toml").write_text(text, encoding="utf-8")
    result = CliRunner().invoke(app, ["run", str(tmp_path / "diverge.toml"), "--no-board"])
    assert result.exit_code == 1, result.output
    assert "error: all 2 trials of this run failed" in result.stderr
    # each is recorded as diverged, with its curve up to the divergence and the hint to lower the rate
    with Tracker.open(tmp_path / "diverge.sqlite", create=False) as tracker:
        trials = tracker.load_trials("diverge", with_epochs=True)
    assert [(t.state, t.stop_reason) for t in trials] == [("failed", "diverged")] * 2
    assert all(t.epochs and "lower space.learning_rate" in t.error and "Traceback" not in t.error for t in trials)
    # a later run that finishes no new trial (the budget is reached) is not a failure
    again = CliRunner().invoke(app, ["run", str(tmp_path / "diverge.toml"), "--no-board"])
    assert again.exit_code == 0, again.output


def test_run_takes_a_date_like_study_seed(tmp_path):
    # the study file's checks accept any seed >= 0, and the engine uses every one of them
    (tmp_path / "data").mkdir()
    write_market_csv(tmp_path / "data", seed=3, n_days=700, instruments=["harbor_index"])
    text = set_keys(demo_study_text(), name='"dated"', seed="20240607", trials="2", workers="1",
                    max_epochs="10", file='"data/harbor_index.csv"', har_window="250")
    (tmp_path / "dated.toml").write_text(text, encoding="utf-8")
    result = CliRunner().invoke(app, ["run", str(tmp_path / "dated.toml"), "--no-board"])
    assert result.exit_code == 0, result.output
