"""Tests for sweep/review/holdout.py: one trial and the baselines scored on the test window, once.

Outside references: Patton (2011) QLIKE written out by hand on the stored weights' forecasts (numpy);
the baselines' test-window losses recorded when the study began (not by this module).
"""

import json

import numpy as np
import pytest
from typer.testing import CliRunner

from review_study import STUDY, trials_in_state
from sweep import review
from sweep.cli import app
from sweep.errors import ReviewError
from sweep.record import Tracker
from sweep.review import NETWORK_RETRAINED, NETWORK_STORED
from sweep.search import inputs_from_record
from trainers.mlp import Network

# the keys `volsweep holdout --json` printed before the results were typed (captured from that version)
HOLDOUT_KEYS = ["study", "trial", "sequence", "created", "again", "network", "objective", "results", "order",
                "window", "previous"]
LOOK_KEYS = ["sequence", "trial", "created", "again", "command", "results"]


def _qlike(y, f):
    """Patton (2011): mean of y/f - log(y/f) - 1 over every entry."""
    ratio = y / f
    return float(np.mean(ratio - np.log(ratio) - 1.0))


def test_holdout_trial_scores_the_trial_and_baselines(writable):
    best = min(trials_in_state(writable, "complete"), key=lambda t: t.objective)
    report = review.holdout_trial(writable, best.number, command="test")
    assert report.sequence == 1 and report.again is False and report.network == NETWORK_STORED
    # outside the review code: the stored weights, the test inputs and QLIKE written out
    _, inputs = inputs_from_record(writable, writable.find_study(STUDY))
    network = Network.from_arrays(writable.load_weights(STUDY, best.number))
    forecasts = inputs.to_level(network.predict(inputs.X["test"]))
    results = report.results
    assert results[f"trial {best.number}"]["qlike"] == pytest.approx(_qlike(inputs.truth["test"], forecasts), rel=1e-12)
    assert set(results[f"trial {best.number}"]) == {"qlike", "mse_log", "mse", "mae", "mz_r2"}
    # every baseline is scored too, and matches the test-window losses recorded when the study began
    recorded = {b.name: b.losses for b in writable.load_baselines(STUDY, "test")}
    assert set(results) == {f"trial {best.number}", *recorded}
    for name, losses in recorded.items():
        assert results[name] == pytest.approx(losses, rel=1e-12)
    # the window is the test rows the study's arrays hold
    dates = inputs.dates("test")
    assert (report.window.rows, report.window.first, report.window.last) == (
        len(dates), dates[0].strftime("%Y-%m-%d"), dates[-1].strftime("%Y-%m-%d"))
    # ranked by the study's objective, lowest first
    assert list(report.order) == sorted(results, key=lambda k: results[k]["qlike"])


def test_holdout_guard_refuses_a_second_look_unless_again(writable):
    first, second = sorted(trials_in_state(writable, "complete"), key=lambda t: t.objective)[:2]
    made = review.holdout_trial(writable, first.number)
    with pytest.raises(review.HoldoutAlreadyUsed, match=rf"already used on {made.created[:10]} for trial "
                                                        rf"{first.number}; --again records a repeat") as info:
        review.holdout_trial(writable, second.number)
    # the refusal carries the first result and writes nothing
    assert [h.sequence for h in info.value.previous] == [1]
    assert len(writable.load_holdouts(STUDY)) == 1
    repeat = review.holdout_trial(writable, second.number, again=True)
    holdouts = writable.load_holdouts(STUDY)
    # both looks are kept, the second marked as a repeat
    assert [(h.sequence, h.trial, h.again) for h in holdouts] == [(1, first.number, False), (2, second.number, True)]
    assert repeat.previous[0].trial == first.number


def test_holdout_trial_retrains_when_weights_are_missing(writable):
    best = min(trials_in_state(writable, "complete"), key=lambda t: t.objective)
    with_weights = review.holdout_trial(writable, best.number)
    writable.db.execute("DELETE FROM vs_weights WHERE study = ? AND number = ?", [STUDY, best.number])
    again = review.holdout_trial(writable, best.number, again=True)
    assert again.network == NETWORK_RETRAINED
    # same machine: the retrained network scores exactly as the stored one
    key = f"trial {best.number}"
    assert again.results[key] == pytest.approx(with_weights.results[key], rel=1e-12)


def test_holdout_trial_refuses_a_pruned_trial(writable):
    pruned = trials_in_state(writable, "pruned")[0]
    with pytest.raises(ReviewError, match=f"trial {pruned.number} of study '{STUDY}' is pruned"):
        review.holdout_trial(writable, pruned.number)
    assert writable.load_holdouts(STUDY) == []


def test_holdout_report_to_dict_keeps_the_printed_json_shape(writable):
    review.holdout_trial(writable, 1)
    report = review.holdout_trial(writable, 0, again=True)
    data = report.to_dict()
    assert list(data) == HOLDOUT_KEYS
    assert list(data["window"]) == ["rows", "first", "last"]
    assert [list(h) for h in data["previous"]] == [LOOK_KEYS]
    # the earlier look is the one the record holds
    first = writable.load_holdouts(STUDY)[0]
    assert data["previous"][0] == {"sequence": first.sequence, "trial": first.trial, "created": first.created,
                                   "again": first.again, "command": first.command, "results": first.results}
    assert json.loads(json.dumps(data)) == data


def test_cli_holdout_second_call_is_refused_until_again(writable_record):
    db = str(writable_record)
    runner = CliRunner()
    res = runner.invoke(app, ["holdout", db, "1"])
    assert res.exit_code == 0, res.output
    assert "holdout #1" in res.output and "stored weights" in res.output
    res = runner.invoke(app, ["holdout", db, "0"])
    # refused: exit 1, the first result shown, one error saying when and for which trial
    assert res.exit_code == 1
    assert "holdout #1 on" in res.stdout
    error = " ".join(res.stderr.split())  # the console wraps long lines at its width
    assert error.startswith("error: ") and "already used on" in error and "for trial 1;" in error
    assert "--again records a repeat" in error
    res = runner.invoke(app, ["holdout", db, "0", "--json"])
    # refused with --json: the earlier look as JSON
    assert res.exit_code == 1
    refused = json.loads(res.stdout)
    assert refused["refused"] is True and [h["trial"] for h in refused["previous"]] == [1]
    res = runner.invoke(app, ["holdout", db, "0", "--again", "--json"])
    assert res.exit_code == 0, res.output
    assert json.loads(res.stdout)["sequence"] == 2
    with Tracker.open(db, create=False) as t:
        assert [(h.trial, h.again, h.command.endswith("--again")) for h in t.load_holdouts(STUDY)] == [
            (1, False, False), (0, True, True)]
