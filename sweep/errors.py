"""Every named error of volsweep: a problem the user can fix, printed by the CLI as one line.

Each error says what was wrong, what was received and what to do. Anything that is not one of
these (or `trainers.price_checks.PriceFileError`, the price reader's own) is a bug: the CLI lets
its traceback through and asks for a report.
"""

from __future__ import annotations

from pathlib import Path

__all__ = [
    "BoardError",
    "DataError",
    "HoldoutAlreadyUsed",
    "InputError",
    "RecordError",
    "RecordNotFound",
    "ReviewError",
    "SpecError",
    "StudyChanged",
    "StudyNotFound",
    "TrialNotFound",
    "VolsweepError",
]


class VolsweepError(Exception):
    """A problem the user can fix; the CLI prints it as one line and exits 1."""


class SpecError(VolsweepError):
    """A study file that cannot be used; `problems` holds one line per mistake."""

    def __init__(self, problems, *, path: str | Path | None = None):
        self.problems = tuple(problems)
        self.path = path
        where = f"study file {path}" if path is not None else "study spec"
        if len(self.problems) == 1:
            message = f"{where}: {self.problems[0]}"
        else:
            lines = "\n".join(f"  {p}" for p in self.problems)
            message = f"{where} has {len(self.problems)} problems:\n{lines}"
        super().__init__(message)


class DataError(VolsweepError):
    """The price file of a study has problems, or too few rows for what the study asks of it."""


class InputError(VolsweepError, ValueError):
    """A value given on the command line or to a public function is outside what it accepts.

    Also a ``ValueError``, as a bad argument to a Python function is."""


class StudyChanged(VolsweepError):
    """The study file changed (data or search) since the study was created."""


class RecordError(VolsweepError):
    """The file cannot be used as a record: not SQLite, damaged, from a newer volsweep, or busy."""


class RecordNotFound(VolsweepError):
    """A record file, dataset or other record that was asked for is not there."""


class StudyNotFound(RecordNotFound):
    """No study of that name in the file (or no name given and the file holds several)."""


class TrialNotFound(RecordNotFound):
    """The study has no trial of that number."""


class ReviewError(VolsweepError):
    """A review command cannot do what was asked (wrong trial state, window not opened, bad file...)."""


class HoldoutAlreadyUsed(ReviewError):
    """The study's test window was already used; ``previous`` holds the earlier holdout records."""

    def __init__(self, message: str, previous: list):
        super().__init__(message)
        self.previous = previous


class BoardError(VolsweepError):
    """The board cannot be written where it was asked to go."""
