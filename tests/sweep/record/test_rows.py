"""Tests of sweep/record/rows.py: records <-> table rows, read back bit for bit.

Outside references: Python's json (floats written with repr round trip exactly), struct's '<d' (IEEE 754
binary64, little-endian) for the forecast blobs, numpy's own `np.load` for the weight archives, zlib and
hashlib for the kept rows, and SQLite's 8-byte IEEE REAL storage (https://sqlite.org/datatype3.html) for
a round trip through a real table.
"""

import dataclasses
import hashlib
import io
import json
import sqlite3
import struct
import zlib

import numpy as np
import pytest

from sample_records import CSV, assert_same_trial, make_dataset, make_study, make_trial
from sweep.record import (
    BaselineRecord, ComparisonRecord, ConfirmRecord, EpochRow, HoldoutRecord, NoteRecord, StudyRecord, TrialRecord,
)
from sweep.record import rows

# floats whose decimal forms are awkward: a sum with round-off, the smallest normal and subnormal, a huge one
AWKWARD = [0.1 + 0.2, 2.2250738585072014e-308, 5e-324, 1.7976931348623157e308, -0.0, 1 / 3]


def bits(array) -> np.ndarray:
    return np.ascontiguousarray(array, dtype=np.float64).view(np.uint64)


# ---------------------------------------------------------------- record <-> row


REVIEWS = [
    HoldoutRecord(study="coastal", trial=2, created="2026-02-01T00:00:00+00:00", command="volsweep holdout x 2",
                  again=False, results={"mlp": {"qlike": AWKWARD[0]}}, sequence=1),
    ConfirmRecord(study="coastal", trial=1, created="2026-02-01T00:00:00+00:00", seeds=[[7, 100], [7, 101]],
                  objectives=AWKWARD[:2], gaps=[0.01, AWKWARD[5]], summary={"mean": AWKWARD[2]}, extra={"k": (1, 2)}),
    ComparisonRecord(study="coastal", created="2026-02-01T00:00:00+00:00", window="valid", command="volsweep compare",
                     results={"dm": {"statistic": -1.5, "pvalue": AWKWARD[1]}}, sequence=3),
    NoteRecord(study="coastal", trial=None, created="2026-02-01T00:00:00+00:00", text="chosen: trial 1", author="me"),
]


@pytest.mark.parametrize("record", REVIEWS, ids=lambda r: type(r).__name__)
def test_to_row_and_from_row_round_trip_every_review_record(record):
    row = rows.to_row(record)
    # dicts and lists travel as JSON text; Python's json writes floats with repr, so they come back exactly
    for name in rows.JSON_FIELDS[type(record)]:
        assert isinstance(row[name], str) and json.loads(row[name]) == rows.plain(getattr(record, name))
    back = rows.from_row(type(record), {**row, "id": 99})  # extra columns such as ids are ignored
    assert back == record


def test_study_row_round_trips_and_keeps_json_fields_as_text():
    study = dataclasses.replace(make_study(), settings={"windows": {"train": 500}, "awkward": AWKWARD})
    row = rows.study_row(study)
    assert json.loads(row["packages"]) == {"numpy": "2.4.6", "optuna": "5.0.0"}
    back = rows.row_study(row)
    assert back == study
    # bit for bit, -0.0 and the subnormal included
    np.testing.assert_array_equal(bits(back.settings["awkward"]), bits(AWKWARD))


def test_trial_row_leaves_arrays_and_epochs_to_their_own_tables():
    trial = make_trial(3)
    row = rows.trial_row(trial)
    assert not {"epochs", "valid_forecasts", "weights"} & set(row)
    assert json.loads(row["params"]) == {"hidden": [16, 8], "learning_rate": 1e-3, "dropout": 0.1, "batch_size": 64}
    assert json.loads(row["seed"]) == [7, 3]
    back = rows.row_trial(row, epochs=trial.epochs, valid_forecasts=trial.valid_forecasts, weights=trial.weights)
    assert_same_trial(back, trial)


