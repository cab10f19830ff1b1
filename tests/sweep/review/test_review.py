"""Tests for sweep/review.py: replay, confirm, holdout, notes and diff, on one tiny recorded study.

Outside references: the training loop run directly (``trainers.fit.fit_mlp``, not through the review
code) for replay and confirm; Patton (2011) QLIKE written out by hand and numpy for the holdout losses;
Python's ``statistics`` module for the confirmation summary; Spearman's rank formula
``1 - 6 sum d^2 / (n (n^2 - 1))`` (untied ranks) for the ranking check; SQLite edited directly to
tamper with a record.
"""

import json
import statistics

import numpy as np
import pytest
from typer.testing import CliRunner

from review_study import STUDY, copy_record, review_study
from sweep import review
from sweep.review import confirm
from sweep.cli import app
from sweep.search import inputs_from_record
from sweep.errors import ReviewError
from sweep.review import NETWORK_RETRAINED, NETWORK_STORED
from sweep.search import params_to_configs
from sweep.record import Tracker, TrialNotFound
from trainers.fit import fit_mlp
from trainers.mlp import Network


@pytest.fixture(scope="module")
def record(tmp_path_factory):
    return review_study(tmp_path_factory)


@pytest.fixture
def tracker(record):
    with Tracker.open(record, create=False) as t:
        yield t


@pytest.fixture
def writable(record, tmp_path):
    """A private copy of the record, for tests that add to it."""
    with Tracker.open(copy_record(record, tmp_path), create=False) as t:
        yield t


def _trials(tracker, state):
    return [t for t in tracker.load_trials(STUDY, with_epochs=True) if t.state == state]


def _fit_alone(tracker, trial, seed):
    """The trial's settings trained by the training loop directly, outside the review code."""
    study = tracker.find_study(STUDY)
    spec, inputs = inputs_from_record(tracker, study)
    mlp, train = params_to_configs(trial.params, n_inputs=inputs.n_inputs, n_outputs=inputs.n_outputs,
                                   task=inputs.task, training=spec.training)
    return fit_mlp(mlp, train, inputs.X["train"], inputs.y["train"], inputs.X["valid"], inputs.y["valid"],
                   rng=np.random.default_rng(seed), valid_score=inputs.scorer("valid"))


# ----------------------------------------------------------------------------------------- replay


def test_replay_trial_reproduces_the_recorded_history_bit_for_bit(tracker):
    trial = _trials(tracker, "complete")[0]
    report = review.replay_trial(tracker, trial.number)
    # same machine, same packages: every recorded loss and score comes back exactly
    assert report["identical"] is True
    assert report["max_abs_diff"] == 0.0
    assert report["n_epochs_replayed"] == report["n_epochs_recorded"] == trial.n_epochs
    assert report["forecasts_max_abs_diff"] == 0.0 and report["weights_max_abs_diff"] == 0.0
    # (git commit is left out: other commits may land between building the study and this check)
    assert [d for d in report["environment"]["differences"] if d["name"] != "git commit"] == []
    assert report["source_changed"] is False
    # independent of the replay code: the training loop run directly gives the recorded curve
    alone = _fit_alone(tracker, trial, trial.seed)
    recorded = np.array([[e.train_loss, e.valid_loss, e.valid_score] for e in trial.epochs])
    direct = np.array([[e.train_loss, e.valid_loss, e.valid_score] for e in alone.history])
    np.testing.assert_array_equal(recorded, direct)


def test_replay_trial_stops_a_pruned_trial_at_its_recorded_epoch(tracker):
    pruned = _trials(tracker, "pruned")
    assert pruned, "the shared study should hold a pruned trial"
    trial = pruned[0]
    report = review.replay_trial(tracker, trial.number)
    # the pruned trial ran fewer epochs than max_epochs; the replay stops at the same epoch
    assert trial.n_epochs < 8
    assert report["n_epochs_replayed"] == trial.n_epochs
    assert report["identical"] is True


