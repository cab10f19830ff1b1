"""Tests for sweep/records.py: checks in __post_init__ and conversion to plain Python values.

The numpy facts relied on (``np.generic.item()`` gives the Python scalar, float32 -> float64 is
exact) are numpy's documented behaviour; the rest is the record's own contract.
"""

import pickle

import numpy as np
import pytest

from sweep.record import (
    BaselineRecord,
    ConfirmRecord,
    DatasetRecord,
    EpochRow,
    HoldoutRecord,
    NoteRecord,
    StudyRecord,
    TrialRecord,
    plain,
    utc_now,
)


def trial(**changes) -> TrialRecord:
    fields = dict(study="coastal", number=0, state="complete", params={"hidden": [8]}, seed=[7, 0])
    fields.update(changes)
    return TrialRecord(**fields)


@pytest.mark.parametrize("field, value, message", [
    ("state", "done", "TrialRecord.state must be one of 'complete', 'pruned', 'failed', 'running'; got 'done'"),
    ("stop_reason", "early", "TrialRecord.stop_reason must be one of 'patience', 'max_epochs', 'diverged', "
                             "'stopped', 'pruned', 'error' or None; got 'early'"),
])
def test_trial_record_rejects_unknown_choices(field, value, message):
    with pytest.raises(ValueError) as info:
        trial(**{field: value})
    assert str(info.value) == message


@pytest.mark.parametrize("changes, error, match", [
    ({"number": -1}, ValueError, "TrialRecord.number must be at least 0; got -1"),
    ({"number": 1.5}, TypeError, "TrialRecord.number must be an int; got 1.5"),
    ({"best_epoch": True}, TypeError, "TrialRecord.best_epoch must be an int"),
    ({"objective": "0.3"}, TypeError, "TrialRecord.objective must be a number; got '0.3'"),
    ({"seed": [7, 0.5]}, TypeError, r"TrialRecord.seed must be a list of ints such as \[study_seed, number\]"),
    ({"epochs": [{"epoch": 1}]}, TypeError, "TrialRecord.epochs must hold EpochRow objects"),
    ({"valid_forecasts": np.zeros(5)}, ValueError, r"must be a 2-d array .* got shape \(5,\); .*reshape\(-1, 1\)"),
    ({"weights": {"cfg": np.array([None], dtype=object)}}, TypeError, r"weights\['cfg'\] has dtype object"),
])
def test_trial_record_rejects_bad_values(changes, error, match):
    with pytest.raises(error, match=match):
        trial(**changes)


def test_trial_record_turns_numpy_values_into_python_values():
    record = trial(number=np.int64(3), params={"lr": np.float32(0.25), "hidden": (np.int64(16), 8)},
                   seed=[np.int64(7), np.int64(3)], objective=np.float32(0.5), epochs=[EpochRow(np.int64(1), 1, 2)],
                   valid_forecasts=np.ones((2, 1), dtype=np.float32))
    assert type(record.number) is int and type(record.objective) is float
    # float32 0.25 is exactly representable, so the float64 value is exact
    assert record.params == {"lr": 0.25, "hidden": [16, 8]} and type(record.params["hidden"][0]) is int
    assert record.seed == [7, 3] and all(type(s) is int for s in record.seed)
    assert isinstance(record.epochs, tuple) and type(record.epochs[0].train_loss) is float
    assert record.valid_forecasts.dtype == np.float64


def test_trial_record_equality_leaves_arrays_out_and_pickles():
    a = trial(valid_forecasts=np.zeros((2, 1)), weights={"params": np.zeros(3)})
    b = trial(valid_forecasts=np.ones((2, 1)))
    assert a == b  # arrays are compare=False: compare them with np.testing
    back = pickle.loads(pickle.dumps(a))  # one object a worker can hand over whole
    assert back == a
    np.testing.assert_array_equal(back.weights["params"], a.weights["params"])


def test_baseline_record_checks_window_and_shape():
    with pytest.raises(ValueError, match="BaselineRecord.window must be one of 'valid', 'test'; got 'train'"):
        BaselineRecord(study="s", name="har", window="train", objective=0.1, losses={}, params={},
                       forecasts=np.zeros((3, 1)))
    with pytest.raises(ValueError, match="BaselineRecord.forecasts must be a 2-d array"):
        BaselineRecord(study="s", name="har", window="test", objective=0.1, losses={}, params={},
                       forecasts=np.zeros(3))


def test_study_record_checks_direction_and_name():
    fields = dict(name="coastal", spec_text="", spec_hash="a", search_hash="b", created=utc_now(), code_version="0",
                  git_commit=None, packages={}, python="3.11", platform="x", machine="y", dataset_sha256="c",
                  objective="qlike")
    assert StudyRecord(**fields).direction == "minimize"
    with pytest.raises(ValueError, match="StudyRecord.direction must be one of 'minimize', 'maximize'; got 'down'"):
        StudyRecord(**{**fields, "direction": "down"})
    with pytest.raises(ValueError, match="StudyRecord.name must be a non-empty string"):
        StudyRecord(**{**fields, "name": " "})


def test_other_records_check_their_fields():
    with pytest.raises(ValueError, match="EpochRow.epoch must be at least 1; got 0"):
        EpochRow(epoch=0, train_loss=1.0, valid_loss=1.0)
    with pytest.raises(ValueError, match="HoldoutRecord.sequence must be at least 1"):
        HoldoutRecord(study="s", trial=0, created="t", command="c", again=False, results={}, sequence=0)
    with pytest.raises(ValueError, match="one entry per seed; got lengths 2, 1, 2"):
        ConfirmRecord(study="s", trial=0, created="t", seeds=[1, 2], objectives=[0.1], gaps=[0.0, 0.1], summary={})
    with pytest.raises(ValueError, match="NoteRecord.text must be non-empty text"):
        NoteRecord(study="s", trial=None, created="t", text="")
    assert DatasetRecord(sha256="a", source="p.csv", n_rows=np.int64(2), first_date="", last_date="",
                         columns=("open",), csv_text="").columns == ["open"]


def test_plain_converts_nested_numpy_values():
    got = plain({"a": np.float32(0.5), 1: [np.int64(2), (np.bool_(True),)], "b": np.arange(2)})
    assert got == {"a": 0.5, "1": [2, [True]], "b": [0, 1]}
    assert type(got["1"][1][0]) is bool


def test_utc_now_is_iso_utc():
    now = utc_now()
    # ISO 8601 with an explicit UTC offset, to the second (common practice for stored timestamps)
    assert now.endswith("+00:00") and len(now) == len("2026-01-31T09:15:02+00:00")
