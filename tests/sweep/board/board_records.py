"""Records for the board tests, written with the Tracker directly (no engine run needed).

The study is invented (the "Larkspur" index of an invented market); numbers are chosen by hand
so the expected ranking, markers and epoch counts can be worked out on paper.
"""

from __future__ import annotations

from datetime import datetime, timedelta, timezone

import numpy as np

from sweep.record import (
    BaselineRecord,
    ComparisonRecord,
    ConfirmRecord,
    DatasetRecord,
    EpochRow,
    HoldoutRecord,
    NoteRecord,
    StudyRecord,
    TrialRecord,
)
from sweep.record import Tracker

SHA = "5e" * 32
SPEC_TEXT = """
[study]
name = "larkspur"
seed = 3
objective = "qlike"

[data]
file = "data/larkspur_index.csv"

[target]
estimator = "parkinson"
horizons = [1, 5]

[search]
sampler = "tpe"
pruner = "median"
startup_trials = 2
warmup_epochs = 3

[space]
batch_size = [32, 64]
hidden_units = { low = 4, high = 32, log = true }
dropout = { low = 0.0, high = 0.5 }
learning_rate = { low = 1e-4, high = 1e-2, log = true }
activation = "tanh"

[training]
max_epochs = 20
"""
MAX_EPOCHS = 20
START = datetime(2026, 1, 5, 10, 0, tzinfo=timezone.utc)
NOW = "2026-03-01T12:00:00+00:00"  # the making time the board tests give collect_board
COMMAND = "volsweep board larkspur.sqlite"

# number, state, objective, epochs run, best epoch, hidden_units, dropout, gap, seconds
TRIALS = [
    (0, "complete", 0.35, 20, 18, 8, 0.10, 0.020, 4.0),
    (1, "complete", 0.20, 15, 10, 16, 0.30, 0.010, 3.0),
    (2, "pruned", 0.45, 4, 4, 4, 0.05, 0.030, 1.0),
    (3, "complete", 0.25, 12, 7, 32, 0.45, 0.015, 2.5),
    (4, "failed", None, 0, 0, 12, 0.20, None, 0.5),
    (5, "pruned", 0.31, 6, 5, 24, 0.25, 0.012, 1.5),
]
BASELINES = [("har", "valid", 0.30), ("ewma", "valid", 0.40), ("garch", "test", 0.05)]


def make_dataset() -> DatasetRecord:
    return DatasetRecord(sha256=SHA, source="data/larkspur_index.csv", n_rows=2520, first_date="2014-01-02",
                         last_date="2023-12-29", columns=["open", "high", "low", "close"],
                         csv_text="date,open,high,low,close\n", dropped=["line 9 (2014-01-13): high below low"])


def make_study(name: str = "larkspur", spec_text: str = SPEC_TEXT, direction: str = "minimize") -> StudyRecord:
    return StudyRecord(
        name=name, spec_text=spec_text, spec_hash="a1" * 32, search_hash="b2" * 32,
        created="2026-01-05T10:00:00+00:00", code_version="0.1.0", git_commit="0123456789abcdef",
        packages={"numpy": "2.4.6"}, python="3.11.7", platform="Linux-6.1-x86_64", machine="x86_64",
        dataset_sha256=SHA, objective="qlike", direction=direction, sampler="tpe", pruner="median",
        settings={"windows": {"train": 1500, "valid": 480, "test": 480}},
    )


def curve(n_epochs: int, offset: float) -> tuple[EpochRow, ...]:
    """A falling training loss and a validation loss that turns up after epoch 10."""
    return tuple(EpochRow(epoch=k, train_loss=offset + 1.0 / (k + 1), valid_loss=offset + 1.2 / (k + 1) + 0.01 * max(0, k - 10),
                          seconds=0.01) for k in range(1, n_epochs + 1))


def make_trial(study, number, state, objective, n_epochs, best_epoch, hidden, dropout, gap, seconds,
               activation="tanh", batch_size=64) -> TrialRecord:
    done = objective is not None
    return TrialRecord(
        study=study, number=number, state=state,
        params={"batch_size": batch_size, "hidden_units": hidden, "layers": 1, "dropout": dropout, "patience": 20,
                "learning_rate": 1e-3 * (1 + number), "weight_decay": 0.0, "activation": activation},
        seed=[3, number], best_epoch=best_epoch, n_epochs=n_epochs,
        stop_reason={"complete": "patience", "pruned": "pruned", "failed": "error"}[state],
        objective=objective, train_loss=0.1 + 0.01 * number if done else None,
        valid_loss=0.1 + 0.01 * number + gap if done else None, gap=gap,
        gap_ratio=(0.1 + 0.01 * number + gap) / (0.1 + 0.01 * number) if done else None,
        started=(START + timedelta(minutes=number)).isoformat(),
        finished=(START + timedelta(minutes=number, seconds=30)).isoformat(),
        seconds=seconds, error="FloatingPointError: diverged" if state == "failed" else None,
        epochs=curve(n_epochs, 0.01 * number),
    )


