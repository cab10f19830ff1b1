"""The tracker's foundations: errors, the schema, transactions and lookups.

Private to ``sweep/tracker.py`` (with ``_tracker_reviews.py``): together they are the tracker,
the one part of the project that touches SQL. Only ``tracker.py`` imports sqlite_utils; this
module works on the ``sqlite_utils.Database`` it is handed.

Our tables carry a ``vs_`` prefix so optuna's RDBStorage tables (``studies``, ``trials``,
``version_info``, ...) can share the file.
"""

from __future__ import annotations

import contextlib
import sqlite3
from typing import Iterable, Iterator

from sweep.errors import VolsweepError
from sweep.records import utc_now

__all__ = [
    "BUSY_TIMEOUT",
    "SCHEMA_VERSION",
    "TABLES",
    "RecordError",
    "RecordNotFound",
    "StudyNotFound",
    "TrackerBase",
    "TrialNotFound",
]

SCHEMA_VERSION = 2  # 2: epochs carry their walk-forward fold
BUSY_TIMEOUT = 30.0
_TRIAL_KEY = "study TEXT NOT NULL, number INTEGER NOT NULL"
_TRIAL_FK = "FOREIGN KEY (study, number) REFERENCES vs_trials (study, number) ON DELETE CASCADE"
_STUDY_FK = "study TEXT NOT NULL REFERENCES vs_studies (name) ON DELETE CASCADE"
_EPOCHS_TABLE = f"""CREATE TABLE IF NOT EXISTS vs_epochs (
    {_TRIAL_KEY}, fold INTEGER NOT NULL DEFAULT 0, epoch INTEGER NOT NULL, train_loss REAL,
    valid_loss REAL, valid_score REAL, seconds REAL, PRIMARY KEY (study, number, fold, epoch), {_TRIAL_FK});"""
_SCHEMA = f"""
CREATE TABLE IF NOT EXISTS vs_meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS vs_datasets (
    sha256 TEXT PRIMARY KEY, source TEXT NOT NULL, n_rows INTEGER NOT NULL, first_date TEXT,
    last_date TEXT, columns TEXT NOT NULL, csv_zlib BLOB NOT NULL, csv_sha256 TEXT NOT NULL,
    dropped TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS vs_studies (
    name TEXT PRIMARY KEY, spec_text TEXT NOT NULL, spec_hash TEXT NOT NULL, search_hash TEXT NOT NULL,
    created TEXT NOT NULL, code_version TEXT, git_commit TEXT, packages TEXT NOT NULL, python TEXT,
    platform TEXT, machine TEXT, dataset_sha256 TEXT NOT NULL REFERENCES vs_datasets (sha256),
    objective TEXT NOT NULL, direction TEXT NOT NULL, task TEXT NOT NULL, storage TEXT, sampler TEXT,
    pruner TEXT, settings TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS vs_trials (
    {_STUDY_FK}, number INTEGER NOT NULL, state TEXT NOT NULL, params TEXT NOT NULL, seed TEXT NOT NULL,
    best_epoch INTEGER, n_epochs INTEGER, stop_reason TEXT, objective REAL, train_loss REAL,
    valid_loss REAL, gap REAL, gap_ratio REAL, started TEXT, finished TEXT, seconds REAL, error TEXT,
    worker TEXT, PRIMARY KEY (study, number));
CREATE INDEX IF NOT EXISTS vs_trials_state ON vs_trials (study, state);
{{epochs_table}}
CREATE TABLE IF NOT EXISTS vs_forecasts (
    {_TRIAL_KEY}, n_rows INTEGER NOT NULL, n_cols INTEGER NOT NULL, data BLOB NOT NULL,
    PRIMARY KEY (study, number), {_TRIAL_FK});
CREATE TABLE IF NOT EXISTS vs_weights (
    {_TRIAL_KEY}, npz BLOB NOT NULL, PRIMARY KEY (study, number), {_TRIAL_FK});
CREATE TABLE IF NOT EXISTS vs_baselines (
    {_STUDY_FK}, name TEXT NOT NULL, "window" TEXT NOT NULL, objective REAL, losses TEXT NOT NULL,
    params TEXT NOT NULL, n_rows INTEGER NOT NULL, n_cols INTEGER NOT NULL, data BLOB NOT NULL,
    PRIMARY KEY (study, name, "window"));
CREATE TABLE IF NOT EXISTS vs_holdouts (
    study TEXT NOT NULL, sequence INTEGER NOT NULL, trial INTEGER NOT NULL, created TEXT NOT NULL,
    command TEXT NOT NULL, again INTEGER NOT NULL, results TEXT NOT NULL, PRIMARY KEY (study, sequence),
    FOREIGN KEY (study, trial) REFERENCES vs_trials (study, number) ON DELETE CASCADE);
CREATE TABLE IF NOT EXISTS vs_confirmations (
    id INTEGER PRIMARY KEY AUTOINCREMENT, study TEXT NOT NULL, trial INTEGER NOT NULL,
    created TEXT NOT NULL, seeds TEXT NOT NULL, objectives TEXT NOT NULL, gaps TEXT NOT NULL,
    summary TEXT NOT NULL, extra TEXT NOT NULL,
    FOREIGN KEY (study, trial) REFERENCES vs_trials (study, number) ON DELETE CASCADE);
CREATE TABLE IF NOT EXISTS vs_notes (
    id INTEGER PRIMARY KEY AUTOINCREMENT, {_STUDY_FK}, trial INTEGER, created TEXT NOT NULL,
    text TEXT NOT NULL, author TEXT,
    FOREIGN KEY (study, trial) REFERENCES vs_trials (study, number));
""".replace("{epochs_table}", _EPOCHS_TABLE)
TABLES = ("vs_meta", "vs_datasets", "vs_studies", "vs_trials", "vs_epochs", "vs_forecasts",
          "vs_weights", "vs_baselines", "vs_holdouts", "vs_confirmations", "vs_notes")


