"""Tests for sweep/board/data.py: the data step alone, records in and typed values out, nothing rendered.

Expected values are worked out by hand from the records in ``board_records.py`` (the ranking, markers,
counts, the epochs pruning saved); setting importance is checked against optuna's own
``get_param_importances`` on a study optuna ran itself (the reference library).
"""

from __future__ import annotations

import dataclasses
import math
from datetime import datetime, timedelta

import optuna
import pytest

from sweep.board import (
    BestBaseline,
    BestTrial,
    EpochCount,
    LearningCurve,
    MadeBy,
    ProgressPoint,
    TargetFacts,
    collect_board,
    saved_share,
)
from sweep.board.data import collect_curves, collect_epochs, collect_scatter, read_spec
from sweep.record import EpochRow, StudyNotFound, Tracker, TrialRecord, code_version, rank_rows
from sweep.search import IMPORTANCE_EVALUATOR, SettingImportance

from .board_records import (
    COMMAND,
    MAX_EPOCHS,
    NOW,
    SHA,
    SPEC_TEXT,
    TRIALS,
    curve,
    make_dataset,
    make_study,
    make_trial,
    write_record,
)

# ---------------------------------------------------------------------------------------- header


def test_collect_board_header_matches_the_records(data):
    h = data.header
    assert h.study == "larkspur"
    assert h.dataset.sha256_short == SHA[:12] and h.dataset.n_rows == 2520
    assert (h.dataset.first_date, h.dataset.last_date) == ("2014-01-02", "2023-12-29")
    assert h.dataset.n_dropped == 1
    # target from the spec text kept in the record; scale "log" is the spec default
    assert h.target == TargetFacts(estimator="parkinson", horizons=(1, 5), scale="log", task="regression")
    assert (h.objective, h.sampler, h.pruner) == ("qlike", "tpe", "median")
    assert h.counts == {"complete": 3, "pruned": 2, "failed": 1, "running": 0}
    # 4 + 3 + 1 + 2.5 + 0.5 + 1.5 seconds, worked by hand
    assert h.compute_seconds == pytest.approx(12.5)
    # trial 0 started 10:00:00, trial 5 finished 10:05:30
    assert h.wall_seconds == pytest.approx(330.0)
    assert (h.code_version, h.git_commit) == ("0.1.0", "0123456789abcdef")
    assert h.best_trial == BestTrial(trial=1, objective=0.20)
    assert h.best_baseline == BestBaseline(name="har", objective=0.30)
    assert h.n_beating == 2
    assert h.max_epochs == MAX_EPOCHS
    # settings the spec leaves out are fixed at their defaults (sweep/space.py SETTINGS)
    assert h.fixed == {"layers": 1, "patience": 20, "weight_decay": 0.0, "activation": "tanh"}
    assert h.spec_problem is None


def test_collect_board_header_says_how_the_search_ran(data):
    h = data.header
    # the spec's [search]: tpe with startup_trials 2, median pruner with warmup_epochs 3
    assert h.search_details == "2 random start trials; pruning after 2 trials and 3 warm-up epochs"
    # the space as the spec wrote it: a list is a choice, a table a range
    assert h.space == {"batch_size": [32, 64], "hidden_units": {"low": 4, "high": 32, "log": True},
                       "dropout": {"low": 0.0, "high": 0.5}, "learning_rate": {"low": 1e-4, "high": 1e-2, "log": True}}
    assert h.windows == {"train": 1500, "valid": 480, "test": 480}
    assert (h.dataset.source, h.dataset.sha256) == ("data/larkspur_index.csv", SHA)
    assert (h.created, h.direction, h.task) == ("2026-01-05T10:00:00+00:00", "minimize", "regression")
    # the first 12 characters of the commit and of the spec hash ("a1" * 32 in the record)
    assert (h.git_commit_short, h.spec_hash_short) == ("0123456789ab", "a1" * 6)
    assert (h.python, h.platform, h.n_trials) == ("3.11.7", "Linux-6.1-x86_64", 6)


