"""Typed summaries of a record behind `volsweep top`, `list` and `show`.

Each report is a frozen dataclass whose ``to_dict()`` (``to_list()`` for `list`) gives the JSON shape
the CLI prints with ``--json``; the CLI reads the typed fields for its tables. The logic lives here so it
can be tested without a terminal.

The ranking itself stays in ``sweep.record.ranking``: ``rank_rows`` returns plain dicts (the board reads
them), and `top` wraps each one in a `RankRow`.

Example:
    >>> report = top_report(tracker, n=5)                    # doctest: +SKIP
    >>> [(row.rank, row.trial, row.objective) for row in report.rows]   # doctest: +SKIP
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType
from typing import Any

from sweep.record.ranking import rank_rows, trial_row
from sweep.record.tracker import Tracker
from sweep.record.values import EpochRow, TrialRecord

__all__ = [
    "CurvePoint", "DatasetSummary", "RankRow", "ShowReport", "StudyList", "StudyProvenance", "StudySummary",
    "TopReport", "TrialDetail", "TrialRow", "list_report", "show_report", "top_report",
]


def _frozen(mapping: Mapping) -> Mapping:
    """A read-only view of a shallow copy, so a frozen report cannot be changed through its fields."""
    return MappingProxyType(dict(mapping))


def _field_dict(value) -> dict:
    """The dataclass's fields in declaration order (the JSON key order); mappings become plain dicts."""
    out = {}
    for f in dataclasses.fields(value):
        item = getattr(value, f.name)
        out[f.name] = dict(item) if isinstance(item, Mapping) else item
    return out


# ---------------------------------------------------------------- rows of the ranking and of one trial

@dataclass(frozen=True)
class TrialRow:
    """A trial or a baseline as one row; the fields are ``sweep.record.trial_row``'s keys, in its order.

    Attributes:
        kind: "trial" or "baseline".
        trial: the trial number, or the baseline's name.
        state: a trial state, or "baseline".
        objective: the study's objective on the validation window; None when missing.
        train_loss, valid_loss, gap, gap_ratio: a trial's losses at its best epoch (None for baselines).
        best_epoch, epochs: the best epoch and the number of epochs run (None for baselines).
        stop_reason: why training stopped (None for baselines and unfinished trials).
        seconds: training time (None for baselines).
        params: the trial's settings, or the baseline's fitted parameters (read-only).
    """

    kind: str
    trial: int | str
    state: str
    objective: float | None
    train_loss: float | None
    valid_loss: float | None
    gap: float | None
    gap_ratio: float | None
    best_epoch: int | None
    epochs: int | None
    stop_reason: str | None
    seconds: float | None
    params: Mapping[str, Any]

    def __post_init__(self):
        object.__setattr__(self, "params", _frozen(self.params))

    def to_dict(self) -> dict:
        """The row as ``trial_row``/``rank_rows`` give it: same keys, same order."""
        return _field_dict(self)


@dataclass(frozen=True)
class RankRow(TrialRow):
    """One row of `volsweep top`: a `TrialRow` with its place in the ranking.

    Attributes:
        rank: 1-based position over all ranked rows, baselines included.
        beats_best_baseline: whether a trial's objective is below the best validation-window baseline's;
            None for baselines, and when there is no baseline or no objective.
    """

    rank: int
    beats_best_baseline: bool | None

    @classmethod
    def from_row(cls, row: Mapping[str, Any]) -> RankRow:
        """Wrap one dict of ``rank_rows``; a key it does not know is a bug and raises TypeError."""
        return cls(**row)


@dataclass(frozen=True)
class CurvePoint:
    """One epoch of a trial's learning curve."""

    epoch: int
    train_loss: float
    valid_loss: float
    valid_score: float | None
    seconds: float

    @classmethod
    def from_epoch(cls, e: EpochRow) -> CurvePoint:
        return cls(epoch=e.epoch, train_loss=e.train_loss, valid_loss=e.valid_loss, valid_score=e.valid_score,
                   seconds=e.seconds)

    def to_dict(self) -> dict:
        return _field_dict(self)


@dataclass(frozen=True)
class TrialDetail(TrialRow):
    """One trial in full for `volsweep show`: its `TrialRow` and how it ran.

    Attributes:
        seed: the trial's seed sequence.
        started, finished: ISO times (None while unknown).
        error: the failure's message, if the trial failed.
        worker: the process that ran it.
        curve: one point per recorded epoch.
        has_weights: whether the record holds the trial's trained weights.
    """

    seed: tuple[int, ...]
    started: str | None
    finished: str | None
    error: str | None
    worker: str
    curve: tuple[CurvePoint, ...]
    has_weights: bool

    @classmethod
    def from_record(cls, t: TrialRecord) -> TrialDetail:
        return cls(**trial_row(t), seed=tuple(t.seed), started=t.started, finished=t.finished, error=t.error,
                   worker=t.worker, curve=tuple(CurvePoint.from_epoch(e) for e in t.epochs),
                   has_weights=t.weights is not None)

    def to_dict(self) -> dict:
        out = _field_dict(self)
        out["seed"] = list(self.seed)
        out["curve"] = [p.to_dict() for p in self.curve]
        return out