def test_row_trial_reads_null_seconds_as_nan():
    # SQLite keeps NaN as NULL; a required float field reads back as NaN
    row = {**rows.trial_row(make_trial(0, arrays=False)), "seconds": None}
    assert np.isnan(rows.row_trial(row).seconds)


def test_epoch_rows_and_row_epoch_round_trip():
    trial = dataclasses.replace(make_trial(4, arrays=False), epochs=(
        EpochRow(epoch=1, train_loss=AWKWARD[0], valid_loss=AWKWARD[5], valid_score=None, seconds=0.5, fold=0),
        EpochRow(epoch=1, train_loss=1.0, valid_loss=2.0, valid_score=AWKWARD[1], seconds=0.25, fold=1)))
    epoch_rows = rows.epoch_rows(trial)
    assert [(r["study"], r["number"], r["fold"], r["epoch"]) for r in epoch_rows] == [("coastal", 4, 0, 1),
                                                                                    ("coastal", 4, 1, 1)]
    assert tuple(rows.row_epoch(r) for r in epoch_rows) == trial.epochs
    # NULL losses (NaN in SQLite) come back as NaN; a row from before folds reads as fold 0
    old = rows.row_epoch({"epoch": 2, "train_loss": None, "valid_loss": None, "valid_score": None, "seconds": None})
    assert np.isnan(old.train_loss) and np.isnan(old.valid_loss) and np.isnan(old.seconds)
    assert (old.valid_score, old.fold) == (None, 0)


def test_rows_survive_a_real_sqlite_table_bit_for_bit():
    # SQLite stores REAL values as 8-byte IEEE floats, so a round trip through a table changes no bit
    trial = dataclasses.replace(make_trial(0, arrays=False), objective=AWKWARD[0], train_loss=AWKWARD[1],
                                valid_loss=AWKWARD[2], gap=AWKWARD[4], gap_ratio=AWKWARD[3])
    row = rows.trial_row(trial)
    conn = sqlite3.connect(":memory:")
    conn.row_factory = sqlite3.Row
    conn.execute(f"CREATE TABLE t ({', '.join(row)})")
    conn.execute(f"INSERT INTO t VALUES ({', '.join('?' * len(row))})", list(row.values()))
    back = rows.row_trial(dict(conn.execute("SELECT * FROM t").fetchone()), epochs=trial.epochs)
    assert back == trial
    got = [back.objective, back.train_loss, back.valid_loss, back.gap, back.gap_ratio]
    np.testing.assert_array_equal(bits(got), bits([AWKWARD[i] for i in (0, 1, 2, 4, 3)]))


# ---------------------------------------------------------------- the kept price rows


def test_dataset_row_compresses_the_rows_with_their_sha256():
    row = rows.dataset_row(make_dataset())
    assert "csv_text" not in row
    # zlib gives the text back; hashlib's SHA-256 of it is stored beside it
    assert zlib.decompress(row["csv_zlib"]).decode("utf-8") == CSV
    assert row["csv_sha256"] == hashlib.sha256(CSV.encode("utf-8")).hexdigest()
    assert rows.row_dataset(row) == make_dataset()


def test_row_dataset_refuses_rows_that_no_longer_match_their_hash():
    row = rows.dataset_row(make_dataset())
    row["csv_zlib"] = zlib.compress(CSV.replace("10.2", "10.3", 1).encode("utf-8"))
    with pytest.raises(ValueError, match="the stored rows of dataset 3f3f3f3f3f3f do not match their SHA-256"):
        rows.row_dataset(row)


# ---------------------------------------------------------------- forecast blobs


