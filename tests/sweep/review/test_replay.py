"""Tests for sweep/review/replay.py: a trial retrained from the record, compared epoch by epoch.

Outside references: the training loop run directly (``trainers.fit.fit_mlp``, not through the review
code) gives the recorded curve; SQLite edited directly to tamper with a record; numpy's own
``__version__`` for the changed-package line.
"""

import json

import numpy as np
import pytest
from typer.testing import CliRunner

from review_study import STUDY, fit_alone, trials_in_state
from sweep import review
from sweep.cli import app
from sweep.cli.app import clean_json
from sweep.record import TrialNotFound

# the keys `volsweep replay --json` printed before the results were typed (captured from that version)
REPLAY_KEYS = ["study", "trial", "state", "identical", "max_abs_diff", "n_epochs_recorded", "n_epochs_replayed",
               "best_epoch_recorded", "best_epoch_replayed", "objective_recorded", "objective_replayed",
               "forecasts_max_abs_diff", "weights_max_abs_diff", "epochs", "environment", "source",
               "source_changed", "message"]


def test_replay_trial_reproduces_the_recorded_history_bit_for_bit(tracker):
    trial = trials_in_state(tracker, "complete")[0]
    report = review.replay_trial(tracker, trial.number)
    # same machine, same packages: every recorded loss and score comes back exactly
    assert report.identical is True
    assert report.max_abs_diff == 0.0
    assert report.n_epochs_replayed == report.n_epochs_recorded == trial.n_epochs
    assert report.forecasts_max_abs_diff == 0.0 and report.weights_max_abs_diff == 0.0
    # (git commit is left out: other commits may land between building the study and this check)
    assert [d for d in report.environment.differences if d.name != "git commit"] == []
    assert report.source_changed is False
    # independent of the replay code: the training loop run directly gives the recorded curve
    alone = fit_alone(tracker, trial, trial.seed)
    recorded = np.array([[e.train_loss, e.valid_loss, e.valid_score] for e in trial.epochs])
    direct = np.array([[e.train_loss, e.valid_loss, e.valid_score] for e in alone.history])
    np.testing.assert_array_equal(recorded, direct)


def test_replay_trial_stops_a_pruned_trial_at_its_recorded_epoch(tracker):
    pruned = trials_in_state(tracker, "pruned")
    assert pruned, "the shared study should hold a pruned trial"
    trial = pruned[0]
    report = review.replay_trial(tracker, trial.number)
    # the pruned trial ran fewer epochs than max_epochs; the replay stops at the same epoch
    assert trial.n_epochs < 8
    assert report.n_epochs_replayed == trial.n_epochs
    assert report.identical is True


def test_replay_trial_names_differences_and_changed_versions(writable, tmp_path):
    trial = trials_in_state(writable, "complete")[0]
    study = writable.find_study(STUDY)
    db = writable.db
    db.execute("UPDATE vs_epochs SET valid_loss = valid_loss + 0.125 WHERE study = ? AND number = ? AND epoch = 3",
               [STUDY, trial.number])
    packages = dict(study.packages, numpy="0.0.1")
    db.execute("UPDATE vs_studies SET packages = ? WHERE name = ?", [json.dumps(packages), STUDY])
    changed = tmp_path / "prices.csv"
    changed.write_text("date,open,high,low,close\n", encoding="utf-8")
    db.execute("UPDATE vs_datasets SET source = ?", [str(changed)])
    report = review.replay_trial(writable, trial.number)
    # the tampered epoch shows a difference of 0.125 there and nowhere else
    assert report.identical is False
    assert report.max_abs_diff == pytest.approx(0.125, abs=1e-12)
    assert [e.epoch for e in report.epochs if e.max_abs_diff > 0] == [3]
    assert review.EnvironmentDifference("numpy", "0.0.1", np.__version__) in report.environment.differences
    assert "numpy 0.0.1 -> " in report.message
    db.execute("DELETE FROM vs_epochs WHERE study = ? AND number = ? AND epoch > 5", [STUDY, trial.number])
    db.execute("UPDATE vs_trials SET n_epochs = 5 WHERE study = ? AND number = ?", [STUDY, trial.number])
    db.execute("UPDATE vs_epochs SET valid_loss = valid_loss + 0.25 WHERE study = ? AND number = ? AND epoch = 5",
               [STUDY, trial.number])
    short = review.replay_trial(writable, trial.number)
    # a record that stops earlier: the replay stops there too (the loop ends at the recorded epoch count)
    assert short.n_epochs_replayed == 5 and short.max_abs_diff == pytest.approx(0.25, abs=1e-12)
    # the file at the recorded source has another SHA-256 now
    assert report.source_changed is True
    db.execute("UPDATE vs_datasets SET source = ?", [str(tmp_path / "gone.csv")])
    assert review.replay_trial(writable, trial.number).source_changed is None


def test_replay_trial_says_when_the_epoch_counts_differ(writable):
    trial = trials_in_state(writable, "complete")[0]
    assert trial.n_epochs == 8  # max_epochs: training cannot run a ninth epoch
    writable.db.execute("INSERT INTO vs_epochs (study, number, epoch, train_loss, valid_loss, valid_score, seconds) "
                        "VALUES (?, ?, 9, 0.5, 0.5, 0.5, 0.0)", [STUDY, trial.number])
    writable.db.execute("UPDATE vs_trials SET n_epochs = 9 WHERE study = ? AND number = ?", [STUDY, trial.number])
    report = review.replay_trial(writable, trial.number)
    # the eight epochs both have agree; the ninth exists only in the record
    assert report.identical is False and report.max_abs_diff == 0.0
    assert report.epochs[-1].to_dict() == {"epoch": 9, "train_loss": None, "valid_loss": None, "valid_score": None,
                                           "max_abs_diff": None, "missing": "replayed"}
    assert "the replay stopped after 8 epochs, the record after 9" in report.message


def test_replay_trial_unknown_trial_raises(tracker):
    with pytest.raises(TrialNotFound, match="no trial 99"):
        review.replay_trial(tracker, 99)


def test_replay_report_to_dict_keeps_the_printed_json_shape(tracker):
    report = review.replay_trial(tracker, 1).to_dict()
    assert list(report) == REPLAY_KEYS
    assert list(report["environment"]) == ["same", "differences"]
    assert list(report["source"]) == ["path", "exists", "changed"]
    # an epoch both sides have carries no "missing" key
    assert list(report["epochs"][0]) == ["epoch", "train_loss", "valid_loss", "valid_score", "max_abs_diff"]
    # plain JSON values: the report survives a round trip through the json module unchanged
    assert json.loads(json.dumps(report)) == report


def test_cli_replay_prints_and_writes_json(review_record, tracker):
    runner = CliRunner()
    res = runner.invoke(app, ["replay", str(review_record), "1"])
    assert res.exit_code == 0, res.output
    assert "replays identically" in res.output
    res = runner.invoke(app, ["replay", str(review_record), "1", "--json"])
    data = json.loads(res.stdout)
    assert data["identical"] is True and data["max_abs_diff"] == 0.0 and data["source_changed"] is False
    # the command prints the function's report as it is
    assert data == clean_json(review.replay_trial(tracker, 1).to_dict())


def test_cli_replay_unknown_trial_is_one_line(review_record):
    res = CliRunner().invoke(app, ["replay", str(review_record), "42"])
    assert res.exit_code == 1
    assert "no trial 42" in " ".join(res.stderr.split()) and "Traceback" not in res.output