# ---------------------------------------------------------------- top

@dataclass(frozen=True)
class TopReport:
    """The ranking of one study (`volsweep top`).

    Attributes:
        study: the study's name.
        objective: the name of its objective (the table's column title).
        rows: the first rows of the ranking, baselines included and marked.
    """

    study: str
    objective: str
    rows: tuple[RankRow, ...]

    def to_dict(self) -> dict:
        return {"study": self.study, "objective": self.objective, "rows": [r.to_dict() for r in self.rows]}


def top_report(tracker: Tracker, *, study=None, n=20, sort="objective", states=None) -> TopReport:
    """The ranking of a study, baselines included and marked.

    Args:
        tracker: an open record.
        study: the study's name (None when the record holds one study).
        n: how many rows to keep.
        sort: a key of ``sweep.record.SORT_KEYS``.
        states: keep only trials in these states (None: every state).

    Raises:
        StudyNotFound: no such study, or several and none named.
        InputError: an unknown sort key or state.
    """
    record = tracker.find_study(study)
    trials = tracker.load_trials(record.name)
    rows = rank_rows(trials, tracker.load_baselines(record.name), sort=sort,
                     states=tuple(states) if states else None)
    return TopReport(study=record.name, objective=record.objective,
                     rows=tuple(RankRow.from_row(r) for r in rows[:n]))


# ---------------------------------------------------------------- list

@dataclass(frozen=True)
class StudySummary:
    """One study of a record, as `volsweep list` shows it (``Tracker.list_studies`` explains the values)."""

    name: str
    created: str
    objective: str
    direction: str
    n_trials: int
    trials: Mapping[str, int]
    best_trial: int | None
    best_objective: float | None
    dataset: str
    dataset_sha256: str
    n_rows: int

    def __post_init__(self):
        object.__setattr__(self, "trials", _frozen(self.trials))

    @classmethod
    def from_dict(cls, summary: Mapping[str, Any]) -> StudySummary:
        """Wrap one dict of ``Tracker.list_studies``; a key it does not know is a bug and raises TypeError."""
        return cls(**summary)

    def to_dict(self) -> dict:
        return _field_dict(self)


@dataclass(frozen=True)
class StudyList:
    """The studies a record holds, oldest first (`volsweep list`)."""

    studies: tuple[StudySummary, ...]

    def to_list(self) -> list[dict]:
        """The JSON of `volsweep list --json`: a list with one dict per study."""
        return [s.to_dict() for s in self.studies]


def list_report(tracker: Tracker) -> StudyList:
    """Every study of the record with its trial counts and best trial."""
    return StudyList(studies=tuple(StudySummary.from_dict(s) for s in tracker.list_studies()))


# ---------------------------------------------------------------- show

@dataclass(frozen=True)
class StudyProvenance:
    """Where and with what a study was made."""

    name: str
    created: str
    objective: str
    code_version: str
    git_commit: str | None
    python: str
    platform: str
    packages: Mapping[str, str]
    spec_hash: str

    def __post_init__(self):
        object.__setattr__(self, "packages", _frozen(self.packages))

    def to_dict(self) -> dict:
        return _field_dict(self)


@dataclass(frozen=True)
class DatasetSummary:
    """The price data a study trained on, named by its SHA-256."""

    sha256: str
    source: str
    rows: int
    first_date: str
    last_date: str

    def to_dict(self) -> dict:
        return _field_dict(self)


@dataclass(frozen=True)
class ShowReport:
    """One trial in full with its study's provenance and data (`volsweep show`)."""

    study: StudyProvenance
    dataset: DatasetSummary
    trial: TrialDetail

    def to_dict(self) -> dict:
        return {"study": self.study.to_dict(), "dataset": self.dataset.to_dict(), "trial": self.trial.to_dict()}


def show_report(tracker: Tracker, number: int, *, study=None) -> ShowReport:
    """One trial in full, with the study's provenance.

    Raises:
        StudyNotFound: no such study, or several and none named.
        TrialNotFound: the study has no trial with that number.
    """
    record = tracker.find_study(study)
    t = tracker.load_trial(record.name, number)
    dataset = tracker.load_dataset(record.dataset_sha256)
    return ShowReport(
        study=StudyProvenance(
            name=record.name, created=record.created, objective=record.objective,
            code_version=record.code_version, git_commit=record.git_commit, python=record.python,
            platform=record.platform, packages=record.packages, spec_hash=record.spec_hash,
        ),
        dataset=DatasetSummary(sha256=dataset.sha256, source=dataset.source, rows=dataset.n_rows,
                               first_date=dataset.first_date, last_date=dataset.last_date),
        trial=TrialDetail.from_record(t),
    )
