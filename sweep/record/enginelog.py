"""The engine's log kept in the record: optuna's journal entries as JSON text, numbered from 0 in the
order they were written, so that everything needed to resume a study lives in the record itself.

Entries are appended inside a write transaction the caller holds (``BEGIN IMMEDIATE``, so numbers are
given out one writer at a time and never twice); readers see only committed entries.
"""

from __future__ import annotations

from sweep.record.schema import ENGINE_LOG_TABLE

__all__ = ["append_entries", "read_entries"]


def append_entries(db, entries: list[str]) -> None:
    """Append ``entries`` after the last one (call inside a write transaction)."""
    start = db.conn.execute(f"SELECT COALESCE(MAX(number), -1) + 1 FROM {ENGINE_LOG_TABLE}").fetchone()[0]
    db.conn.executemany(f"INSERT INTO {ENGINE_LOG_TABLE} (number, entry) VALUES (?, ?)",
                        [(start + i, entry) for i, entry in enumerate(entries)])


def read_entries(db, start: int = 0) -> list[str]:
    """Every entry numbered ``start`` or later, in order."""
    return [row[0] for row in db.conn.execute(
        f"SELECT entry FROM {ENGINE_LOG_TABLE} WHERE number >= ? ORDER BY number", [int(start)])]
