"""Tests of sweep/record/schema.py: the record's tables, their version, upgrades and write transactions.

Outside references: SQLite's own answers (sqlite_master, PRAGMA foreign_keys and database_list,
https://sqlite.org/pragma.html; BEGIN IMMEDIATE takes the write lock, https://sqlite.org/lang_transaction.html),
read through a separate plain sqlite3 connection where it matters.
"""

import dataclasses
import sqlite3

import pytest
import sqlite_utils

from sample_records import make_dataset, make_study, make_trial
from sweep.record import SCHEMA_VERSION, EpochRow, RecordError, Tracker
from sweep.record.connection import database_location, write_transaction
from sweep.record.schema import TABLES, prepare_schema


def tables_of(db) -> set[str]:
    return {r[0] for r in db.execute("SELECT name FROM sqlite_master WHERE type = 'table'").fetchall()}


def test_prepare_schema_creates_every_table_and_the_version():
    db = sqlite_utils.Database(memory=True)
    prepare_schema(db, ":memory:", create=True)
    # SQLite lists our tables (and its own sqlite_sequence for AUTOINCREMENT keys)
    assert tables_of(db) == set(TABLES) | {"sqlite_sequence"}
    meta = dict(db.execute("SELECT key, value FROM vs_meta").fetchall())
    assert meta["schema_version"] == str(SCHEMA_VERSION) and meta["created"].endswith("+00:00")
    assert db.execute("PRAGMA foreign_keys").fetchone()[0] == 1


def test_prepare_schema_twice_keeps_the_record_as_it_was(tmp_path):
    path = tmp_path / "r.sqlite"
    db = sqlite_utils.Database(path)
    prepare_schema(db, str(path), create=True)
    db.execute("INSERT INTO vs_meta (key, value) VALUES ('note', 'kept')")
    db.conn.commit()
    before = db.execute("SELECT value FROM vs_meta WHERE key = 'created'").fetchone()
    prepare_schema(db, str(path), create=True)
    # a plain sqlite3 connection sees the same row and the first creation time
    plain = sqlite3.connect(path)
    assert plain.execute("SELECT value FROM vs_meta WHERE key = 'note'").fetchall() == [("kept",)]
    assert plain.execute("SELECT value FROM vs_meta WHERE key = 'created'").fetchone() == before


def test_prepare_schema_without_create_refuses_a_database_that_is_not_a_record():
    db = sqlite_utils.Database(memory=True)
    with pytest.raises(RecordError, match=r":memory: is not a volsweep record: it has no vs_meta table "
                                          r"\(tables there: none\); give the .sqlite file"):
        prepare_schema(db, ":memory:", create=False)
    assert tables_of(db) == set()  # nothing was made
    db.execute("CREATE TABLE prices (a)")
    # a database holding other tables is named with them
    with pytest.raises(RecordError, match=r"tables there: prices"):
        prepare_schema(db, ":memory:", create=False)


def test_prepare_schema_with_create_refuses_a_database_holding_other_tables(tmp_path):
    path = tmp_path / "mine.sqlite"
    theirs = sqlite3.connect(path)
    theirs.execute("CREATE TABLE prices (day TEXT, close REAL)")
    theirs.commit()
    theirs.close()
    with pytest.raises(RecordError, match="is not a volsweep record and holds other tables \\(prices\\)"):
        prepare_schema(sqlite_utils.Database(path), str(path), create=True)
    assert {r[0] for r in sqlite3.connect(path).execute("SELECT name FROM sqlite_master")} == {"prices"}


def test_prepare_schema_names_missing_tables_and_unreadable_versions():
    db = sqlite_utils.Database(memory=True)
    prepare_schema(db, ":memory:", create=True)
    db.execute("DROP TABLE vs_notes")
    with pytest.raises(RecordError, match="tables missing: vs_notes; the file may be damaged, use a backup copy"):
        prepare_schema(db, ":memory:", create=False)
    other = sqlite_utils.Database(memory=True)
    prepare_schema(other, ":memory:", create=True)
    other.execute("UPDATE vs_meta SET value = 'two' WHERE key = 'schema_version'")
    with pytest.raises(RecordError, match="vs_meta has no readable schema_version"):
        prepare_schema(other, ":memory:", create=False)


def test_database_location_names_the_file_or_memory(tmp_path):
    assert database_location(sqlite_utils.Database(memory=True)) == ":memory:"
    path = tmp_path / "r.sqlite"
    # PRAGMA database_list gives the absolute file name of the main database
    assert database_location(sqlite_utils.Database(path)) == str(path)


# ---------------------------------------------------------------- versions (moved from test_tracker.py)


def test_open_rejects_a_newer_schema(tmp_path):
    path = tmp_path / "r.sqlite"
    Tracker.open(path).close()
    conn = sqlite3.connect(path)
    conn.execute("UPDATE vs_meta SET value = ? WHERE key = 'schema_version'", [str(SCHEMA_VERSION + 1)])
    conn.commit()
    conn.close()
    with pytest.raises(RecordError, match="written by a newer volsweep .*upgrade volsweep"):
        Tracker.open(path)


