"""The board's review section: notes, confirmations, holdout results and comparisons, as typed rows.

``collect_review(tracker, study)`` reads the study's review records into a ``BoardReview``. What the
review steps recorded as JSON stays as they recorded it: a confirmation's ``seeds``, ``summary`` and
``extra``, a holdout's ``results`` (model -> metric -> value), and a comparison's Diebold-Mariano rows,
confidence set and SPA result (the dicts ``sweep.review.compare_forecasts`` returns).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from sweep.record import COMPARISON_WINDOWS, Tracker

__all__ = [
    "BoardReview",
    "Comparison",
    "Confirmation",
    "HoldoutShown",
    "Note",
    "RankingSentence",
    "collect_comparisons",
    "collect_review",
]


@dataclass(frozen=True)
class Note:
    """A decision note; ``trial`` None is a note on the whole study."""

    created: str
    trial: int | None
    author: str | None
    text: str


@dataclass(frozen=True)
class Confirmation:
    """A trial retrained on fresh seeds: one objective and gap per seed, as recorded."""

    created: str
    trial: int
    seeds: list
    objectives: list[float]
    gaps: list[float]
    summary: dict
    extra: dict


@dataclass(frozen=True)
class RankingSentence:
    """One confirm run's sentence on whether the recorded ranking holds on fresh seeds."""

    created: str
    words: str


@dataclass(frozen=True)
class HoldoutShown:
    """One look at the test window.

    Attributes:
        sequence, trial, created, command, again, results: as recorded (``results``: model -> metric -> value).
        metrics: the metric names of ``results``, the study's objective first, then the others by name.
        n_uses: how many holdout results the study holds (the times the test window was used).
        repeat: True for every look after the first, or one recorded with ``again``.
    """

    sequence: int | None
    trial: int
    created: str
    command: str
    again: bool
    results: dict[str, Any]
    metrics: tuple[str, ...]
    n_uses: int
    repeat: bool


@dataclass(frozen=True)
class Comparison:
    """The latest recorded forecast comparison on one window.

    Attributes:
        sequence, created, window, command: as recorded.
        objective, level, rows, first_date, last_date: from the comparison's results.
        dm: its Diebold-Mariano rows on the all-horizons loss (dicts, as recorded, each with ``words``).
        dm_horizon: the horizon the all-horizons loss stands for, as recorded.
        mcs: the model confidence set (a dict with ``words``; empty when not recorded).
        spa: the SPA result (a dict with ``benchmark`` and ``words``), or None with ``spa_skipped``'s reason.
    """

    sequence: int | None
    created: str
    window: str
    command: str
    objective: str | None
    level: float | None
    rows: int | None
    first_date: str | None
    last_date: str | None
    dm: list[dict]
    dm_horizon: Any
    mcs: dict
    spa: dict | None
    spa_skipped: str | None


@dataclass(frozen=True)
class BoardReview:
    """The review records of one study.

    Attributes:
        notes, confirmations: every one recorded, oldest first.
        rankings: one sentence per confirm run that said whether the ranking holds.
        holdouts: every look at the test window; ``n_holdouts`` how many there are.
        comparisons: the latest comparison per window (valid first); ``n_comparisons`` how many were recorded.
    """

    notes: tuple[Note, ...] = ()
    confirmations: tuple[Confirmation, ...] = ()
    rankings: tuple[RankingSentence, ...] = ()
    holdouts: tuple[HoldoutShown, ...] = ()
    n_holdouts: int = 0
    comparisons: tuple[Comparison, ...] = ()
    n_comparisons: int = 0

    @property
    def has_records(self) -> bool:
        """True when there is a note, confirmation, holdout result or comparison to show."""
        return bool(self.notes or self.confirmations or self.rankings or self.holdouts or self.comparisons)


def collect_review(tracker: Tracker, study: str, *, objective: str | None = None) -> BoardReview:
    """Notes, confirmations, holdout results and comparisons of ``study``, with their dates.

    Each holdout gets ``n_uses`` (how many holdout results the study holds: the number of times the
    test window was used) and ``repeat`` (True for every look after the first, or one recorded with
    ``again``). Holdout ``metrics`` list the study's ``objective`` first, then the others by name.
    """
    notes = tuple(Note(created=n.created, trial=n.trial, author=n.author, text=n.text)
                  for n in tracker.load_notes(study))
    confirmations = tuple(Confirmation(created=c.created, trial=c.trial, seeds=c.seeds, objectives=c.objectives,
                                       gaps=c.gaps, summary=c.summary, extra=c.extra)
                          for c in tracker.load_confirmations(study))
    # one sentence per confirm run (its confirmations share `created`): does the ranking hold?
    rankings: list[RankingSentence] = []
    for c in confirmations:
        words = (c.extra or {}).get("ranking", {}).get("words")
        if words and all(r.created != c.created for r in rankings):
            rankings.append(RankingSentence(created=c.created, words=words))
    holdouts = tracker.load_holdouts(study)
    n_uses = len(holdouts)
    looks = []
    for h in holdouts:
        metrics = sorted({m for v in h.results.values() if isinstance(v, dict) for m in v},
                         key=lambda m: (m != objective, m))  # the study's objective first
        looks.append(HoldoutShown(sequence=h.sequence, trial=h.trial, created=h.created, command=h.command,
                                 again=h.again, results=h.results, metrics=tuple(metrics), n_uses=n_uses,
                                 repeat=bool(h.again or (h.sequence or 1) > 1)))
    comparisons, n_comparisons = collect_comparisons(tracker, study)
    return BoardReview(notes=notes, confirmations=confirmations, rankings=tuple(rankings), holdouts=tuple(looks),
                       n_holdouts=n_uses, comparisons=comparisons, n_comparisons=n_comparisons)


def collect_comparisons(tracker: Tracker, study: str) -> tuple[tuple[Comparison, ...], int]:
    """The latest recorded comparison per window (valid first), and how many comparisons the study holds.

    Each keeps its Diebold-Mariano rows on the all-horizons loss (the per-horizon rows stay in the
    record), the confidence set and the SPA result, each with its plain-words reading.
    """
    found = tracker.load_comparisons(study)
    latest = {c.window: c for c in found}  # in sequence order, so the last one per window wins
    shown = []
    for window in COMPARISON_WINDOWS:
        if window not in latest:
            continue
        c, r = latest[window], latest[window].results
        shown.append(Comparison(
            sequence=c.sequence, created=c.created, window=window, command=c.command,
            objective=r.get("objective"), level=r.get("level"), rows=r.get("rows"),
            first_date=r.get("first_date"), last_date=r.get("last_date"),
            dm=[d for d in r.get("dm", []) if d.get("horizon") == "all"],
            dm_horizon=r.get("dm_horizon_all"), mcs=r.get("mcs") or {}, spa=r.get("spa"),
            spa_skipped=r.get("spa_skipped")))
    return tuple(shown), len(found)
