"""Tests for sweep/review/notes.py: dated decision notes, kept and never overwritten.

Outside reference: the notes table read back with SQL through the record file (``Tracker.load_notes``
is not this module) and the ISO 8601 date form (``datetime.fromisoformat``).
"""

import json
from datetime import datetime

from typer.testing import CliRunner

from review_study import STUDY, trials_in_state
from sweep import review
from sweep.cli import app


def test_notes_are_dated_and_kept(writable):
    n = trials_in_state(writable, "complete")[0].number
    review.add_decision_note(writable, n, "first pick", author="mira")
    review.add_decision_note(writable, n, "kept after confirm")
    notes = review.list_notes(writable)
    assert [(x.trial, x.text, x.author) for x in notes] == [(n, "first pick", "mira"), (n, "kept after confirm", None)]
    assert all(x.created[:2] == "20" for x in notes)


def test_list_notes_reads_what_the_record_holds(writable):
    added = review.add_decision_note(writable, None, "the study as a whole: HAR stays the benchmark")
    rows = list(writable.db.query("SELECT created, trial, author, text FROM vs_notes WHERE study = ?", [STUDY]))
    # a note on the whole study has no trial; the listed note is the stored row, key for key
    assert [n.to_dict() for n in review.list_notes(writable, study=STUDY)] == rows
    assert rows[0]["trial"] is None and rows[0]["created"] == added.created
    # the date is ISO 8601 text with its time zone (UTC)
    assert datetime.fromisoformat(added.created).utcoffset().total_seconds() == 0


def test_list_notes_of_a_study_without_notes_is_empty(tracker):
    assert review.list_notes(tracker) == []


def test_cli_note_and_notes(writable_record):
    db = str(writable_record)
    runner = CliRunner()
    res = runner.invoke(app, ["note", db, "1", "chosen: [best] on valid", "--author", "mira"])
    assert res.exit_code == 0, res.output
    res = runner.invoke(app, ["notes", db, "--json"])
    assert json.loads(res.stdout)[0]["text"] == "chosen: [best] on valid"
    # the JSON keys are those `volsweep notes --json` printed before the results were typed
    assert list(json.loads(res.stdout)[0]) == ["created", "trial", "author", "text"]


def test_cli_note_on_an_unknown_trial_is_one_line(review_record):
    res = CliRunner().invoke(app, ["note", str(review_record), "42", "text"])
    assert res.exit_code == 1
    assert "no trial 42" in " ".join(res.stderr.split()) and "Traceback" not in res.output
