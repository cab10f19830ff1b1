"""Tests for sweep/record/reports.py: the typed reports of `top`, `list` and `show` on a real record.

Each test writes studies, trials and baselines into a SQLite record (``Tracker.memory()``), builds a
report and checks its typed fields against the values written, worked by hand, and its ``to_dict()``
against the JSON shape the CLI prints (the key lists below are that shape, in order).
"""

from __future__ import annotations

import dataclasses
import json

import numpy as np
import pytest

from sweep.record import (
    BaselineRecord, CurvePoint, DatasetRecord, EpochRow, RankRow, StudyNotFound, StudyRecord, StudySummary,
    TopReport, Tracker, TrialDetail, TrialNotFound, TrialRecord, list_report, rank_rows, show_report, top_report,
    trial_row,
)

SHA = "ab" * 32
ROW_KEYS = ["kind", "trial", "state", "objective", "train_loss", "valid_loss", "gap", "gap_ratio", "best_epoch",
            "epochs", "stop_reason", "seconds", "params"]
SUMMARY_KEYS = ["name", "created", "objective", "direction", "n_trials", "trials", "best_trial", "best_objective",
                "dataset", "dataset_sha256", "n_rows"]


def make_study(name="coastal", created="2026-01-05T10:00:00+00:00") -> StudyRecord:
    return StudyRecord(
        name=name, spec_text=f'name = "{name}"\n', spec_hash=f"spec-{name}", search_hash="search1", created=created,
        code_version="0.1.0", git_commit="0123abcd", packages={"numpy": "2.4.6", "optuna": "5.0.0"},
        python="3.11.7", platform="Linux-6.1", machine="x86_64", dataset_sha256=SHA, objective="qlike",
    )


def make_dataset() -> DatasetRecord:
    csv = "date,open,high,low,close\n2021-01-04,10.0,10.5,9.8,10.2\n2021-01-05,10.2,10.4,10.0,10.1\n"
    return DatasetRecord(sha256=SHA, source="data/harbor_index.csv", n_rows=2, first_date="2021-01-04",
                         last_date="2021-01-05", columns=["open", "high", "low", "close"], csv_text=csv)


def make_trial(number, state, objective, *, study="coastal", n_epochs=3, weights=False, error=None) -> TrialRecord:
    epochs = tuple(EpochRow(epoch=i + 1, train_loss=1.0 / (i + 2), valid_loss=1.0 / (i + 1.5), valid_score=None,
                            seconds=0.01 * (i + 1)) for i in range(n_epochs))
    return TrialRecord(
        study=study, number=number, state=state, params={"hidden_units": 8 + number, "activation": "relu"},
        seed=[7, number], best_epoch=min(2, n_epochs), n_epochs=n_epochs,
        stop_reason={"complete": "patience", "pruned": "pruned", "failed": "error"}.get(state),
        objective=objective, train_loss=0.3, valid_loss=0.4, gap=0.1, gap_ratio=0.4 / 0.3,
        started="2026-01-05T10:00:01+00:00", finished="2026-01-05T10:00:03+00:00", seconds=2.0, error=error,
        epochs=epochs, weights={"params": np.arange(5.0)} if weights else None, worker="1234@host",
    )


def make_baseline(name, window, objective, study="coastal") -> BaselineRecord:
    return BaselineRecord(study=study, name=name, window=window, objective=objective, losses={"qlike": objective},
                          params={"lambda": 0.94}, forecasts=np.zeros((4, 1)))


@pytest.fixture
def tracker():
    t = Tracker.memory()
    t.save_study(make_study(), make_dataset())
    for number, state, objective in [(0, "complete", 0.30), (1, "complete", 0.10), (2, "pruned", 0.50),
                                     (3, "failed", None), (4, "complete", 0.20)]:
        t.record_trial(make_trial(number, state, objective, weights=number == 1,
                                  error="diverged at epoch 1" if state == "failed" else None))
    t.record_baselines([make_baseline("har", "valid", 0.15), make_baseline("har", "test", 0.05),
                        make_baseline("ewma", "valid", 0.25)])
    yield t
    t.close()


# ---------------------------------------------------------------- top

def test_top_report_keeps_the_first_n_rows_of_the_ranking(tracker):
    report = top_report(tracker, n=3)
    assert isinstance(report, TopReport) and (report.study, report.objective) == ("coastal", "qlike")
    # worked by hand: 0.10 (trial 1), 0.15 (har, valid window), 0.20 (trial 4)
    assert [(r.rank, r.kind, r.trial, r.objective) for r in report.rows] == [
        (1, "trial", 1, 0.10), (2, "baseline", "har", 0.15), (3, "trial", 4, 0.20)]
    # trial 1 beats the best validation baseline (0.10 < 0.15), trial 4 does not; a baseline is neither
    assert [r.beats_best_baseline for r in report.rows] == [True, None, False]
    assert all(isinstance(r, RankRow) for r in report.rows)


def test_top_report_to_dict_gives_rank_rows_unchanged(tracker):
    report = top_report(tracker, n=100, sort="gap", states=["complete", "pruned"])
    expected = rank_rows(tracker.load_trials("coastal"), tracker.load_baselines("coastal"), sort="gap",
                         states=("complete", "pruned"))
    as_dict = report.to_dict()
    assert list(as_dict) == ["study", "objective", "rows"]
    # same rows, same keys in the same order (the JSON of `volsweep top --json`)
    assert as_dict["rows"] == expected
    assert [list(r) for r in as_dict["rows"]] == [list(r) for r in expected]
    assert list(as_dict["rows"][0]) == ROW_KEYS + ["rank", "beats_best_baseline"]
    assert {r.trial for r in report.rows if r.kind == "trial"} == {0, 1, 2, 4}   # the failed trial 3 is left out


