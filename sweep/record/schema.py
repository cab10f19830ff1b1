"""The record's tables: the schema, its version, and the upgrades of older records.

Our tables carry a ``vs_`` prefix so optuna's RDBStorage tables (``studies``, ``trials``,
``version_info``, ...) can share the file. Functions here work on the ``sqlite_utils.Database``
they are handed; ``sweep.record.tracker.Tracker`` is the one class that uses them.

``vs_comparisons`` came after the first schema: it is made on the first comparison recorded (so
files written before it still open), and a file without it reads as holding no comparisons.
"""

from __future__ import annotations

import sqlite3

from sweep.errors import RecordError
from sweep.record.connection import named_problem, write_transaction
from sweep.record.values import utc_now

__all__ = [
    "COMPARISONS_SCHEMA", "COMPARISONS_TABLE", "ENGINE_LOG_TABLE", "ENGINE_TABLES", "SCHEMA_VERSION", "TABLES",
    "prepare_schema",
]

SCHEMA_VERSION = 3  # 2: epochs carry their walk-forward fold; 3: the engine's log lives in the record
_TRIAL_KEY = "study TEXT NOT NULL, number INTEGER NOT NULL"
_TRIAL_FK = "FOREIGN KEY (study, number) REFERENCES vs_trials (study, number) ON DELETE CASCADE"
_STUDY_FK = "study TEXT NOT NULL REFERENCES vs_studies (name) ON DELETE CASCADE"
_EPOCHS_TABLE = f"""CREATE TABLE IF NOT EXISTS vs_epochs (
    {_TRIAL_KEY}, fold INTEGER NOT NULL DEFAULT 0, epoch INTEGER NOT NULL, train_loss REAL,
    valid_loss REAL, valid_score REAL, seconds REAL, PRIMARY KEY (study, number, fold, epoch), {_TRIAL_FK});"""
ENGINE_LOG_TABLE = "vs_engine_log"
_ENGINE_LOG = f"""CREATE TABLE IF NOT EXISTS {ENGINE_LOG_TABLE} (number INTEGER PRIMARY KEY, entry TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS vs_workers (
    id INTEGER PRIMARY KEY AUTOINCREMENT, study TEXT NOT NULL, host TEXT NOT NULL, pid INTEGER NOT NULL,
    started TEXT NOT NULL, beat REAL NOT NULL, ended INTEGER NOT NULL DEFAULT 0);"""
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
{{engine_log}}
""".replace("{epochs_table}", _EPOCHS_TABLE).replace("{engine_log}", _ENGINE_LOG)
# optuna's RDBStorage tables (optuna 4-5), which may share a record's file (`--storage sqlite:///record.sqlite`)
ENGINE_TABLES = frozenset({
    "alembic_version", "studies", "study_directions", "study_system_attributes", "study_user_attributes",
    "trial_heartbeats", "trial_intermediate_values", "trial_params", "trial_system_attributes",
    "trial_user_attributes", "trial_values", "trials", "version_info",
})
TABLES = ("vs_meta", "vs_datasets", "vs_studies", "vs_trials", "vs_epochs", "vs_forecasts",
          "vs_weights", "vs_baselines", "vs_holdouts", "vs_confirmations", "vs_notes", ENGINE_LOG_TABLE, "vs_workers")


COMPARISONS_TABLE = "vs_comparisons"
COMPARISONS_SCHEMA = f"""
CREATE TABLE IF NOT EXISTS {COMPARISONS_TABLE} (
    study TEXT NOT NULL REFERENCES vs_studies (name) ON DELETE CASCADE, sequence INTEGER NOT NULL,
    created TEXT NOT NULL, "window" TEXT NOT NULL, command TEXT NOT NULL, results TEXT NOT NULL,
    PRIMARY KEY (study, sequence))