def test_array_to_blob_is_little_endian_float64_in_c_order():
    array = np.array([[1.5, -0.0, np.inf], [5e-324, np.nan, 0.1 + 0.2]])
    blob = rows.array_to_blob(array)
    assert (blob["n_rows"], blob["n_cols"]) == (2, 3)
    # struct's '<d' is IEEE 754 binary64, little-endian: the blob is the six values row by row
    unpacked = struct.unpack("<6d", blob["data"])
    np.testing.assert_array_equal(bits(unpacked), bits(array.ravel()))
    back = rows.blob_to_array(blob)
    np.testing.assert_array_equal(bits(back), bits(array))
    assert back.dtype == np.float64 and back.flags.writeable


def test_blob_round_trip_keeps_every_bit_of_big_endian_and_fortran_arrays():
    rng = np.random.default_rng(0)
    native = rng.standard_normal((7, 3))
    native[0, 0] = np.float64("-nan")  # a NaN with its sign bit set
    for array in (native.astype(">f8"), np.asfortranarray(native), native[:, ::-1]):
        back = rows.blob_to_array(rows.array_to_blob(array))
        np.testing.assert_array_equal(bits(back), bits(np.asarray(array, dtype=np.float64)))


def test_blob_to_array_refuses_a_blob_of_the_wrong_length():
    blob = rows.array_to_blob(np.zeros((2, 3)))
    blob["data"] = blob["data"][:-8]
    with pytest.raises(ValueError, match=r"forecast blob holds 40 bytes, expected 48 for shape \(2, 3\) float64"):
        rows.blob_to_array(blob)


def test_baseline_row_round_trips_with_its_forecasts():
    forecasts = np.random.default_rng(1).random((20, 3))
    record = BaselineRecord(study="coastal", name="har", window="valid", objective=AWKWARD[0],
                            losses={"qlike": 0.2, "mse": AWKWARD[2]}, params={"b": [0.1, 0.2]}, forecasts=forecasts)
    back = rows.row_baseline(rows.baseline_row(record))
    assert back == record
    np.testing.assert_array_equal(bits(back.forecasts), bits(forecasts))


# ---------------------------------------------------------------- weight archives


def test_arrays_to_npz_is_an_archive_numpy_reads_itself():
    arrays = {"params": np.random.default_rng(2).standard_normal(41).astype(np.float32),
              "hidden": np.array([16, 8], dtype=np.int64), "activation": np.array("relu"),
              "mask": np.array([True, False])}
    data = rows.arrays_to_npz(arrays)
    # numpy's own reader, without pickle
    with np.load(io.BytesIO(data), allow_pickle=False) as archive:
        assert sorted(archive.files) == sorted(arrays)
        for name, array in arrays.items():
            np.testing.assert_array_equal(archive[name], array)
            assert archive[name].dtype == array.dtype
    back = rows.npz_to_arrays(data)
    for name, array in arrays.items():
        np.testing.assert_array_equal(back[name], array)
        assert back[name].dtype == array.dtype and back[name].shape == array.shape


def test_arrays_to_npz_refuses_object_arrays():
    # numpy refuses to write an object array without pickle
    with pytest.raises(ValueError, match="allow_pickle=False"):
        rows.arrays_to_npz({"cfg": np.array([{"a": 1}], dtype=object)})


def test_to_row_plain_turns_numpy_scalars_into_python_numbers():
    row = rows.to_row_plain(EpochRow(epoch=np.int64(2), train_loss=np.float32(0.5), valid_loss=0.25))
    assert row == {"epoch": 2, "train_loss": 0.5, "valid_loss": 0.25, "valid_score": None, "seconds": 0.0,
                   "fold": 0}
    assert type(row["epoch"]) is int and type(row["train_loss"]) is float


def test_json_fields_name_every_record_type():
    # every record the tracker writes has its JSON fields listed
    assert set(rows.JSON_FIELDS) == {StudyRecord, type(make_dataset()), TrialRecord, BaselineRecord, HoldoutRecord,
                                     ConfirmRecord, ComparisonRecord, NoteRecord}