def test_collect_board_header_keeps_the_dirty_mark_of_a_commit():
    t = Tracker.memory()
    t.save_study(dataclasses.replace(make_study(), git_commit="0123456789abcdef0123+dirty"), make_dataset())
    assert collect_board(t, "larkspur").header.git_commit_short == "0123456789ab+dirty"


def test_collect_board_made_by_names_the_command_version_and_time(tracker, data):
    assert data.made == MadeBy(command=COMMAND, version=code_version(), time=NOW)
    made = collect_board(tracker, "larkspur").made
    # without a command: the equivalent board command; without now: the current time in UTC
    assert made.command == "volsweep board <record> --study larkspur"
    moment = datetime.fromisoformat(made.time)
    assert moment.utcoffset() == timedelta(0)


# ---------------------------------------------------------------------------------------- ranking


def test_collect_board_ranks_trials_and_baselines_by_objective(data):
    # objectives by hand: 1 0.20, 3 0.25, har 0.30, 5 0.31, 0 0.35, ewma 0.40, 2 0.45, 4 none (last);
    # the garch baseline is on the test window and is not ranked
    assert [r["trial"] for r in data.rows] == [1, 3, "har", 5, 0, "ewma", 2, 4]
    assert [r["rank"] for r in data.rows] == list(range(1, 9))
    assert [r["marker"] for r in data.rows] == ["beats", "beats", "baseline", "behind", "behind", "baseline",
                                                "behind", "no objective"]
    assert [r["behind"] for r in data.rows] == [False, False, False, True, True, False, True, True]
    # the searched settings, in the order of sweep/space.py SETTINGS; fixed ones are not columns
    assert data.settings == ("batch_size", "hidden_units", "dropout", "learning_rate")
    assert data.setting_kinds == dict.fromkeys(data.settings, "num")
    row = data.rows[0]
    assert row["settings"] == [64, 16, 0.30, pytest.approx(2e-3)]
    assert (row["gap"], row["best_epoch"], row["epochs"], row["stop_reason"]) == (0.010, 10, 15, "patience")
    assert data.rows[2]["settings"] == [None] * 4


def test_collect_board_rows_are_the_cli_rows_plus_three_keys(tracker, data):
    # the rows the CLI prints as JSON (sweep.record.rank_rows), unchanged, with settings, behind and marker added
    cli = rank_rows(tracker.load_trials("larkspur"), tracker.load_baselines("larkspur", window="valid"),
                    sort="objective")
    assert [{k: r[k] for k in c} for r, c in zip(data.rows, cli)] == cli
    assert all(set(r) - set(c) == {"settings", "behind", "marker"} for r, c in zip(data.rows, cli))


def test_collect_board_maximize_ranks_highest_first():
    t = Tracker.memory()
    write_record(t, direction="maximize")
    data = collect_board(t, "larkspur")
    assert [r["trial"] for r in data.rows] == [2, "ewma", 0, 5, "har", 3, 1, 4]
    # best baseline is ewma (0.40): only trial 2 (0.45) beats it
    assert [r["marker"] for r in data.rows][:3] == ["beats", "baseline", "behind"]
    assert data.header.best_trial.trial == 0  # best complete trial (trial 2 was pruned)
    # the highest complete objective so far: trial 0's 0.35 stays best (1 and 3 are lower)
    assert [p.running_best for p in data.progress] == [0.35] * 6


def test_collect_board_without_a_readable_spec_infers_from_the_trials():
    t = Tracker.memory()
    write_record(t, spec_text="this is [not toml")
    data = collect_board(t, "larkspur")
    assert "could not be read" in data.header.spec_problem
    assert read_spec(t.find_study("larkspur"))[0] is None
    # columns are the params that vary across trials; max_epochs falls back to the longest trial
    # (batch_size is 64 in every trial of the fixture, so it is not a column here)
    assert data.settings == ("hidden_units", "dropout", "learning_rate")
    assert data.epochs.max_epochs == 20
    assert data.epochs.max_epochs_source.startswith("the longest trial")
    assert data.header.target is None and data.header.search_details == ""
    assert data.importance.reason is None and set(data.importance.values) <= set(data.settings)


