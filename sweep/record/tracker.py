"""The record: one SQLite file holding studies, their data, trials and reviews.

``Tracker`` is the one class that reads and writes it; with ``sweep/record/schema.py`` (the tables,
upgrades and transactions) it is the only part of the project that speaks SQL. Our tables carry a
``vs_`` prefix so optuna's own tables (``studies``, ``trials``, ...) can live in the same file: a
study copied as its one ``.sqlite`` file is complete.

SQLite keeps NaN as NULL: a NaN trial loss or objective reads back as None, a NaN epoch loss
as NaN. Arrays read back bit for bit.

Open one ``Tracker`` per process (and per thread). Every write runs in one ``BEGIN IMMEDIATE``
transaction, so several worker processes can write to one file (WAL, 30 s busy timeout).

Example:
    >>> tracker = Tracker.memory()
    >>> tracker.list_studies()
    []
"""

from __future__ import annotations

import contextlib
import sqlite3
import zlib
from pathlib import Path
from typing import Iterable

import numpy as np
import sqlite_utils

from sweep.errors import RecordError, RecordNotFound, StudyNotFound
from sweep.record import enginelog, liveness, reviews, rows
from sweep.record.connection import (
    connect_file, database_location, export_copy, names_sqlite_problems, write_transaction,
)
from sweep.record.lookups import require_study, require_trial, study_names, study_summaries
from sweep.record.schema import prepare_schema
from sweep.record.values import (
    BASELINE_WINDOWS, TRIAL_STATES, BaselineRecord, ComparisonRecord, ConfirmRecord,
    DatasetRecord, HoldoutRecord, NoteRecord, StudyRecord, TrialRecord, check_weights,
)

__all__ = ["Tracker"]


