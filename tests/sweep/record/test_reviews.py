"""The review log's functions on a real in-memory SQLite record: entries are appended, numbered per study
and never overwritten (the record's own promise; no outside reference applies)."""

from __future__ import annotations

import pytest
import sqlite_utils

from sample_records import make_dataset, make_study, make_trial
from sweep.errors import RecordError, StudyNotFound, TrialNotFound
from sweep.record import ComparisonRecord, HoldoutRecord, NoteRecord, Tracker
from sweep.record import reviews

WHEN = "2026-02-01T09:00:00+00:00"


@pytest.fixture
def record():
    tracker = Tracker.memory()
    tracker.save_study(make_study(), make_dataset())
    tracker.record_trial(make_trial(0))
    return tracker.db, tracker.location


def holdout(sequence=None, trial=0):
    return HoldoutRecord(study="coastal", trial=trial, created=WHEN, command="volsweep holdout", again=False,
                         results={"trial 0": {"qlike": 0.2}}, sequence=sequence)


def test_add_holdout_numbers_each_look_per_study_and_refuses_a_taken_number(record):
    db, where = record
    assert [reviews.add_holdout(db, where, holdout()).sequence for _ in range(2)] == [1, 2]
    with pytest.raises(RecordError, match="holdout #2 of study 'coastal' is already recorded"):
        reviews.add_holdout(db, where, holdout(sequence=2))
    # a chosen number that is free is kept as given
    assert reviews.add_holdout(db, where, holdout(sequence=7)).sequence == 7
    assert [h.sequence for h in reviews.load_holdouts(db, where, "coastal")] == [1, 2, 7]


def test_add_holdout_names_a_missing_trial(record):
    db, where = record
    with pytest.raises(TrialNotFound, match="has no trial 5 \\(1 trials, numbers 0-0\\)"):
        reviews.add_holdout(db, where, holdout(trial=5))


def test_comparisons_read_as_none_before_their_table_exists(record):
    db, where = record
    # records made before comparisons existed have no such table: none recorded, nothing made by reading
    assert reviews.load_comparisons(db, where, "coastal") == []
    assert "vs_comparisons" not in db.table_names()
    made = reviews.add_comparison(db, where, ComparisonRecord(study="coastal", created=WHEN, window="valid",
                                                              command="volsweep compare", results={"rows": 3}))
    assert made.sequence == 1 and "vs_comparisons" in db.table_names()
    assert reviews.load_comparisons(db, where, "coastal", "test") == []
    with pytest.raises(ValueError, match="window must be one of valid, test"):
        reviews.load_comparisons(db, where, "coastal", "train")


def test_notes_on_the_study_and_on_a_trial(record):
    db, where = record
    reviews.add_note(db, where, NoteRecord(study="coastal", trial=None, created=WHEN, text="the study"))
    reviews.add_note(db, where, NoteRecord(study="coastal", trial=0, created=WHEN, text="trial 0 chosen"))
    assert [n.text for n in reviews.load_notes(db, where, "coastal")] == ["the study", "trial 0 chosen"]
    assert [n.text for n in reviews.load_notes(db, where, "coastal", 0)] == ["trial 0 chosen"]
    with pytest.raises(StudyNotFound, match="no study named 'harbor'"):
        reviews.load_notes(db, where, "harbor")


def test_review_log_functions_leave_nothing_on_a_database_without_the_study():
    db = sqlite_utils.Database(memory=True)
    Tracker(db)  # an empty record
    with pytest.raises(StudyNotFound):
        reviews.add_note(db, ":memory:", NoteRecord(study="coastal", trial=None, created=WHEN, text="x"))
    assert db["vs_notes"].count == 0