def test_collect_board_unknown_study_names_the_studies(tracker):
    with pytest.raises(StudyNotFound, match="larkspur"):
        collect_board(tracker, "nope")


# ---------------------------------------------------------------------------------------- pictures


def test_collect_board_curves_only_for_the_best_complete_trials(tracker, monkeypatch):
    loaded = []
    original = tracker.load_trial
    monkeypatch.setattr(tracker, "load_trial", lambda study, n: loaded.append(n) or original(study, n))
    data = collect_board(tracker, "larkspur", n_curves=2)
    # complete trials by objective: 1 (0.20), 3 (0.25), 0 (0.35); only the first two are loaded
    assert loaded == [1, 3]
    assert [(c.trial, c.rank) for c in data.curves] == [(1, 1), (3, 2)]
    want = curve(15, 0.01)
    assert data.curves[0].epoch == tuple(range(1, 16))
    assert data.curves[0].train_loss == tuple(e.train_loss for e in want)
    assert data.curves[0].valid_loss == tuple(e.valid_loss for e in want)
    assert data.curves[0].best_epoch == 10


def test_collect_curves_draws_the_latest_fold():
    t = Tracker.memory()
    write_record(t, trials=[])
    folds = tuple(EpochRow(epoch=k, train_loss=1.0 / k, valid_loss=2.0 / k, fold=0) for k in (1, 2, 3)) + \
        tuple(EpochRow(epoch=k, train_loss=0.5 / k, valid_loss=0.9 / k, fold=1) for k in (1, 2))
    t.record_trial(dataclasses.replace(make_trial("larkspur", 0, "complete", 0.3, 5, 2, 8, 0.1, 0.01, 1.0),
                                       epochs=folds))
    rows = [{"kind": "trial", "state": "complete", "trial": 0, "objective": 0.3, "best_epoch": 2}]
    # fold 1 is the latest: its two epochs only
    assert collect_curves(t, "larkspur", rows) == (LearningCurve(
        trial=0, rank=1, objective=0.3, best_epoch=2, epoch=(1, 2), train_loss=(0.5, 0.25), valid_loss=(0.9, 0.45)),)


def test_collect_board_progress_keeps_the_best_complete_objective_so_far(data):
    assert [(p.trial, p.running_best) for p in data.progress] == [
        (0, 0.35), (1, 0.20), (2, 0.20), (3, 0.20), (4, 0.20), (5, 0.20)]
    # trial 4 failed: no objective, the best so far is carried
    assert data.progress[4] == ProgressPoint(trial=4, state="failed", objective=None, running_best=0.20)


def test_collect_board_scatter_holds_gap_and_settings_of_complete_trials(data):
    points = data.scatter["hidden_units"].points
    assert [(p.trial, p.x, p.gap) for p in points] == [(0, 8, 0.020), (1, 16, 0.010), (3, 32, 0.015)]
    assert [p.x for p in data.scatter["dropout"].points] == [0.10, 0.30, 0.45]
    assert data.scatter["dropout"].reason is None
    # gap ratio = valid / train loss of the record: trial 1 has train 0.11, valid 0.12
    assert points[1].gap_ratio == pytest.approx(0.12 / 0.11) and points[1].objective == 0.20


def test_collect_scatter_says_why_a_picture_is_empty(tracker):
    trials = tracker.load_trials("larkspur")
    # activation is "tanh" in every trial: no number to draw against
    assert collect_scatter(trials, names=("activation",))["activation"].reason == \
        "the trials' settings hold no numeric activation"
    pruned = [t for t in trials if t.state != "complete"]
    assert collect_scatter(pruned)["dropout"].reason == "no complete trial with an overfit gap yet"
    assert collect_scatter(pruned)["dropout"].points == ()


# ---------------------------------------------------------------------------------------- epochs


def test_collect_board_epochs_of_every_trial_in_number_order(data):
    # (number, state, epochs run) of TRIALS in board_records.py
    assert data.epochs.trials == tuple(EpochCount(trial=n, state=s, epochs=e) for n, s, _, e, *_ in TRIALS)
    assert (data.epochs.max_epochs, data.epochs.n_pruned) == (20, 2)
    assert data.epochs.max_epochs_source == "training.max_epochs of the study file"