@names_sqlite_problems
class Tracker:
    """Reads and writes the record in one SQLite database.

    Args:
        db: an open ``sqlite_utils.Database`` (use ``Tracker.open`` for a file).
        create: make the tables if the file has none yet; otherwise a file without them
            raises ``RecordError``.

    Raises:
        RecordError: the database is not a volsweep record or was written by a newer version.
    """

    def __init__(self, db, *, create: bool = True, read_only: bool = False):
        self.db = db
        self.location = database_location(db)
        self.read_only = read_only
        prepare_schema(db, self.location, create=create, read_only=read_only)


    @classmethod
    def open(cls, path: str | Path, *, create: bool = True, shared: bool = False) -> Tracker:
        """Open (or create) the record file at ``path``: WAL journal, 30 s busy timeout. ``shared`` lets other
        threads use this tracker; the caller serialises their calls.

        Raises:
            RecordNotFound: ``path`` does not exist and ``create`` is False.
            RecordError: the file is not a volsweep record.
        """
        conn, read_only = connect_file(Path(path), create=create, shared=shared)
        try:
            tracker = cls(sqlite_utils.Database(conn), create=create, read_only=read_only)
        except BaseException:
            conn.close()
            raise
        tracker.location = str(path)  # messages name the file as the user gave it
        return tracker

    @classmethod
    def memory(cls) -> Tracker:
        """A new, empty record in memory (for tests and dry runs)."""
        return cls(sqlite_utils.Database(memory=True))

    def close(self) -> None:
        """Fold the WAL back into the file (so the .sqlite alone can be copied) and close."""
        with contextlib.suppress(sqlite3.Error):
            self.db.execute("PRAGMA wal_checkpoint(TRUNCATE)")
        self.db.close()

    def export(self, path: str | Path) -> Path:
        """Write a consistent copy of the whole record to a new file (``connection.export_copy``), even while
        other processes write to it; the copy reopens, redraws and replays anywhere.

        Raises:
            RecordError: ``path`` exists already (an export never overwrites) or its folder does not.
        """
        return export_copy(self.db.conn, self.location, Path(path))

    def __enter__(self):
        return self

    def __exit__(self, *exc_info) -> None:
        self.close()

    # ------------------------------------------------------------------ studies and datasets

    def save_study(self, study: StudyRecord, dataset: DatasetRecord) -> None:
        """Record a study and its dataset in one transaction (a dataset is stored once per sha256).

        Saving a study again with the same spec and dataset hashes keeps the first record.

        Raises:
            ValueError: ``study.dataset_sha256`` is not ``dataset.sha256``.
            RecordError: a study of that name exists with another spec or dataset.
        """
        if study.dataset_sha256 != dataset.sha256:
            raise ValueError(
                f"study {study.name!r} names dataset {study.dataset_sha256[:12]} but the dataset given is "
                f"{dataset.sha256[:12]}; pass the DatasetRecord of the price file the study uses"
            )
        with self._transaction():
            old = self._one("SELECT spec_hash, dataset_sha256 FROM vs_studies WHERE name = ?", [study.name])
            if old is not None:
                if (old["spec_hash"], old["dataset_sha256"]) != (study.spec_hash, study.dataset_sha256):
                    raise RecordError(
                        f"{self.location} already holds a study named {study.name!r} with another spec or "
                        f"dataset (spec {old['spec_hash'][:12]}, data {old['dataset_sha256'][:12]}); "
                        "give the new study another name or another record file"
                    )
                return
            if self._one("SELECT 1 AS x FROM vs_datasets WHERE sha256 = ?", [dataset.sha256]) is None:
                self.db["vs_datasets"].insert(rows.dataset_row(dataset))
            self.db["vs_studies"].insert(rows.study_row(study))

    def find_study(self, name: str | None = None) -> StudyRecord:
        """The study called ``name``, or with ``name=None`` the file's only study.

        Raises:
            StudyNotFound: no such study, no study at all, or several and no name given.
        """
        if name is None:
            names = self._study_names()
            if not names:
                raise StudyNotFound(
                    f"{self.location} holds no study yet; run `volsweep run STUDY.toml` to start one"
                )
            if len(names) > 1:
                raise StudyNotFound(
                    f"{self.location} holds {len(names)} studies: {', '.join(names)}; name the one you "
                    f"mean (see `volsweep list {self.location}`)"
                )
            name = names[0]
        self._require_study(name)
        return rows.row_study(self._one("SELECT * FROM vs_studies WHERE name = ?", [name]))

    def list_studies(self) -> list[dict]:
        """One summary dict per study, oldest first (``sweep.record.schema.study_summaries``)."""
        return study_summaries(self.db)

    def load_dataset(self, sha256: str) -> DatasetRecord:
        """The dataset with this SHA-256, rows included.

        Raises:
            RecordNotFound: no dataset with that hash in the file.
            RecordError: the stored rows are damaged (their SHA-256 no longer matches).
        """
        found = self._one("SELECT * FROM vs_datasets WHERE sha256 = ?", [sha256])
        if found is None:
            raise RecordNotFound(
                f"no dataset {sha256[:12]}... in {self.location}; `volsweep list {self.location}` "
                "shows the datasets of its studies"
            )
        try:
            return rows.row_dataset(found)
        except (ValueError, zlib.error) as exc:
            raise RecordError(f"{self.location} is damaged: {exc}; use a backup copy of the file") from exc

    # ------------------------------------------------------------------ trials

    def record_trial(self, trial: TrialRecord) -> None:
        """Insert or replace a trial with its epochs, forecasts and weights, in one transaction.

        The stored trial becomes exactly ``trial``: epochs, forecasts or weights it lacks are removed.

        Raises:
            StudyNotFound: the study was not saved first (``save_study``).
        """
        with self._transaction():
            self._require_study(trial.study)
            self.db["vs_trials"].upsert(rows.trial_row(trial), pk=("study", "number"))
            key = {"study": trial.study, "number": trial.number}
            for table in ("vs_epochs", "vs_forecasts", "vs_weights"):
                self.db.execute(f"DELETE FROM {table} WHERE study = ? AND number = ?", [trial.study, trial.number])
            if trial.epochs:
                self.db["vs_epochs"].insert_all(rows.epoch_rows(trial))
            if trial.valid_forecasts is not None:
                self.db["vs_forecasts"].insert({**key, **rows.array_to_blob(trial.valid_forecasts)})
            if trial.weights is not None:
                self.db["vs_weights"].insert({**key, "npz": rows.arrays_to_npz(trial.weights)})

    def load_trials(self, study: str, *, states: Iterable[str] | None = None, with_epochs: bool = False,
                    with_forecasts: bool = False) -> list[TrialRecord]:
        """The study's trials in number order, without weights (``load_trial`` gives those).

        Args:
            study: study name.
            states: keep only these states (any of "complete", "pruned", "failed", "running").
            with_epochs: attach each trial's learning curve.
            with_forecasts: attach each trial's validation forecasts.
        """
        self._require_study(study)
        where, params = "study = ?", [study]
        if states is not None:
            states = [states] if isinstance(states, str) else list(states)
            if not states:
                return []
            bad = [s for s in states if s not in TRIAL_STATES]
            if bad:
                raise ValueError(f"states must be taken from {', '.join(TRIAL_STATES)}; got {bad!r}")
            where += f" AND state IN ({', '.join('?' * len(states))})"
            params += states
        found = self._all(f"SELECT * FROM vs_trials WHERE {where} ORDER BY number", params)
        epochs: dict[int, list] = {}
        if with_epochs:
            for r in self._all("SELECT * FROM vs_epochs WHERE study = ? ORDER BY number, fold, epoch", [study]):
                epochs.setdefault(r["number"], []).append(rows.row_epoch(r))
        forecasts = {}
        if with_forecasts:
            for r in self._all("SELECT * FROM vs_forecasts WHERE study = ?", [study]):
                forecasts[r["number"]] = rows.blob_to_array(r)
        return [
            rows.row_trial(r, epochs=epochs.get(r["number"], ()), valid_forecasts=forecasts.get(r["number"]))
            for r in found
        ]

    def load_curves(self, study: str, numbers: Iterable[int]) -> dict[int, list[tuple[int, int, float | None]]]:
        """Validation-score curves of some trials: number -> [(fold, epoch, valid_score), ...] in order.

        Lighter than ``load_trials(with_epochs=True)``: the pruning view of a worker reads only the
        curves of trials it has not seen yet.
        """
        numbers = [int(n) for n in numbers]
        curves: dict[int, list[tuple[int, int, float | None]]] = {n: [] for n in numbers}
        for start in range(0, len(numbers), 500):  # SQLite limits the number of bound parameters
            chunk = numbers[start:start + 500]
            sql = (f"SELECT number, fold, epoch, valid_score FROM vs_epochs WHERE study = ? "
                   f"AND number IN ({', '.join('?' * len(chunk))}) ORDER BY number, fold, epoch")
            for r in self._all(sql, [study, *chunk]):
                curves[r["number"]].append((r["fold"], r["epoch"], r["valid_score"]))
        return curves

    def load_trial(self, study: str, number: int) -> TrialRecord:
        """One trial in full: epochs, validation forecasts and weights.

        Raises:
            StudyNotFound, TrialNotFound: no such study or trial.
        """
        found = self._trial_row(study, number)
        key = [study, int(number)]
        epochs = [rows.row_epoch(r) for r in
                  self._all("SELECT * FROM vs_epochs WHERE study = ? AND number = ? ORDER BY fold, epoch", key)]
        blob = self._one("SELECT * FROM vs_forecasts WHERE study = ? AND number = ?", key)
        return rows.row_trial(found, epochs=epochs, valid_forecasts=None if blob is None else rows.blob_to_array(blob),
                              weights=self.load_weights(study, number))

    def save_weights(self, study: str, number: int, arrays: dict[str, np.ndarray]) -> None:
        """Store (or replace) a recorded trial's network arrays, e.g. ``Network.to_arrays()``."""
        arrays = check_weights("weights", arrays)
        with self._transaction():
            self._trial_row(study, number)
            self.db["vs_weights"].upsert(
                {"study": study, "number": int(number), "npz": rows.arrays_to_npz(arrays)}, pk=("study", "number")
            )

    def load_weights(self, study: str, number: int) -> dict[str, np.ndarray] | None:
        """A trial's network arrays, or None if none were stored (loaded with ``allow_pickle=False``)."""
        self._trial_row(study, number)
        found = self._one("SELECT npz FROM vs_weights WHERE study = ? AND number = ?", [study, int(number)])
        return None if found is None else rows.npz_to_arrays(found["npz"])

    # ------------------------------------------------------------------ reviews

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
            return reviews.add_holdout(self.db, self.location, record)

    def load_holdouts(self, study: str, trial: int | None = None) -> list[HoldoutRecord]:
        """The study's holdout results in sequence order (optionally one trial's)."""
        return reviews.load_holdouts(self.db, self.location, study, trial)

    def record_confirmation(self, record: ConfirmRecord) -> None:
        """Add a confirmation (a trial retrained on fresh seeds); earlier ones are kept."""
        with self._transaction():
            reviews.add_confirmation(self.db, self.location, record)

    def load_confirmations(self, study: str, trial: int | None = None) -> list[ConfirmRecord]:
        """The study's confirmations, oldest first (optionally one trial's)."""
        return reviews.load_confirmations(self.db, self.location, study, trial)

    def record_comparison(self, record: ComparisonRecord) -> ComparisonRecord:
        """Add a comparison result (never overwritten); returns it with its ``sequence`` filled in.

        Raises:
            StudyNotFound: the study is not in the record.
            RecordError: a comparison with that sequence number is already recorded.
        """
        with self._transaction():
            return reviews.add_comparison(self.db, self.location, record)

    def load_comparisons(self, study: str, window: str | None = None) -> list[ComparisonRecord]:
        """The study's comparison results in sequence order; ``window`` "valid" or "test" keeps one window."""
        return reviews.load_comparisons(self.db, self.location, study, window)

    def add_note(self, note: NoteRecord) -> None:
        """Add a decision note; notes are never overwritten or removed."""
        with self._transaction():
            reviews.add_note(self.db, self.location, note)

    def load_notes(self, study: str, trial: int | None = None) -> list[NoteRecord]:
        """The study's notes, oldest first (optionally only those on one trial)."""
        return reviews.load_notes(self.db, self.location, study, trial)

    # ------------------------------------------------------------------ the engine's log

    def append_engine_log(self, entries: list[str]) -> None:
        """Append optuna's journal entries (JSON text) to the record's engine log, in one transaction."""
        with self._transaction():
            enginelog.append_entries(self.db, entries)

    def read_engine_log(self, start: int = 0) -> list[str]:
        """The engine log's entries from number ``start`` on (0: all), in the order they were written."""
        return enginelog.read_entries(self.db, start)

    def transaction(self) -> contextlib.AbstractContextManager[None]:
        """Hold the record's write lock for a block: other processes' writes wait until it ends, and this
        tracker's own writes inside it join it (the engine claims a trial this way)."""
        return self._transaction()

    def register_worker(self, study: str) -> int:
        """A liveness row for this process working on ``study``; returns the worker's id (unique in the record)."""
        with self._transaction():
            return liveness.register(self.db, study)

    def beat_worker(self, worker: int, *, ended: bool = False) -> None:
        """Say the worker is alive (or, with ``ended``, that it has stopped for good)."""
        with self._transaction():
            (liveness.end if ended else liveness.beat)(self.db, worker)

    def worker_is_dead(self, worker: int) -> bool:
        """True when the worker ended, its process is gone from this host, or its heartbeat is too old."""
        return liveness.is_dead(self.db, worker)

    # ------------------------------------------------------------------ helpers

    def _transaction(self) -> contextlib.AbstractContextManager[None]:
        return write_transaction(self.db, self.location)

    def _one(self, sql: str, params: Iterable = ()) -> dict | None:
        return next(self.db.query(sql, list(params)), None)

    def _all(self, sql: str, params: Iterable = ()) -> list[dict]:
        return list(self.db.query(sql, list(params)))

    def _study_names(self) -> list[str]:
        return study_names(self.db)

    def _require_study(self, name: str) -> None:
        require_study(self.db, self.location, name)

    def _trial_row(self, study: str, number: int) -> dict:
        return require_trial(self.db, self.location, study, number)