def test_top_report_names_an_unknown_study(tracker):
    with pytest.raises(StudyNotFound, match="no study named 'inland'"):
        top_report(tracker, study="inland")


def test_rank_row_is_frozen_and_its_params_read_only(tracker):
    row = top_report(tracker, n=1).rows[0]
    with pytest.raises(dataclasses.FrozenInstanceError):
        row.objective = 0.0
    with pytest.raises(TypeError):
        row.params["hidden_units"] = 99
    # to_dict hands out a plain copy
    copy = row.to_dict()["params"]
    copy["hidden_units"] = 99
    assert row.params["hidden_units"] == 9


def test_rank_row_from_row_refuses_a_key_it_does_not_know(tracker):
    row = rank_rows(tracker.load_trials("coastal"), [])[0]
    with pytest.raises(TypeError, match="colour"):
        RankRow.from_row({**row, "colour": "red"})


# ---------------------------------------------------------------- list

def test_list_report_summarises_each_study_oldest_first(tracker):
    tracker.save_study(make_study("inland", created="2026-02-01T09:00:00+00:00"), make_dataset())
    tracker.record_trial(make_trial(0, "running", None, study="inland"))
    report = list_report(tracker)
    assert all(isinstance(s, StudySummary) for s in report.studies)
    coastal, inland = report.studies
    # 3 complete, 1 pruned, 1 failed; the best complete trial is 1 (0.10), never the pruned one
    assert (coastal.name, coastal.n_trials, coastal.best_trial, coastal.best_objective) == ("coastal", 5, 1, 0.10)
    assert dict(coastal.trials) == {"complete": 3, "pruned": 1, "failed": 1, "running": 0}
    assert (coastal.dataset, coastal.dataset_sha256, coastal.n_rows) == ("data/harbor_index.csv", SHA, 2)
    # a study with no complete trial has no best
    assert (inland.name, inland.n_trials, inland.best_trial, inland.best_objective) == ("inland", 1, None, None)


def test_list_report_to_list_is_the_tracker_summaries(tracker):
    as_list = list_report(tracker).to_list()
    assert as_list == tracker.list_studies()
    assert list(as_list[0]) == SUMMARY_KEYS
    assert json.loads(json.dumps(as_list)) == as_list


def test_list_report_of_an_empty_record_is_empty():
    assert list_report(Tracker.memory()).to_list() == []


# ---------------------------------------------------------------- show

def test_show_report_parts_hold_the_recorded_values(tracker):
    report = show_report(tracker, 1)
    s, d, t = report.study, report.dataset, report.trial
    assert (s.name, s.created, s.objective, s.code_version, s.git_commit, s.python, s.platform, s.spec_hash) == (
        "coastal", "2026-01-05T10:00:00+00:00", "qlike", "0.1.0", "0123abcd", "3.11.7", "Linux-6.1", "spec-coastal")
    assert dict(s.packages) == {"numpy": "2.4.6", "optuna": "5.0.0"}
    assert (d.sha256, d.source, d.rows, d.first_date, d.last_date) == (
        SHA, "data/harbor_index.csv", 2, "2021-01-04", "2021-01-05")
    assert isinstance(t, TrialDetail)
    assert (t.trial, t.state, t.objective, t.seed, t.epochs, t.best_epoch) == (1, "complete", 0.10, (7, 1), 3, 2)
    assert (t.worker, t.error, t.has_weights) == ("1234@host", None, True)
    # one point per epoch, as written: train 1/(i+2), valid 1/(i+1.5), seconds 0.01(i+1)
    assert t.curve == tuple(CurvePoint(epoch=i + 1, train_loss=pytest.approx(1 / (i + 2)),
                                       valid_loss=pytest.approx(1 / (i + 1.5)), valid_score=None,
                                       seconds=pytest.approx(0.01 * (i + 1))) for i in range(3))


def test_show_report_of_a_failed_trial_without_weights(tracker):
    t = show_report(tracker, 3).trial
    assert (t.state, t.objective, t.error, t.has_weights) == ("failed", None, "diverged at epoch 1", False)


def test_show_report_to_dict_is_the_json_shape(tracker):
    as_dict = show_report(tracker, 1).to_dict()
    assert list(as_dict) == ["study", "dataset", "trial"]
    assert list(as_dict["study"]) == ["name", "created", "objective", "code_version", "git_commit", "python",
                                      "platform", "packages", "spec_hash"]
    assert list(as_dict["dataset"]) == ["sha256", "source", "rows", "first_date", "last_date"]
    trial = as_dict["trial"]
    assert list(trial) == ROW_KEYS + ["seed", "started", "finished", "error", "worker", "curve", "has_weights"]
    # the first keys are the ranking's row of this trial, unchanged
    assert {k: trial[k] for k in ROW_KEYS} == trial_row(tracker.load_trial("coastal", 1))
    assert trial["seed"] == [7, 1] and trial["has_weights"] is True
    assert trial["curve"][0] == {"epoch": 1, "train_loss": 0.5, "valid_loss": pytest.approx(1 / 1.5),
                                 "valid_score": None, "seconds": 0.01}
    # plain JSON: no tuples, no read-only mappings left
    assert json.loads(json.dumps(as_dict)) == as_dict


def test_show_report_names_an_unknown_trial(tracker):
    with pytest.raises(TrialNotFound, match="99"):
        show_report(tracker, 99)
