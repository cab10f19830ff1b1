"""Tests for sweep/review/diff.py: what differs between two studies of one record.

Outside references: the two edits made to the study text here (the expected lines are those edits),
and the study's own windows rebuilt by ``sweep.search.inputs_from_record``.
"""

import json

from typer.testing import CliRunner

from review_study import STUDY, trials_in_state
from sweep import review
from sweep.cli import app
from sweep.search import inputs_from_record

# the keys `volsweep diff --json` printed before the results were typed (captured from that version)
DIFF_KEYS = ["a", "b", "spec", "same_data", "windows", "packages", "best", "comparable"]
SIDE_KEYS = ["name", "created", "objective", "best_trial", "best_objective", "n_complete", "dataset", "windows",
             "code_version", "git_commit", "packages"]


def _add_edited_study(tracker):
    """A second study on the same data: shorter training and a larger validation share."""
    study = tracker.find_study(STUDY)
    text = study.spec_text.replace("max_epochs = 8", "max_epochs = 6").replace("valid = 0.25", "valid = 0.3")
    other = study.__class__(**{**study.__dict__, "name": "review-other", "spec_text": text, "spec_hash": "other"})
    tracker.save_study(other, tracker.load_dataset(study.dataset_sha256))


def test_diff_studies_lists_settings_windows_and_best(writable):
    _add_edited_study(writable)
    report = review.diff_studies(writable, STUDY, "review-other")
    # the two edits made to the text above, and nothing else
    assert list(report.spec) == ["split.valid: 0.25 -> 0.3", "training.max_epochs: 8 -> 6"]
    assert report.same_data is True
    # a larger validation share moves the train/valid boundary; the test window (last 20 %) stays
    assert [line.split(":")[0] for line in report.windows] == ["train", "valid"]
    assert "review-other: no complete trial" in report.best
    assert report.a.best_objective == min(t.objective for t in trials_in_state(writable, "complete"))


def test_diff_studies_of_a_study_with_itself_is_empty(tracker):
    report = review.diff_studies(tracker, STUDY, STUDY)
    assert (report.spec, report.windows, report.packages) == ((), (), ())
    assert report.same_data is True and report.comparable is True
    # the windows are the study's own, as the record rebuilds them
    _, inputs = inputs_from_record(tracker, tracker.find_study(STUDY))
    for w in ("train", "valid", "test"):
        dates = inputs.dates(w)
        span = report.a.windows[w]
        assert (span.rows, span.first, span.last) == (len(dates), dates[0].strftime("%Y-%m-%d"),
                                                      dates[-1].strftime("%Y-%m-%d"))


def test_study_diff_to_dict_keeps_the_printed_json_shape(writable):
    _add_edited_study(writable)
    data = review.diff_studies(writable, STUDY, "review-other").to_dict()
    assert list(data) == DIFF_KEYS
    assert list(data["a"]) == SIDE_KEYS and list(data["b"]) == SIDE_KEYS
    assert list(data["a"]["dataset"]) == ["sha256", "source", "rows", "first_date", "last_date"]
    assert list(data["a"]["windows"]) == ["train", "valid", "test"]
    assert list(data["a"]["windows"]["test"]) == ["rows", "first", "last"]
    # the same data on both sides: one SHA-256, the one the record keeps for the study
    assert data["a"]["dataset"]["sha256"] == data["b"]["dataset"]["sha256"] == \
        writable.find_study(STUDY).dataset_sha256
    assert json.loads(json.dumps(data)) == data


def test_cli_diff(review_record):
    res = CliRunner().invoke(app, ["diff", str(review_record), STUDY, STUDY])
    assert res.exit_code == 0 and "settings: same" in res.output and "same data" in res.output


def test_cli_diff_unknown_study_is_one_line(review_record):
    res = CliRunner().invoke(app, ["diff", str(review_record), STUDY, "nope"])
    assert res.exit_code == 1
    assert "no study named 'nope'" in " ".join(res.stderr.split()) and "Traceback" not in res.output
