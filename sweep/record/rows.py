"""Records <-> table rows for the tracker: JSON text, array blobs, compressed CSV. No SQL here.

Arrays are stored two ways, both read back bit for bit:

- forecasts: raw little-endian float64 bytes (``'<f8'``) plus ``n_rows``/``n_cols`` columns;
- weights: the bytes of ``np.savez`` (a zip of ``.npy`` files), read with ``allow_pickle=False``.

SQLite keeps a float NaN as NULL, so required float fields read NULL back as NaN.
"""

from __future__ import annotations

import dataclasses
import hashlib
import io
import json
import zlib
from typing import Any

import numpy as np

from sweep.record.values import (
    BaselineRecord,
    ComparisonRecord,
    ConfirmRecord,
    DatasetRecord,
    EpochRow,
    HoldoutRecord,
    NoteRecord,
    StudyRecord,
    TrialRecord,
    plain,
)

__all__ = [
    "FORECAST_DTYPE", "JSON_FIELDS", "SKIPPED", "array_to_blob", "arrays_to_npz", "baseline_row", "blob_to_array",
    "dataset_row", "epoch_rows", "from_json", "from_row", "npz_to_arrays", "row_baseline", "row_dataset",
    "row_epoch", "row_study", "row_trial", "study_row", "to_json", "to_row", "to_row_plain", "trial_row",
]

JSON_FIELDS = {
    StudyRecord: ("packages", "settings"),
    DatasetRecord: ("columns", "dropped"),
    TrialRecord: ("params", "seed"),
    BaselineRecord: ("losses", "params"),
    HoldoutRecord: ("results",),
    ConfirmRecord: ("seeds", "objectives", "gaps", "summary", "extra"),
    ComparisonRecord: ("results",),
    NoteRecord: (),
}
# fields kept in other tables or columns than the record's own row
SKIPPED = {
    DatasetRecord: ("csv_text",),
    TrialRecord: ("epochs", "valid_forecasts", "weights"),
    BaselineRecord: ("forecasts",),
}
FORECAST_DTYPE = np.dtype("<f8")


def to_json(value: Any) -> str:
    return json.dumps(plain(value))


def from_json(text: str | None) -> Any:
    return None if text is None else json.loads(text)


def to_row(record: Any) -> dict:
    """The record's own columns: JSON for its dicts and lists, plain numbers elsewhere."""
    cls = type(record)
    json_fields, skipped = JSON_FIELDS[cls], SKIPPED.get(cls, ())
    row = {}
    for f in dataclasses.fields(record):
        if f.name in skipped:
            continue
        value = getattr(record, f.name)
        row[f.name] = to_json(value) if f.name in json_fields else plain(value)
    return row


def from_row(cls: type, row: dict, **extra: Any) -> Any:
    """Build ``cls`` from a row written by ``to_row`` (extra columns such as ids are ignored)."""
    names = {f.name for f in dataclasses.fields(cls)}
    kwargs = {k: v for k, v in row.items() if k in names}
    for name in JSON_FIELDS[cls]:
        kwargs[name] = from_json(kwargs[name])
    kwargs.update(extra)
    return cls(**kwargs)


def dataset_row(dataset: DatasetRecord) -> dict:
    row = to_row(dataset)
    data = dataset.csv_text.encode("utf-8")
    row["csv_zlib"] = zlib.compress(data, 6)
    row["csv_sha256"] = hashlib.sha256(data).hexdigest()
    return row


def row_dataset(row: dict) -> DatasetRecord:
    """The dataset with its CSV text; ValueError if the text no longer matches its stored hash."""
    data = zlib.decompress(row["csv_zlib"])
    if hashlib.sha256(data).hexdigest() != row["csv_sha256"]:
        raise ValueError(f"the stored rows of dataset {row['sha256'][:12]} do not match their SHA-256")
    return from_row(DatasetRecord, row, csv_text=data.decode("utf-8"))


def study_row(study: StudyRecord) -> dict:
    return to_row(study)


def row_study(row: dict) -> StudyRecord:
    return from_row(StudyRecord, row)


def _nan_if_null(value: float | None) -> float:
    return float("nan") if value is None else value


def epoch_rows(trial: TrialRecord) -> list[dict]:
    return [
        {"study": trial.study, "number": trial.number, **to_row_plain(e)} for e in trial.epochs
    ]


def to_row_plain(record: Any) -> dict:
    return {f.name: plain(getattr(record, f.name)) for f in dataclasses.fields(record)}


def row_epoch(row: dict) -> EpochRow:
    return EpochRow(
        epoch=row["epoch"],
        train_loss=_nan_if_null(row["train_loss"]),
        valid_loss=_nan_if_null(row["valid_loss"]),
        valid_score=row["valid_score"],
        seconds=_nan_if_null(row["seconds"]),
        fold=row.get("fold") or 0,
    )


def trial_row(trial: TrialRecord) -> dict:
    return to_row(trial)


def row_trial(row: dict, *, epochs=(), valid_forecasts=None, weights=None) -> TrialRecord:
    extra = {"seconds": _nan_if_null(row["seconds"])}
    return from_row(
        TrialRecord, row, epochs=tuple(epochs), valid_forecasts=valid_forecasts, weights=weights, **extra
    )


def array_to_blob(array: np.ndarray) -> dict:
    """Columns ``n_rows``, ``n_cols`` and ``data`` (raw '<f8' bytes, C order) for a 2-d array."""
    array = np.ascontiguousarray(array, dtype=FORECAST_DTYPE)
    n_rows, n_cols = array.shape
    return {"n_rows": n_rows, "n_cols": n_cols, "data": array.tobytes()}


def blob_to_array(row: dict) -> np.ndarray:
    expected = row["n_rows"] * row["n_cols"] * FORECAST_DTYPE.itemsize
    if len(row["data"]) != expected:
        raise ValueError(
            f"forecast blob holds {len(row['data'])} bytes, expected {expected} for shape "
            f"({row['n_rows']}, {row['n_cols']}) float64"
        )
    array = np.frombuffer(row["data"], dtype=FORECAST_DTYPE).reshape(row["n_rows"], row["n_cols"])
    return array.astype(np.float64)  # a native-order, writable copy


def arrays_to_npz(arrays: dict[str, np.ndarray]) -> bytes:
    buffer = io.BytesIO()
    np.savez(buffer, allow_pickle=False, **arrays)
    return buffer.getvalue()


def npz_to_arrays(data: bytes) -> dict[str, np.ndarray]:
    with np.load(io.BytesIO(data), allow_pickle=False) as archive:
        return {name: archive[name] for name in archive.files}


def baseline_row(record: BaselineRecord) -> dict:
    return {**to_row(record), **array_to_blob(record.forecasts)}


def row_baseline(row: dict) -> BaselineRecord:
    return from_row(BaselineRecord, row, forecasts=blob_to_array(row))