def test_open_upgrades_a_schema_1_record_keeping_its_epochs(tmp_path):
    # a record written before epochs carried their fold: same rows, old epochs table, version 1
    path = tmp_path / "old.sqlite"
    with Tracker.open(path) as t:
        t.save_study(make_study(), make_dataset())
        t.record_trial(make_trial(0, n_epochs=3))
    conn = sqlite3.connect(path)
    conn.executescript("""
        CREATE TABLE e1 AS SELECT study, number, epoch, train_loss, valid_loss, valid_score, seconds FROM vs_epochs;
        DROP TABLE vs_epochs;
        CREATE TABLE vs_epochs (study TEXT NOT NULL, number INTEGER NOT NULL, epoch INTEGER NOT NULL,
            train_loss REAL, valid_loss REAL, valid_score REAL, seconds REAL, PRIMARY KEY (study, number, epoch));
        INSERT INTO vs_epochs SELECT * FROM e1;
        DROP TABLE e1;
        UPDATE vs_meta SET value = '1' WHERE key = 'schema_version';
    """)
    conn.commit()
    conn.close()
    with Tracker.open(path) as t:
        # the epochs are still there, all in fold 0, and a trial with two folds can now be written
        assert [(e.fold, e.epoch) for e in t.load_trial("coastal", 0).epochs] == [(0, 1), (0, 2), (0, 3)]
        two_folds = dataclasses.replace(make_trial(1, n_epochs=2), epochs=tuple(
            EpochRow(epoch=e, train_loss=0.5, valid_loss=0.6, fold=f) for f in (0, 1) for e in (1, 2)))
        t.record_trial(two_folds)
        assert [(e.fold, e.epoch) for e in t.load_trial("coastal", 1).epochs] == [(0, 1), (0, 2), (1, 1), (1, 2)]
    version = sqlite3.connect(path).execute("SELECT value FROM vs_meta WHERE key = 'schema_version'").fetchone()
    assert version == (str(SCHEMA_VERSION),)


def test_prepare_schema_upgrades_schema_1_epochs_losslessly():
    # the upgrade copies every epoch column as it was; fold 0 for the single split older studies used
    db = sqlite_utils.Database(memory=True)
    tracker = Tracker(db)
    tracker.save_study(make_study(), make_dataset())
    tracker.record_trial(make_trial(0, n_epochs=0, arrays=False))
    db.executescript("""
        DROP TABLE vs_epochs;
        CREATE TABLE vs_epochs (study TEXT NOT NULL, number INTEGER NOT NULL, epoch INTEGER NOT NULL,
            train_loss REAL, valid_loss REAL, valid_score REAL, seconds REAL, PRIMARY KEY (study, number, epoch));
        INSERT INTO vs_epochs VALUES ('coastal', 0, 1, 0.1, 0.30000000000000004, NULL, 1e-300);
        UPDATE vs_meta SET value = '1' WHERE key = 'schema_version';
    """)
    prepare_schema(db, ":memory:", create=False)
    rows = db.execute("SELECT study, number, fold, epoch, train_loss, valid_loss, valid_score, seconds "
                      "FROM vs_epochs").fetchall()
    assert rows == [("coastal", 0, 0, 1, 0.1, 0.1 + 0.2, None, 1e-300)]
    assert db.execute("SELECT value FROM vs_meta WHERE key = 'schema_version'").fetchone() == (str(SCHEMA_VERSION),)
    assert "vs_epochs_v1" not in tables_of(db)


# ---------------------------------------------------------------- write transactions


def test_write_transaction_commits_or_rolls_back_as_a_whole(tmp_path):
    path = tmp_path / "r.sqlite"
    db = sqlite_utils.Database(sqlite3.connect(path, isolation_level=None))
    prepare_schema(db, str(path), create=True)
    note = "INSERT INTO vs_meta (key, value) VALUES (?, 'v')"
    with write_transaction(db, str(path)):
        db.execute(note, ["first"])
        db.execute(note, ["second"])
    with pytest.raises(RuntimeError, match="disk full"):
        with write_transaction(db, str(path)):
            db.execute(note, ["lost"])
            raise RuntimeError("disk full")
    # another connection sees the committed pair and nothing of the failed transaction
    keys = sqlite3.connect(path).execute("SELECT key FROM vs_meta WHERE value = 'v' ORDER BY key").fetchall()
    assert keys == [("first",), ("second",)]


def test_write_transaction_nested_joins_the_outer_one():
    db = sqlite_utils.Database(memory=True)
    prepare_schema(db, ":memory:", create=True)
    note = "INSERT INTO vs_meta (key, value) VALUES (?, 'v')"
    with pytest.raises(ValueError):
        with write_transaction(db, ":memory:"):
            db.execute(note, ["outer"])
            with write_transaction(db, ":memory:"):
                db.execute(note, ["inner"])
            raise ValueError("after the inner block")
    # the inner block did not commit on its own: the outer failure takes both writes away
    assert db.execute("SELECT COUNT(*) FROM vs_meta WHERE value = 'v'").fetchone()[0] == 0


def test_write_transaction_names_a_busy_file(tmp_path):
    path = tmp_path / "busy.sqlite"
    prepare_schema(sqlite_utils.Database(path), str(path), create=True)
    holder = sqlite3.connect(path, isolation_level=None)
    holder.execute("BEGIN IMMEDIATE")  # another writer holds the write lock
    try:
        impatient = sqlite_utils.Database(sqlite3.connect(path, timeout=0.1))
        with pytest.raises(RecordError, match=r"busy.sqlite is busy: database is locked .*retry when the other "
                                              r"writer finishes"):
            with write_transaction(impatient, str(path)):
                pass
    finally:
        holder.execute("ROLLBACK")
        holder.close()


def test_prepare_schema_makes_a_record_beside_optunas_own_tables(tmp_path):
    # optuna's RDBStorage may make its tables first (`--storage sqlite:///record.sqlite`): the file is still ours
    optuna = pytest.importorskip("optuna")
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    path = tmp_path / "shared.sqlite"
    optuna.create_study(study_name="s", storage=f"sqlite:///{path}")
    prepare_schema(sqlite_utils.Database(path), str(path), create=True)
    tables = {r[0] for r in sqlite3.connect(path).execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    assert {"vs_meta", "vs_trials", "studies", "trials"} <= tables
