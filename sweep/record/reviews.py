"""The review log of a study: holdout results, confirmations, comparisons and decision notes.

Every entry is appended and never overwritten; holdouts and comparisons are numbered per study
(``sequence``). These functions run inside a write transaction the caller holds
(``sweep.record.tracker.Tracker`` opens it); they work on the ``sqlite_utils.Database`` they are handed.
"""

from __future__ import annotations

import dataclasses

from sweep.errors import RecordError
from sweep.record import rows
from sweep.record.lookups import require_study, require_trial
from sweep.record.schema import COMPARISONS_SCHEMA, COMPARISONS_TABLE
from sweep.record.values import COMPARISON_WINDOWS, ComparisonRecord, ConfirmRecord, HoldoutRecord, NoteRecord

__all__ = [
    "add_comparison",
    "add_confirmation",
    "add_holdout",
    "add_note",
    "load_comparisons",
    "load_confirmations",
    "load_holdouts",
    "load_notes",
]


def _next_sequence(db, table: str, study: str, sequence: int | None, what: str) -> int:
    """``sequence``, or the study's next one when None; RecordError if that number is already taken."""
    last = next(db.query(f"SELECT MAX(sequence) AS n FROM {table} WHERE study = ?", [study]))["n"] or 0
    sequence = last + 1 if sequence is None else sequence
    if next(db.query(f"SELECT 1 AS x FROM {table} WHERE study = ? AND sequence = ?", [study, sequence]), None):
        raise RecordError(f"{what} #{sequence} of study {study!r} is already recorded and is never overwritten; "
                          "leave sequence=None to add the next one")
    return sequence


def _rows(db, location: str, table: str, study: str, trial: int | None, order: str) -> list[dict]:
    require_study(db, location, study)
    if trial is None:
        return list(db.query(f"SELECT * FROM {table} WHERE study = ? ORDER BY {order}", [study]))
    return list(db.query(f"SELECT * FROM {table} WHERE study = ? AND trial = ? ORDER BY {order}",
                         [study, int(trial)]))


def add_holdout(db, location: str, record: HoldoutRecord) -> HoldoutRecord:
    """Append a holdout result; returns it with its ``sequence`` filled in."""
    require_trial(db, location, record.study, record.trial)
    stored = dataclasses.replace(
        record, sequence=_next_sequence(db, "vs_holdouts", record.study, record.sequence, "holdout"))
    db["vs_holdouts"].insert(rows.to_row(stored))
    return stored


def load_holdouts(db, location: str, study: str, trial: int | None = None) -> list[HoldoutRecord]:
    return [rows.from_row(HoldoutRecord, r, again=bool(r["again"]))
            for r in _rows(db, location, "vs_holdouts", study, trial, "sequence")]


def add_confirmation(db, location: str, record: ConfirmRecord) -> None:
    require_trial(db, location, record.study, record.trial)
    db["vs_confirmations"].insert(rows.to_row(record))


def load_confirmations(db, location: str, study: str, trial: int | None = None) -> list[ConfirmRecord]:
    return [rows.from_row(ConfirmRecord, r) for r in _rows(db, location, "vs_confirmations", study, trial, "id")]


def add_comparison(db, location: str, record: ComparisonRecord) -> ComparisonRecord:
    """Append a comparison result (its table is made on first use); returns it with its ``sequence``."""
    require_study(db, location, record.study)
    db.execute(COMPARISONS_SCHEMA)
    stored = dataclasses.replace(
        record, sequence=_next_sequence(db, COMPARISONS_TABLE, record.study, record.sequence, "comparison"))
    db[COMPARISONS_TABLE].insert(rows.to_row(stored))
    return stored


def load_comparisons(db, location: str, study: str, window: str | None = None) -> list[ComparisonRecord]:
    require_study(db, location, study)
    if window is not None and window not in COMPARISON_WINDOWS:
        raise ValueError(f"window must be one of {', '.join(COMPARISON_WINDOWS)} or None; got {window!r}")
    if COMPARISONS_TABLE not in db.table_names():
        return []
    sql, params = f"SELECT * FROM {COMPARISONS_TABLE} WHERE study = ?", [study]
    if window is not None:
        sql, params = sql + ' AND "window" = ?', params + [window]
    return [rows.from_row(ComparisonRecord, r) for r in db.query(sql + " ORDER BY sequence", params)]


def add_note(db, location: str, note: NoteRecord) -> None:
    if note.trial is None:
        require_study(db, location, note.study)
    else:
        require_trial(db, location, note.study, note.trial)
    db["vs_notes"].insert(rows.to_row(note))


def load_notes(db, location: str, study: str, trial: int | None = None) -> list[NoteRecord]:
    return [rows.from_row(NoteRecord, r) for r in _rows(db, location, "vs_notes", study, trial, "id")]