def write_record(tracker: Tracker, name: str = "larkspur", *, trials=TRIALS, baselines=BASELINES,
                 spec_text: str = SPEC_TEXT, direction: str = "minimize", activation: str = "tanh") -> None:
    tracker.save_study(make_study(name, spec_text, direction), make_dataset())
    for row in trials:
        tracker.record_trial(make_trial(name, *row, activation=activation))
    tracker.record_baselines([
        BaselineRecord(study=name, name=b, window=w, objective=o, losses={"qlike": o}, params={"lambda": 0.94},
                       forecasts=np.zeros((3, 2))) for b, w, o in baselines])


def write_review(tracker: Tracker, name: str = "larkspur", *, note_text: str = "Trial 1 chosen: beats HAR.") -> None:
    tracker.add_note(NoteRecord(study=name, trial=1, created="2026-02-01T09:00:00+00:00", text=note_text,
                                author="reviewer"))
    tracker.record_confirmation(ConfirmRecord(
        study=name, trial=1, created="2026-02-01T10:00:00+00:00", seeds=[[3, 101], [3, 102]],
        objectives=[0.21, 0.22], gaps=[0.011, 0.012], summary={"mean": 0.215, "sd": 0.007}))
    for day in (2, 3):
        tracker.record_holdout(HoldoutRecord(
            study=name, trial=1, created=f"2026-02-0{day}T10:00:00+00:00", command="volsweep holdout ...",
            again=day == 3, results={"trial 1": {"qlike": 0.24, "mse_log": 0.5}, "har": {"qlike": 0.29}}))


def make_comparison(window: str, created: str, words: str) -> ComparisonRecord:
    """A comparison result in the shape compare_forecasts records: DM rows per horizon and on all horizons."""
    dm = [{"model": "trial 1", "baseline": "har", "horizon": h, "mean_diff": -0.01, "hln_pvalue": 0.04,
           "words": f"{words} at horizon {h}"} for h in (1, 5, "all")]
    return ComparisonRecord(
        study="larkspur", created=created, window=window, command=f"volsweep compare --window {window}",
        results={"objective": "qlike", "level": 0.05, "rows": 480, "first_date": "2022-01-03",
                 "last_date": "2023-12-29", "dm": dm, "dm_horizon_all": "mean over horizons 1, 5",
                 "mcs": {"words": f"{words}: the set keeps trial 1"}, "spa": None,
                 "spa_skipped": "har is not among the baselines"})


def write_many(tracker: Tracker, name: str, n_trials: int, n_epochs: int, *, seed: int = 0) -> None:
    """A large study: ``n_trials`` trials, complete and failed ones of ``n_epochs`` epochs, pruned ones
    of 5 to ``n_epochs - 1``; max_epochs is ``n_epochs``. Written in one transaction."""
    rng = np.random.default_rng(seed)
    spec_text = SPEC_TEXT.replace(f"max_epochs = {MAX_EPOCHS}", f"max_epochs = {n_epochs}")
    tracker.save_study(make_study(name, spec_text), make_dataset())
    tracker.record_baselines([BaselineRecord(study=name, name="har", window="valid", objective=0.3,
                                             losses={"qlike": 0.3}, params={}, forecasts=np.zeros((3, 2)))])
    states = rng.choice(["complete", "pruned", "failed"], size=n_trials, p=[0.6, 0.35, 0.05])
    with tracker.db.atomic():
        for number in range(n_trials):
            state = str(states[number])
            hidden = int(rng.integers(4, 33))
            dropout = float(rng.uniform(0, 0.5))
            objective = None if state == "failed" else float(0.2 + 0.1 * abs(np.log(hidden / 12)) + 0.1 * dropout
                                                             + 0.02 * rng.standard_normal())
            gap = None if state == "failed" else float(0.001 * hidden + 0.02 * dropout)
            epochs = int(rng.integers(5, n_epochs)) if state == "pruned" else n_epochs
            record = make_trial(name, number, state, objective, epochs, epochs // 2, hidden, dropout, gap,
                                float(rng.uniform(1, 10)), batch_size=int(rng.choice([32, 64])))
            tracker.record_trial(record)