"""




def prepare_schema(db, location: str, *, create: bool, read_only: bool = False) -> None:
    """Check that ``db`` is a volsweep record (upgrading an older one in place), or make the tables.

    With ``create``, the tables are made only in an empty database or one that holds optuna's tables alone;
    a database holding anything else is refused and left as it was. A ``read_only`` record of an older
    schema is read as it is (schema 2 and later read the same way); it is upgraded when next opened for writing.

    Raises:
        RecordError: the database is not a volsweep record (and ``create`` is False, or it holds other
            tables), is damaged, or was written by a newer version.
    """
    try:
        db.execute("PRAGMA foreign_keys=ON")
        tables = set(db.table_names())
    except sqlite3.DatabaseError as exc:
        raise (named_problem(location, exc) or RecordError(f"{location} is not a volsweep record: {exc}")) from exc
    others = sorted(t for t in tables - ENGINE_TABLES if not t.startswith("sqlite_"))
    if "vs_meta" in tables:
        _check_schema(db, location, tables, read_only=read_only)
    elif create and not others:
        with write_transaction(db, location):
            db.executescript(_SCHEMA)
            db.execute(
                "INSERT OR IGNORE INTO vs_meta (key, value) VALUES ('schema_version', ?), ('created', ?)",
                [str(SCHEMA_VERSION), utc_now()],
            )
    elif create:
        raise RecordError(
            f"{location} is not a volsweep record and holds other tables ({', '.join(others)}); volsweep "
            "writes nothing into it: give the record a new file name"
        )
    else:
        listed = ", ".join(sorted(tables)) or "none"
        raise RecordError(
            f"{location} is not a volsweep record: it has no vs_meta table (tables there: "
            f"{listed}); give the .sqlite file that `volsweep run` wrote"
        )


def _check_schema(db, location: str, tables: set[str], *, read_only: bool = False) -> None:
    found = next(db.query("SELECT value FROM vs_meta WHERE key = 'schema_version'"), None)
    try:
        version = int(found["value"])
    except (TypeError, ValueError):
        raise RecordError(
            f"{location} is not a volsweep record: vs_meta has no readable schema_version "
            f"({found!r}); the file may be damaged, use a backup copy"
        ) from None
    if version > SCHEMA_VERSION:
        raise RecordError(
            f"{location} was written by a newer volsweep (record schema {version}; this version "
            f"reads up to {SCHEMA_VERSION}); upgrade volsweep to open it"
        )
    expected = TABLES if version >= 3 else [t for t in TABLES if t not in (ENGINE_LOG_TABLE, "vs_workers")]
    missing = [t for t in expected if t not in tables]
    if missing:
        raise RecordError(
            f"{location} is not a volsweep record: tables missing: {', '.join(missing)}; "
            "the file may be damaged, use a backup copy"
        )
    if version < SCHEMA_VERSION and read_only:
        if version < 2:
            raise RecordError(f"{location} is a read-only record of schema {version}, which must be upgraded before "
                              "it can be read: copy it to a folder you can write and open the copy")
    elif version < SCHEMA_VERSION:
        _upgrade(db, location, version)


def _upgrade(db, location: str, version: int) -> None:
    """Bring a record from an older schema up to this one, in place and in one transaction."""
    with write_transaction(db, location):
        if version < 2:  # epochs gain their fold (0: the single split every older study used)
            db.execute("ALTER TABLE vs_epochs RENAME TO vs_epochs_v1")
            db.execute(_EPOCHS_TABLE)
            db.execute(
                "INSERT INTO vs_epochs (study, number, fold, epoch, train_loss, valid_loss, valid_score, "
                "seconds) SELECT study, number, 0, epoch, train_loss, valid_loss, valid_score, seconds "
                "FROM vs_epochs_v1"
            )
            db.execute("DROP TABLE vs_epochs_v1")
        if version < 3:  # the engine's log moves into the record (an old journal file is copied in on resume)
            for statement in _ENGINE_LOG.split(";"):  # and the workers' liveness rows
                if statement.strip():
                    db.execute(statement)
        db.execute("UPDATE vs_meta SET value = ? WHERE key = 'schema_version'", [str(SCHEMA_VERSION)])