def test_saved_share_worked_number(data):
    # max_epochs 20; pruned trials ran 4 and 6 epochs: saved = 16 + 14 = 30;
    # run = 20 + 15 + 4 + 12 + 0 + 6 = 57; share = 30 / (30 + 57)
    assert (data.epochs.n_saved, data.epochs.n_run) == (30, 57)
    assert data.epochs.saved_share == pytest.approx(30 / 87)
    assert saved_share(10, [EpochCount(trial=0, state="complete", epochs=0)]) == (0, 0, None)
    # a pruned trial never "saves" a negative number of epochs
    assert saved_share(5, [EpochCount(trial=0, state="pruned", epochs=7)]) == (0, 7, 0.0)


def test_collect_epochs_with_folds_counts_every_fold(tracker):
    spec = read_spec(make_study(spec_text=SPEC_TEXT + "\n[split]\nfolds = 3\n"))[0]
    epochs = collect_epochs(tracker.load_trials("larkspur"), spec)
    # max_epochs 20 per fold, 3 folds: 60; saved = (60 - 4) + (60 - 6) = 110; run = 57 as before
    assert (epochs.max_epochs, epochs.n_saved, epochs.n_run) == (60, 110, 57)
    assert epochs.saved_share == pytest.approx(110 / 167)
    assert epochs.max_epochs_source == "training.max_epochs times split.folds of the study file"


# ---------------------------------------------------------------------------------------- importance


def test_collect_importance_matches_optuna_on_the_same_trials():
    # Reference: optuna's get_param_importances (PedAnova by default) on a study optuna ran itself
    # with the same distributions as the spec's space.
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    reference = optuna.create_study(sampler=optuna.samplers.RandomSampler(seed=0))

    def objective(trial):
        hidden = trial.suggest_int("hidden_units", 4, 32, log=True)
        dropout = trial.suggest_float("dropout", 0.0, 0.5)
        trial.suggest_categorical("batch_size", [32, 64])
        trial.suggest_float("learning_rate", 1e-4, 1e-2, log=True)
        return (math.log(hidden) - math.log(12)) ** 2 + 0.001 * dropout

    reference.optimize(objective, n_trials=40)
    want = optuna.importance.get_param_importances(reference)
    tracker = Tracker.memory()
    tracker.save_study(make_study(), make_dataset())
    for t in reference.trials:
        tracker.record_trial(TrialRecord(
            study="larkspur", number=t.number, state="complete", objective=t.value, n_epochs=5, best_epoch=5,
            params={**t.params, "layers": 1, "patience": 20, "weight_decay": 0.0, "activation": "tanh"}))
    got = collect_board(tracker, "larkspur").importance
    assert isinstance(got, SettingImportance) and got.evaluator == IMPORTANCE_EVALUATOR
    assert got.reason is None and got.n_trials == 40
    assert got.values == pytest.approx(want, rel=1e-9)
    # largest first, as optuna orders them
    assert list(got.values) == list(want)
    # the objective depends (almost) only on hidden_units
    assert max(got.values, key=got.values.get) == "hidden_units"


def test_collect_importance_says_why_it_is_absent():
    one = Tracker.memory()
    write_record(one, trials=[(0, "complete", 0.3, 5, 5, 8, 0.1, 0.01, 1.0)])
    absent = collect_board(one, "larkspur").importance
    assert "at least 2 complete trials" in absent.reason
    assert (absent.values, absent.n_trials) == ({}, 1)
    same = Tracker.memory()
    write_record(same, trials=[(0, "complete", 0.3, 5, 5, 8, 0.1, 0.01, 1.0), (1, "complete", 0.4, 5, 5, 8, 0.1, 0.01, 1.0)])
    # learning_rate differs per trial in the fixture: 1e-3 * (1 + number)
    assert collect_board(same, "larkspur").importance.values.keys() == {"learning_rate"}
