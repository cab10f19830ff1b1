"""Decision notes: dated text on a trial or a whole study, kept in the record and never overwritten."""

from __future__ import annotations

from dataclasses import dataclass

from sweep.errors import InputError
from sweep.record import NoteRecord, Tracker, utc_now

__all__ = ["DecisionNote", "add_decision_note", "list_notes"]


@dataclass(frozen=True)
class DecisionNote:
    """One decision note as the review commands show it: when, on which trial (None: the study), by whom."""

    created: str
    trial: int | None
    author: str | None
    text: str

    def to_dict(self) -> dict:
        return {"created": self.created, "trial": self.trial, "author": self.author, "text": self.text}


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


def list_notes(tracker: Tracker, *, study: str | None = None) -> list[DecisionNote]:
    """The study's decision notes, oldest first (``[n.to_dict() for n in notes]`` is the CLI's JSON)."""
    record = tracker.find_study(study)
    return [DecisionNote(created=n.created, trial=n.trial, author=n.author, text=n.text)
            for n in tracker.load_notes(record.name)]
