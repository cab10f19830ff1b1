"""Who is working on a study: one row per worker process (host, pid, a heartbeat), so that a trial is
taken from a worker only when that worker is known to be dead.

A worker is dead when its row says it ended, when it ran on this host and its process is gone, or when
its last heartbeat is older than `GRACE_SECONDS` (a worker on another machine, or a frozen one).
"""

from __future__ import annotations

import os
import socket
import time

from sweep.record.values import utc_now

__all__ = ["GRACE_SECONDS", "HEARTBEAT_SECONDS", "beat", "end", "is_dead", "register"]

HEARTBEAT_SECONDS = 5.0   # how often a live worker says so
GRACE_SECONDS = 60.0      # a heartbeat older than this marks a worker on another host as dead


def register(db, study: str) -> int:
    """A new worker row for this process (call inside a write transaction); returns its id."""
    cursor = db.conn.execute("INSERT INTO vs_workers (study, host, pid, started, beat) VALUES (?, ?, ?, ?, ?)",
                             [study, socket.gethostname(), os.getpid(), utc_now(), time.time()])
    return int(cursor.lastrowid)


def beat(db, worker: int) -> None:
    db.conn.execute("UPDATE vs_workers SET beat = ? WHERE id = ?", [time.time(), int(worker)])


def end(db, worker: int) -> None:
    db.conn.execute("UPDATE vs_workers SET ended = 1, beat = ? WHERE id = ?", [time.time(), int(worker)])


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # a process of another user holds that pid
        return True
    return True


def is_dead(db, worker: int, *, now: float | None = None, grace: float = GRACE_SECONDS) -> bool:
    """True when the worker ended, its process is gone from this host, or its heartbeat is older than ``grace``.

    A worker id the record does not know is dead (no live worker was ever registered under it).
    """
    row = db.conn.execute("SELECT host, pid, beat, ended FROM vs_workers WHERE id = ?", [int(worker)]).fetchone()
    if row is None:
        return True
    host, pid, last, ended = row
    if ended:
        return True
    if host == socket.gethostname() and not _pid_alive(int(pid)):
        return True
    return (time.time() if now is None else now) - last > grace
