"""Tests for sweep/record/ranking.py: `rank_rows` on records built by hand.

There is no outside library for this ranking; the reference is its documented promise (ascending by
the key, rows without a value last, baselines of the validation window only, `beats_best_baseline`
against the best finite validation baseline), and every expected order below was worked out by hand
from the table of trials and baselines in this file.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from sweep.errors import InputError
from sweep.record import SORT_KEYS, BaselineRecord, TrialRecord, baseline_row, rank_rows, trial_row

# number, state, objective, train_loss, gap, gap_ratio, best_epoch, n_epochs, seconds
TRIALS = [
    (0, "complete", 0.30, 0.20, 0.10, 1.50, 5, 9, 3.0),
    (1, "complete", 0.10, 0.25, 0.02, 1.08, 2, 4, 1.0),
    (2, "pruned", 0.50, 0.40, 0.20, 2.00, 1, 2, 0.5),
    (3, "failed", None, None, None, None, 0, 1, 0.2),
    (4, "complete", 0.20, 0.15, 0.05, 1.33, 7, 12, 5.0),
]
# name, window, objective: the test-window har (0.05) would be the best if it counted; garch has no value
BASELINES = [("har", "valid", 0.15), ("har", "test", 0.05), ("ewma", "valid", 0.25), ("garch", "valid", math.nan)]

TRIAL_KEYS = ["kind", "trial", "state", "objective", "train_loss", "valid_loss", "gap", "gap_ratio", "best_epoch",
              "epochs", "stop_reason", "seconds", "params"]


def make_trial(number, state, objective, train_loss, gap, gap_ratio, best_epoch, n_epochs, seconds) -> TrialRecord:
    stop = {"complete": "patience", "pruned": "pruned", "failed": "error"}[state]
    return TrialRecord(
        study="coastal", number=number, state=state, params={"hidden_units": 8 + number, "learning_rate": 1e-3},
        seed=[7, number], best_epoch=best_epoch, n_epochs=n_epochs, stop_reason=stop, objective=objective,
        train_loss=train_loss, valid_loss=None if train_loss is None else train_loss + gap, gap=gap,
        gap_ratio=gap_ratio, seconds=seconds,
    )


def make_baseline(name, window, objective) -> BaselineRecord:
    return BaselineRecord(study="coastal", name=name, window=window, objective=objective,
                          losses={"qlike": objective}, params={"fitted": name}, forecasts=np.zeros((3, 1)))


@pytest.fixture
def trials():
    return [make_trial(*t) for t in TRIALS]


@pytest.fixture
def baselines():
    return [make_baseline(*b) for b in BASELINES]


@pytest.mark.parametrize("sort, order", [
    # ascending by the key; a row without a value (None or NaN) goes last, in the order given (trials first)
    ("objective", [1, "har", 4, "ewma", 0, 2, 3, "garch"]),
    ("train_loss", [4, 0, 1, 2, 3, "har", "ewma", "garch"]),
    ("gap", [1, 4, 0, 2, 3, "har", "ewma", "garch"]),
    ("gap_ratio", [1, 4, 0, 2, 3, "har", "ewma", "garch"]),
    ("best_epoch", [3, 2, 1, 0, 4, "har", "ewma", "garch"]),
    ("epochs", [3, 2, 1, 0, 4, "har", "ewma", "garch"]),
    ("seconds", [3, 2, 1, 0, 4, "har", "ewma", "garch"]),
    # trials by number, then baselines by name
    ("trial", [0, 1, 2, 3, 4, "ewma", "garch", "har"]),
])
def test_rank_rows_sorts_by_each_key(trials, baselines, sort, order):
    rows = rank_rows(trials, baselines, sort=sort)
    assert [r["trial"] for r in rows] == order
    # rank is the 1-based position over all rows, baselines included
    assert [r["rank"] for r in rows] == list(range(1, len(order) + 1))


def test_rank_rows_sort_table_covers_every_key():
    # the table above names every key the ranking offers
    assert set(SORT_KEYS) == {"objective", "train_loss", "gap", "gap_ratio", "best_epoch", "epochs", "seconds",
                              "trial"}


def test_rank_rows_marks_baselines_of_the_validation_window_only(trials, baselines):
    rows = rank_rows(trials, baselines)
    marked = [(r["trial"], r["state"], r["objective"]) for r in rows if r["kind"] == "baseline"]
    # the test-window har (0.05) is left out; garch keeps its NaN (it is sorted last, not dropped)
    assert marked[:2] == [("har", "baseline", 0.15), ("ewma", "baseline", 0.25)]
    assert marked[2][:2] == ("garch", "baseline") and math.isnan(marked[2][2])
    har = next(r for r in rows if r["trial"] == "har")
    assert har == {**baseline_row(baselines[0]), "rank": 2, "beats_best_baseline": None}
    assert (har["train_loss"], har["epochs"], har["params"]) == (None, None, {"fitted": "har"})


def test_rank_rows_beats_best_baseline_against_the_best_finite_valid_baseline(trials, baselines):
    rows = {r["trial"]: r for r in rank_rows(trials, baselines)}
    # best baseline = min(0.15, 0.25) = 0.15: NaN and the test window do not count
    assert rows[1]["beats_best_baseline"] is True     # 0.10 < 0.15
    assert rows[4]["beats_best_baseline"] is False    # 0.20 >= 0.15
    assert rows[0]["beats_best_baseline"] is False    # 0.30
    assert rows[2]["beats_best_baseline"] is False    # a pruned trial with a value is compared too (0.50)
    assert rows[3]["beats_best_baseline"] is None     # no objective
    assert all(rows[b]["beats_best_baseline"] is None for b in ("har", "ewma", "garch"))


def test_rank_rows_beats_best_baseline_is_none_without_a_finite_baseline(trials):
    only_test_and_nan = [make_baseline("har", "test", 0.05), make_baseline("garch", "valid", math.nan)]
    for baselines in ([], only_test_and_nan):
        rows = rank_rows(trials, baselines)
        assert [r["beats_best_baseline"] for r in rows] == [None] * len(rows)


def test_rank_rows_equal_objectives_keep_trials_before_baselines():
    # a tie is kept in the order given: trials, then baselines
    rows = rank_rows([make_trial(0, "complete", 0.15, 0.1, 0.05, 1.5, 1, 2, 1.0)],
                     [make_baseline("har", "valid", 0.15)])
    assert [(r["trial"], r["rank"], r["beats_best_baseline"]) for r in rows] == [(0, 1, False), ("har", 2, None)]


@pytest.mark.parametrize("states, order", [
    (("complete",), [1, "har", 4, "ewma", 0, "garch"]),
    (("pruned", "failed"), ["har", "ewma", 2, 3, "garch"]),
    (("running",), ["har", "ewma", "garch"]),
])
def test_rank_rows_keeps_only_trials_in_the_given_states(trials, baselines, states, order):
    rows = rank_rows(trials, baselines, states=states)
    assert [r["trial"] for r in rows] == order
    assert [r["rank"] for r in rows] == list(range(1, len(order) + 1))


def test_rank_rows_without_baselines_still_compares_with_them(trials, baselines):
    rows = rank_rows(trials, baselines, include_baselines=False)
    assert [r["trial"] for r in rows] == [1, 4, 0, 2, 3]
    # the best baseline (0.15) is still the reference
    assert [r["beats_best_baseline"] for r in rows] == [True, False, False, False, None]


def test_rank_rows_trial_row_shape(trials):
    (row,) = rank_rows(trials[:1], [])
    # the JSON keys of `volsweep top`, in order, then the ranking's two
    assert list(row) == TRIAL_KEYS + ["rank", "beats_best_baseline"]
    assert row == {**trial_row(trials[0]), "rank": 1, "beats_best_baseline": None}
    assert (row["kind"], row["trial"], row["epochs"], row["stop_reason"]) == ("trial", 0, 9, "patience")
    assert row["valid_loss"] == pytest.approx(0.30)  # train 0.20 + gap 0.10
    # the row's params are a copy: changing them leaves the record alone
    row["params"]["hidden_units"] = 99
    assert trials[0].params["hidden_units"] == 8


@pytest.mark.parametrize("kwargs, message", [
    ({"sort": "valid_loss"}, "unknown sort key 'valid_loss'; use one of objective, train_loss, gap"),
    ({"states": ("done",)}, "unknown state 'done'; use one of complete, pruned, failed, running"),
])
def test_rank_rows_rejects_an_unknown_key_or_state(trials, kwargs, message):
    with pytest.raises(InputError, match=message):
        rank_rows(trials, [], **kwargs)
