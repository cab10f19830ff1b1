"""Decision notes: dated text on a trial or a whole study, kept in the record and never overwritten."""

from __future__ import annotations

from sweep.errors import InputError
from sweep.record import NoteRecord, Tracker, utc_now

__all__ = ["add_decision_note", "list_notes"]


def add_decision_note(tracker: Tracker, number: int | None, text: str, *, study: str | None = None,
                      author: str | None = None) -> NoteRecord:
    """Add a dated decision note on a trial (``number``) or the whole study (``None``); never overwritten.

    Raises:
        InputError: ``text`` is empty or only spaces.
    """
    if not isinstance(text, str) or not text.strip():
        raise InputError(f"a note needs text, got {text!r}; write the decision in quotes, e.g. "
                         'volsweep note DB 3 "kept: best QLIKE and the smallest gap"')
    record = tracker.find_study(study)
    note = NoteRecord(study=record.name, trial=number, created=utc_now(), text=text, author=author)
    tracker.add_note(note)
    return note


def list_notes(tracker: Tracker, *, study: str | None = None) -> list[dict]:
    """The study's decision notes, oldest first."""
    record = tracker.find_study(study)
    return [{"created": n.created, "trial": n.trial, "author": n.author, "text": n.text}
            for n in tracker.load_notes(record.name)]