def test_replay_trial_names_differences_and_changed_versions(writable, tmp_path):
    trial = _trials(writable, "complete")[0]
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
    assert report["identical"] is False
    assert report["max_abs_diff"] == pytest.approx(0.125, abs=1e-12)
    assert [e["epoch"] for e in report["epochs"] if e["max_abs_diff"] > 0] == [3]
    assert {"name": "numpy", "recorded": "0.0.1", "current": np.__version__} in report["environment"]["differences"]
    assert "numpy 0.0.1 -> " in report["message"]
    db.execute("DELETE FROM vs_epochs WHERE study = ? AND number = ? AND epoch > 5", [STUDY, trial.number])
    db.execute("UPDATE vs_trials SET n_epochs = 5 WHERE study = ? AND number = ?", [STUDY, trial.number])
    db.execute("UPDATE vs_epochs SET valid_loss = valid_loss + 0.25 WHERE study = ? AND number = ? AND epoch = 5",
               [STUDY, trial.number])
    short = review.replay_trial(writable, trial.number)
    # a record that stops earlier: the replay stops there too (the loop ends at the recorded epoch count)
    assert short["n_epochs_replayed"] == 5 and short["max_abs_diff"] == pytest.approx(0.25, abs=1e-12)
    # the file at the recorded source has another SHA-256 now
    assert report["source_changed"] is True
    db.execute("UPDATE vs_datasets SET source = ?", [str(tmp_path / "gone.csv")])
    assert review.replay_trial(writable, trial.number)["source_changed"] is None


def test_replay_trial_says_when_the_epoch_counts_differ(writable):
    trial = _trials(writable, "complete")[0]
    assert trial.n_epochs == 8  # max_epochs: training cannot run a ninth epoch
    writable.db.execute("INSERT INTO vs_epochs (study, number, epoch, train_loss, valid_loss, valid_score, seconds) "
                        "VALUES (?, ?, 9, 0.5, 0.5, 0.5, 0.0)", [STUDY, trial.number])
    writable.db.execute("UPDATE vs_trials SET n_epochs = 9 WHERE study = ? AND number = ?", [STUDY, trial.number])
    report = review.replay_trial(writable, trial.number)
    # the eight epochs both have agree; the ninth exists only in the record
    assert report["identical"] is False and report["max_abs_diff"] == 0.0
    assert report["epochs"][-1] == {"epoch": 9, "train_loss": None, "valid_loss": None, "valid_score": None,
                                    "max_abs_diff": None, "missing": "replayed"}
    assert "the replay stopped after 8 epochs, the record after 9" in report["message"]


def test_replay_trial_unknown_trial_raises(tracker):
    with pytest.raises(TrialNotFound, match="no trial 99"):
        review.replay_trial(tracker, 99)


# ----------------------------------------------------------------------------------------- confirm


def test_confirm_seeds_differ_from_the_trial_seed():
    seeds = review.confirm_seeds(11, 4, 3)
    assert seeds == [[11, 4, 1000], [11, 4, 1001], [11, 4, 1002]]
    # a trial's own seed is [study_seed, number]; numpy's SeedSequence gives another stream for it
    own = np.random.default_rng([11, 4]).random(4)
    assert not any(np.array_equal(own, np.random.default_rng(s).random(4)) for s in seeds)


def test_confirm_trials_stacked_runs_equal_single_runs(writable):
    report = review.confirm_trials(writable, top=2, n_seeds=2)
    records = writable.load_confirmations(STUDY)
    assert [r.trial for r in records] == [t["trial"] for t in report["trials"]]
    complete = sorted(_trials(writable, "complete"), key=lambda t: t.objective)
    assert [r.trial for r in records] == [t.number for t in complete[:2]]
    for rec, trial in zip(records, complete):
        for seed, objective, gap in zip(rec.seeds, rec.objectives, rec.gaps):
            alone = _fit_alone(writable, trial, seed)
            # the contract of fit_mlp_stacked: equal to fit_mlp on one seed within 1e-12 (float64)
            assert objective == pytest.approx(alone.valid_score, abs=1e-12)
            assert gap == pytest.approx(alone.gap, abs=1e-12)
        summary = rec.summary["objective"]
        # mean and sample standard deviation as Python's statistics module computes them
        assert summary["mean"] == pytest.approx(statistics.fmean(rec.objectives), rel=1e-12)
        assert summary["std"] == pytest.approx(statistics.stdev(rec.objectives), rel=1e-9)
        assert summary["min"] == min(rec.objectives) and summary["max"] == max(rec.objectives)
        assert rec.extra["ranking"] == report["ranking"]


