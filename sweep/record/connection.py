"""How a record file is opened and written: the connection, write transactions, and the SQLite errors a
user can act on, each turned into one named error.

Writers take the write lock first (``BEGIN IMMEDIATE``), polling for it; a record in a folder that
cannot be written opens read-only.
"""

from __future__ import annotations

import contextlib
import functools
import os
import sqlite3
import time
import urllib.parse
from pathlib import Path
from typing import Iterator

from sweep.errors import RecordError, RecordNotFound

__all__ = [
    "BUSY_TIMEOUT", "POLL_SECONDS", "connect_file", "database_location", "export_copy", "named_problem", "names_sqlite_problems",
    "write_transaction",
]

BUSY_TIMEOUT = 30.0
POLL_SECONDS = 0.0005  # how often a writer tries again for the write lock


def connect_file(path: Path, *, create: bool, shared: bool = False) -> tuple[sqlite3.Connection, bool]:
    """A connection to the record file at ``path`` and whether it is read-only.

    A record that can be written gets a WAL journal, ``synchronous=NORMAL`` and a 30 s busy timeout. An
    existing record in a folder or file that cannot be written (an archive, a reviewer's copy) is opened
    read-only and immutable: every reading command works, and a write is refused by name.
    ``shared`` lets other threads use the connection (the caller serialises its use with a lock).

    Raises:
        RecordNotFound: ``path`` does not exist and ``create`` is False, or its folder does not exist.
        RecordError: the file is not an SQLite database.
    """
    if not path.exists() and not create:
        raise RecordNotFound(f"no record file at {path}; check the path, or run `volsweep run STUDY.toml` to make one")
    if not path.parent.is_dir():
        raise RecordNotFound(f"cannot create {path}: folder {path.parent} does not exist; create it first")
    read_only = path.exists() and not create and not (os.access(path, os.W_OK) and os.access(path.parent, os.W_OK))
    conn = None
    try:
        if read_only:
            uri = f"file:{urllib.parse.quote(str(path.resolve()))}?mode=ro&immutable=1"
            conn = sqlite3.connect(uri, uri=True, timeout=BUSY_TIMEOUT, check_same_thread=not shared)
        else:
            conn = sqlite3.connect(str(path), timeout=BUSY_TIMEOUT, check_same_thread=not shared)
            conn.execute("PRAGMA journal_mode=WAL")
            conn.execute("PRAGMA synchronous=NORMAL")
    except sqlite3.DatabaseError as exc:
        if conn is not None:
            conn.close()
        raise (named_problem(str(path), exc) or RecordError(f"{path} is not a volsweep record: {exc}")) from exc
    return conn, read_only


def named_problem(location: str, exc: sqlite3.DatabaseError) -> RecordError | None:
    """The named error for an SQLite error a user can act on, or None for one that is a bug.

    A damaged file, a full disk, a file or folder that cannot be written, and a lock held too long are
    problems of the file or the machine: each gets one line naming the file and what to do.
    """
    text = str(exc)
    if type(exc) is sqlite3.DatabaseError and "not a database" in text:
        return RecordError(f"{location} is not a volsweep record: {text}; give the .sqlite file that "
                           "`volsweep run` wrote")
    if type(exc) is sqlite3.DatabaseError:  # "database disk image is malformed"
        return RecordError(f"{location} is damaged ({text}); check it with `sqlite3 {location} 'PRAGMA "
                           "integrity_check'` and restore a backup copy of the file")
    if "disk is full" in text or "disk I/O error" in text:
        return RecordError(f"cannot write {location}: {text}; the record is as it was before this write: free "
                           "some space and run the same command again")
    if "readonly" in text or "unable to open database file" in text:
        return RecordError(f"cannot write {location}: {text}; the file or its folder is read-only: copy the "
                           "record to a folder you can write, or run there")
    if "database is locked" in text:
        return RecordError(f"{location} is busy: another process held it for {BUSY_TIMEOUT:.0f} s; run again "
                           "when it is done")
    return None


def names_sqlite_problems(cls):
    """Every public method of ``cls`` turns SQLite errors a user can act on into one named RecordError."""

    def guarded(method):
        @functools.wraps(method)
        def wrapper(self, *args, **kwargs):
            try:
                return method(self, *args, **kwargs)
            except sqlite3.DatabaseError as exc:
                problem = named_problem(self.location, exc)
                if problem is None:
                    raise
                raise problem from exc

        return wrapper

    for name, value in list(vars(cls).items()):
        if not name.startswith("_") and callable(value):
            setattr(cls, name, guarded(value))
    return cls


def database_location(db) -> str:
    """The file behind ``db`` as given to SQLite, or ":memory:"."""
    for r in db.conn.execute("PRAGMA database_list"):
        if r[1] == "main":
            return r[2] or ":memory:"
    return ":memory:"


def _begin_immediate(conn: sqlite3.Connection, location: str) -> None:
    """Take the write lock, polling every half millisecond while another process holds it.

    SQLite's own busy handler sleeps 1, 2, 5, 10 ... 100 ms between tries; several worker processes
    each writing a dozen short transactions per trial would lose most of their time in those sleeps.
    """
    timeout_ms = conn.execute("PRAGMA busy_timeout").fetchone()[0]  # the connection's own (30 s for a record)
    deadline = time.monotonic() + timeout_ms / 1000
    conn.execute("PRAGMA busy_timeout = 0")
    try:
        while True:
            try:
                conn.execute("BEGIN IMMEDIATE")
                return
            except sqlite3.OperationalError as exc:
                if "locked" not in str(exc) and "busy" not in str(exc):
                    raise
                if time.monotonic() > deadline:
                    raise RecordError(
                        f"{location} is busy: {exc} (another process held the write lock for "
                        f"{timeout_ms / 1000:g} s); retry when the other writer finishes"
                    ) from exc
                time.sleep(POLL_SECONDS)
    finally:
        conn.execute(f"PRAGMA busy_timeout = {timeout_ms}")


@contextlib.contextmanager
def write_transaction(db, location: str) -> Iterator[None]:
    """One write transaction that takes the write lock first (``BEGIN IMMEDIATE``); nested calls join it.

    Raises:
        RecordError: another process held the write lock for longer than ``BUSY_TIMEOUT``.
    """
    conn = db.conn
    if conn.in_transaction:
        with db.atomic():
            yield
        return
    _begin_immediate(conn, location)
    try:
        yield
    except BaseException:
        if conn.in_transaction:
            conn.execute("ROLLBACK")
        raise
    else:
        conn.execute("COMMIT")


def export_copy(conn: sqlite3.Connection, location: str, path: Path) -> Path:
    """Copy every page of the record behind ``conn`` as of one moment (SQLite's online backup) to a new
    file at ``path``, its journal folded in: one self-contained file.

    Raises:
        RecordError: ``path`` exists already (an export never overwrites) or its folder does not.
    """
    if path.exists() or not path.parent.is_dir():
        why = ("exists already (an export never overwrites)" if path.exists()
               else f"folder {path.parent} does not exist")
        raise RecordError(f"cannot export {location} to {path}: {why}; give a new file name")
    target = sqlite3.connect(str(path))
    try:
        conn.backup(target)
        target.execute("PRAGMA journal_mode=DELETE")  # one file: no -wal beside it
    except BaseException:
        target.close()
        path.unlink(missing_ok=True)
        raise
    target.close()
    return path