class RecordError(VolsweepError):
    """The file cannot be used as a record: not SQLite, damaged, from a newer volsweep, or busy."""


class RecordNotFound(VolsweepError):
    """A record file, dataset or other record that was asked for is not there."""


class StudyNotFound(RecordNotFound):
    """No study of that name in the file (or no name given and the file holds several)."""


class TrialNotFound(RecordNotFound):
    """The study has no trial of that number."""


class TrackerBase:
    """The connection, the schema check and the helpers every tracker method uses.

    Args:
        db: an open ``sqlite_utils.Database``.
        create: make the tables if the file has none yet; otherwise a file without them
            raises ``RecordError``.

    Raises:
        RecordError: the database is not a volsweep record or was written by a newer version.
    """

    def __init__(self, db, *, create: bool = True):
        self.db = db
        self.location = _location(db)
        try:
            db.execute("PRAGMA foreign_keys=ON")
            tables = set(db.table_names())
        except sqlite3.DatabaseError as exc:
            raise RecordError(f"{self.location} is not a volsweep record: {exc}") from exc
        if "vs_meta" in tables:
            self._check_schema(tables)
        elif create:
            self._create_schema()
        else:
            listed = ", ".join(sorted(tables)) or "none"
            raise RecordError(
                f"{self.location} is not a volsweep record: it has no vs_meta table (tables there: "
                f"{listed}); give the .sqlite file that `volsweep run` wrote"
            )

    def close(self) -> None:
        """Fold the WAL back into the file (so the .sqlite alone can be copied) and close."""
        with contextlib.suppress(sqlite3.Error):
            self.db.execute("PRAGMA wal_checkpoint(TRUNCATE)")
        self.db.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc_info) -> None:
        self.close()

    def _create_schema(self) -> None:
        with self._transaction():
            self.db.executescript(_SCHEMA)
            self.db.execute(
                "INSERT OR IGNORE INTO vs_meta (key, value) VALUES ('schema_version', ?), ('created', ?)",
                [str(SCHEMA_VERSION), utc_now()],
            )

    def _check_schema(self, tables: set[str]) -> None:
        found = self._one("SELECT value FROM vs_meta WHERE key = 'schema_version'")
        try:
            version = int(found["value"])
        except (TypeError, ValueError):
            raise RecordError(
                f"{self.location} is not a volsweep record: vs_meta has no readable schema_version "
                f"({found!r}); the file may be damaged, use a backup copy"
            ) from None
        if version > SCHEMA_VERSION:
            raise RecordError(
                f"{self.location} was written by a newer volsweep (record schema {version}; this version "
                f"reads up to {SCHEMA_VERSION}); upgrade volsweep to open it"
            )
        missing = [t for t in TABLES if t not in tables]
        if missing:
            raise RecordError(
                f"{self.location} is not a volsweep record: tables missing: {', '.join(missing)}; "
                "the file may be damaged, use a backup copy"
            )
        if version < SCHEMA_VERSION:
            self._upgrade(version)

    def _upgrade(self, version: int) -> None:
        """Bring a record from an older schema up to this one, in place and in one transaction."""
        with self._transaction():
            if version < 2:  # epochs gain their fold (0: the single split every older study used)
                self.db.execute("ALTER TABLE vs_epochs RENAME TO vs_epochs_v1")
                self.db.execute(_EPOCHS_TABLE)
                self.db.execute(
                    "INSERT INTO vs_epochs (study, number, fold, epoch, train_loss, valid_loss, valid_score, "
                    "seconds) SELECT study, number, 0, epoch, train_loss, valid_loss, valid_score, seconds "
                    "FROM vs_epochs_v1"
                )
                self.db.execute("DROP TABLE vs_epochs_v1")
            self.db.execute("UPDATE vs_meta SET value = ? WHERE key = 'schema_version'", [str(SCHEMA_VERSION)])

    @contextlib.contextmanager
    def _transaction(self) -> Iterator[None]:
        """One write transaction that takes the write lock first (``BEGIN IMMEDIATE``)."""
        conn = self.db.conn
        if conn.in_transaction:
            with self.db.atomic():
                yield
            return
        try:
            conn.execute("BEGIN IMMEDIATE")
        except sqlite3.OperationalError as exc:
            raise RecordError(
                f"{self.location} is busy: {exc} (another process held the write lock for "
                f"{BUSY_TIMEOUT:.0f} s); retry when the other writer finishes"
            ) from exc
        try:
            yield
        except BaseException:
            if conn.in_transaction:
                conn.execute("ROLLBACK")
            raise
        else:
            conn.execute("COMMIT")

    def _one(self, sql: str, params: Iterable = ()) -> dict | None:
        return next(self.db.query(sql, list(params)), None)

    def _all(self, sql: str, params: Iterable = ()) -> list[dict]:
        return list(self.db.query(sql, list(params)))

    def _study_names(self) -> list[str]:
        return [r["name"] for r in self._all("SELECT name FROM vs_studies ORDER BY created, name")]

    def _require_study(self, name: str) -> None:
        if self._one("SELECT 1 AS x FROM vs_studies WHERE name = ?", [name]) is None:
            names = self._study_names()
            listed = ", ".join(names) if names else "none yet"
            raise StudyNotFound(
                f"no study named {name!r} in {self.location}; studies there: {listed} "
                f"(see `volsweep list {self.location}`)"
            )

    def _trial_row(self, study: str, number: int) -> dict:
        self._require_study(study)
        found = self._one("SELECT * FROM vs_trials WHERE study = ? AND number = ?", [study, int(number)])
        if found is None:
            span = self._one("SELECT COUNT(*) AS n, MIN(number) AS lo, MAX(number) AS hi FROM vs_trials "
                             "WHERE study = ?", [study])
            held = f"{span['n']} trials, numbers {span['lo']}-{span['hi']}" if span["n"] else "no trials yet"
            raise TrialNotFound(
                f"study {study!r} in {self.location} has no trial {number} ({held}); "
                f"see `volsweep list {self.location}`"
            )
        return found


def _location(db) -> str:
    """The file behind ``db`` as given to SQLite, or ":memory:"."""
    for r in db.conn.execute("PRAGMA database_list"):
        if r[1] == "main":
            return r[2] or ":memory:"
    return ":memory:"