def test_ranking_counts_the_leader_and_rank_correlation():
    per_seed = np.array([[1.0, 2.0, 3.0], [2.0, 1.0, 4.0], [3.0, 3.0, 0.5]])
    result = confirm._ranking([7, 8, 9], [0.1, 0.2, 0.3], per_seed)
    # trial 7 is lowest on seed 0 only
    assert result["leader_first"] == 1 and result["leader_first_share"] == pytest.approx(1 / 3)
    # means 2.0, 2.333, 2.167 -> order 7, 9, 8; ranks (1,2,3) vs (1,3,2): 1 - 6*2/(3*8) = 0.5 (Spearman)
    assert result["order_by_mean"] == [7, 9, 8]
    assert result["spearman"] == pytest.approx(0.5)


def test_confirm_trials_rejects_bad_counts(tracker):
    with pytest.raises(ValueError, match="top and seeds must be at least 1"):
        review.confirm_trials(tracker, top=0)


# ----------------------------------------------------------------------------------------- holdout


def _qlike(y, f):
    """Patton (2011): mean of y/f - log(y/f) - 1 over every entry."""
    ratio = y / f
    return float(np.mean(ratio - np.log(ratio) - 1.0))


def test_holdout_trial_scores_the_trial_and_baselines(writable):
    best = min(_trials(writable, "complete"), key=lambda t: t.objective)
    report = review.holdout_trial(writable, best.number, command="test")
    assert report["sequence"] == 1 and report["again"] is False and report["network"] == NETWORK_STORED
    # outside the review code: the stored weights, the test inputs and QLIKE written out
    _, inputs = inputs_from_record(writable, writable.find_study(STUDY))
    network = Network.from_arrays(writable.load_weights(STUDY, best.number))
    forecasts = inputs.to_level(network.predict(inputs.X["test"]))
    results = report["results"]
    assert results[f"trial {best.number}"]["qlike"] == pytest.approx(_qlike(inputs.truth["test"], forecasts), rel=1e-12)
    assert set(results[f"trial {best.number}"]) == {"qlike", "mse_log", "mse", "mae", "mz_r2"}
    # every baseline is scored too, and matches the test-window losses recorded when the study began
    recorded = {b.name: b.losses for b in writable.load_baselines(STUDY, "test")}
    assert set(results) == {f"trial {best.number}", *recorded}
    for name, losses in recorded.items():
        assert results[name] == pytest.approx(losses, rel=1e-12)


def test_holdout_guard_refuses_a_second_look_unless_again(writable):
    first, second = sorted(_trials(writable, "complete"), key=lambda t: t.objective)[:2]
    made = review.holdout_trial(writable, first.number)
    with pytest.raises(review.HoldoutAlreadyUsed, match=rf"already used on {made['created'][:10]} for trial "
                                                        rf"{first.number}; --again records a repeat") as info:
        review.holdout_trial(writable, second.number)
    # the refusal carries the first result and writes nothing
    assert [h["sequence"] for h in info.value.previous] == [1]
    assert len(writable.load_holdouts(STUDY)) == 1
    repeat = review.holdout_trial(writable, second.number, again=True)
    holdouts = writable.load_holdouts(STUDY)
    # both looks are kept, the second marked as a repeat
    assert [(h.sequence, h.trial, h.again) for h in holdouts] == [(1, first.number, False), (2, second.number, True)]
    assert repeat["previous"][0]["trial"] == first.number


def test_holdout_trial_retrains_when_weights_are_missing(writable):
    best = min(_trials(writable, "complete"), key=lambda t: t.objective)
    with_weights = review.holdout_trial(writable, best.number)
    writable.db.execute("DELETE FROM vs_weights WHERE study = ? AND number = ?", [STUDY, best.number])
    again = review.holdout_trial(writable, best.number, again=True)
    assert again["network"] == NETWORK_RETRAINED
    # same machine: the retrained network scores exactly as the stored one
    key = f"trial {best.number}"
    assert again["results"][key] == pytest.approx(with_weights["results"][key], rel=1e-12)


def test_holdout_trial_refuses_a_pruned_trial(writable):
    pruned = _trials(writable, "pruned")[0]
    with pytest.raises(ReviewError, match=f"trial {pruned.number} of study '{STUDY}' is pruned"):
        review.holdout_trial(writable, pruned.number)
    assert writable.load_holdouts(STUDY) == []


