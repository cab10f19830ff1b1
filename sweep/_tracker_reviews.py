"""Baselines, holdout results, confirmations, comparisons and decision notes: the review half of the tracker.

Private to ``sweep/tracker.py``; ``Tracker`` inherits these methods.

``vs_comparisons`` came after the first schema: it is made on the first ``record_comparison`` (so
files written before it still open), and ``load_comparisons`` reads a file without it as empty.
"""

from __future__ import annotations

import dataclasses

from sweep import _record_rows as rows
from sweep._tracker_base import RecordError, TrackerBase
from sweep.records import (
    BASELINE_WINDOWS,
    COMPARISON_WINDOWS,
    BaselineRecord,
    ComparisonRecord,
    ConfirmRecord,
    HoldoutRecord,
    NoteRecord,
)

__all__ = ["COMPARISONS_TABLE", "ReviewsMixin"]

COMPARISONS_TABLE = "vs_comparisons"
_COMPARISONS_SCHEMA = f"""
CREATE TABLE IF NOT EXISTS {COMPARISONS_TABLE} (
    study TEXT NOT NULL REFERENCES vs_studies (name) ON DELETE CASCADE, sequence INTEGER NOT NULL,
    created TEXT NOT NULL, "window" TEXT NOT NULL, command TEXT NOT NULL, results TEXT NOT NULL,
    PRIMARY KEY (study, sequence))
"""


class ReviewsMixin(TrackerBase):
    """Record and load what the review commands add to a study."""

    def record_baselines(self, records: list[BaselineRecord]) -> None:
        """Insert or replace baselines (key: study, name, window) in one transaction."""
        if not records:
            return
        with self._transaction():
            for study in sorted({r.study for r in records}):
                self._require_study(study)
            self.db["vs_baselines"].upsert_all(
                [rows.baseline_row(r) for r in records], pk=("study", "name", "window")
            )

    def load_baselines(self, study: str, window: str | None = None) -> list[BaselineRecord]:
        """A study's baselines, by window then name; ``window`` "valid" or "test" keeps one window."""
        self._require_study(study)
        if window is not None and window not in BASELINE_WINDOWS:
            raise ValueError(f"window must be one of {', '.join(BASELINE_WINDOWS)} or None; got {window!r}")
        sql, params = 'SELECT * FROM vs_baselines WHERE study = ?', [study]
        if window is not None:
            sql, params = sql + ' AND "window" = ?', params + [window]
        return [rows.row_baseline(r) for r in self._all(sql + ' ORDER BY "window" DESC, name', params)]

    def record_holdout(self, record: HoldoutRecord) -> HoldoutRecord:
        """Add a holdout result (never overwritten); returns it with its ``sequence`` filled in.

        Raises:
            RecordError: a holdout with that sequence number is already recorded.
        """
        with self._transaction():
            self._trial_row(record.study, record.trial)
            last = self._one("SELECT MAX(sequence) AS n FROM vs_holdouts WHERE study = ?", [record.study])["n"] or 0
            sequence = last + 1 if record.sequence is None else record.sequence
            if sequence <= last and self._one("SELECT 1 AS x FROM vs_holdouts WHERE study = ? AND sequence = ?",
                                              [record.study, sequence]):
                raise RecordError(
                    f"holdout #{sequence} of study {record.study!r} is already recorded and is never "
                    "overwritten; leave sequence=None to add the next one"
                )
            stored = dataclasses.replace(record, sequence=sequence)
            self.db["vs_holdouts"].insert(rows.to_row(stored))
        return stored

    def load_holdouts(self, study: str, trial: int | None = None) -> list[HoldoutRecord]:
        """The study's holdout results in sequence order (optionally one trial's)."""
        return [rows.from_row(HoldoutRecord, r, again=bool(r["again"]))
                for r in self._review_rows("vs_holdouts", study, trial, "sequence")]

    def record_confirmation(self, record: ConfirmRecord) -> None:
        """Add a confirmation (a trial retrained on fresh seeds); earlier ones are kept."""
        with self._transaction():
            self._trial_row(record.study, record.trial)
            self.db["vs_confirmations"].insert(rows.to_row(record))

    def load_confirmations(self, study: str, trial: int | None = None) -> list[ConfirmRecord]:
        """The study's confirmations, oldest first (optionally one trial's)."""
        return [rows.from_row(ConfirmRecord, r) for r in self._review_rows("vs_confirmations", study, trial, "id")]

    def record_comparison(self, record: ComparisonRecord) -> ComparisonRecord:
        """Add a comparison result (never overwritten); returns it with its ``sequence`` filled in.

        Raises:
            StudyNotFound: the study is not in the record.
            RecordError: a comparison with that sequence number is already recorded.
        """
        with self._transaction():
            self._require_study(record.study)
            self.db.execute(_COMPARISONS_SCHEMA)
            last = self._one(f"SELECT MAX(sequence) AS n FROM {COMPARISONS_TABLE} WHERE study = ?",
                             [record.study])["n"] or 0
            sequence = last + 1 if record.sequence is None else record.sequence
            if self._one(f"SELECT 1 AS x FROM {COMPARISONS_TABLE} WHERE study = ? AND sequence = ?",
                         [record.study, sequence]):
                raise RecordError(
                    f"comparison #{sequence} of study {record.study!r} is already recorded and is never "
                    "overwritten; leave sequence=None to add the next one"
                )
            stored = dataclasses.replace(record, sequence=sequence)
            self.db[COMPARISONS_TABLE].insert(rows.to_row(stored))
        return stored

    def load_comparisons(self, study: str, window: str | None = None) -> list[ComparisonRecord]:
        """The study's comparison results in sequence order; ``window`` "valid" or "test" keeps one window."""
        self._require_study(study)
        if window is not None and window not in COMPARISON_WINDOWS:
            raise ValueError(f"window must be one of {', '.join(COMPARISON_WINDOWS)} or None; got {window!r}")
        if COMPARISONS_TABLE not in self.db.table_names():
            return []
        sql, params = f"SELECT * FROM {COMPARISONS_TABLE} WHERE study = ?", [study]
        if window is not None:
            sql, params = sql + ' AND "window" = ?', params + [window]
        return [rows.from_row(ComparisonRecord, r) for r in self._all(sql + " ORDER BY sequence", params)]

    def add_note(self, note: NoteRecord) -> None:
        """Add a decision note; notes are never overwritten or removed."""
        with self._transaction():
            if note.trial is None:
                self._require_study(note.study)
            else:
                self._trial_row(note.study, note.trial)
            self.db["vs_notes"].insert(rows.to_row(note))

    def load_notes(self, study: str, trial: int | None = None) -> list[NoteRecord]:
        """The study's notes, oldest first (optionally only those on one trial)."""
        return [rows.from_row(NoteRecord, r) for r in self._review_rows("vs_notes", study, trial, "id")]

    def _review_rows(self, table: str, study: str, trial: int | None, order: str) -> list[dict]:
        self._require_study(study)
        if trial is None:
            return self._all(f"SELECT * FROM {table} WHERE study = ? ORDER BY {order}", [study])
        return self._all(f"SELECT * FROM {table} WHERE study = ? AND trial = ? ORDER BY {order}", [study, int(trial)])