# ----------------------------------------------------------------------------------------- notes and diff


def test_notes_are_dated_and_kept(writable):
    n = _trials(writable, "complete")[0].number
    review.add_decision_note(writable, n, "first pick", author="mira")
    review.add_decision_note(writable, n, "kept after confirm")
    notes = review.list_notes(writable)
    assert [(x["trial"], x["text"], x["author"]) for x in notes] == [(n, "first pick", "mira"),
                                                                    (n, "kept after confirm", None)]
    assert all(x["created"][:2] == "20" for x in notes)


def test_diff_studies_lists_settings_windows_and_best(writable):
    study = writable.find_study(STUDY)
    text = study.spec_text.replace("max_epochs = 8", "max_epochs = 6").replace("valid = 0.25", "valid = 0.3")
    other = study.__class__(**{**study.__dict__, "name": "review-other", "spec_text": text, "spec_hash": "other"})
    writable.save_study(other, writable.load_dataset(study.dataset_sha256))
    report = review.diff_studies(writable, STUDY, "review-other")
    # the two edits made to the text above, and nothing else
    assert report["spec"] == ["split.valid: 0.25 -> 0.3", "training.max_epochs: 8 -> 6"]
    assert report["same_data"] is True
    # a larger validation share moves the train/valid boundary; the test window (last 20 %) stays
    assert [line.split(":")[0] for line in report["windows"]] == ["train", "valid"]
    assert "review-other: no complete trial" in report["best"]
    assert report["a"]["best_objective"] == min(t.objective for t in _trials(writable, "complete"))


# ----------------------------------------------------------------------------------------- CLI


def test_cli_replay_prints_and_writes_json(record):
    runner = CliRunner()
    res = runner.invoke(app, ["replay", str(record), "1"])
    assert res.exit_code == 0, res.output
    assert "replays identically" in res.output
    res = runner.invoke(app, ["replay", str(record), "1", "--json"])
    data = json.loads(res.stdout)
    assert data["identical"] is True and data["max_abs_diff"] == 0.0 and data["source_changed"] is False


def test_cli_holdout_second_call_is_refused_until_again(record, tmp_path):
    db = str(copy_record(record, tmp_path))
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
    res = runner.invoke(app, ["holdout", db, "0", "--again", "--json"])
    assert res.exit_code == 0, res.output
    assert json.loads(res.stdout)["sequence"] == 2
    with Tracker.open(db, create=False) as t:
        assert [(h.trial, h.again, h.command.endswith("--again")) for h in t.load_holdouts(STUDY)] == [
            (1, False, False), (0, True, True)]


def test_cli_confirm_note_notes_and_diff(record, tmp_path):
    db = str(copy_record(record, tmp_path))
    runner = CliRunner()
    res = runner.invoke(app, ["confirm", db, "--top", "2", "--seeds", "2", "--json"])
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    assert len(data["trials"]) == 2 and data["ranking"]["n_seeds"] == 2
    res = runner.invoke(app, ["confirm", db, "--top", "1", "--seeds", "2"])
    assert res.exit_code == 0 and "[study_seed, trial_number, 1000 + k]" in res.output
    res = runner.invoke(app, ["note", db, "1", "chosen: [best] on valid", "--author", "mira"])
    assert res.exit_code == 0, res.output
    res = runner.invoke(app, ["notes", db, "--json"])
    assert json.loads(res.stdout)[0]["text"] == "chosen: [best] on valid"
    res = runner.invoke(app, ["diff", db, STUDY, STUDY])
    assert res.exit_code == 0 and "settings: same" in res.output and "same data" in res.output


@pytest.mark.parametrize("args, words", [
    (["replay", "{db}", "42"], "no trial 42"),
    (["note", "{db}", "42", "text"], "no trial 42"),
    (["diff", "{db}", STUDY, "nope"], "no study named 'nope'"),
])
def test_cli_review_errors_are_one_line(record, args, words):
    res = CliRunner().invoke(app, [a.format(db=record) for a in args])
    assert res.exit_code == 1
    assert words in " ".join(res.stderr.split()) and "Traceback" not in res.output
