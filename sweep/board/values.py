"""The values the board's data step hands to its figure and render steps: frozen dataclasses, no records.

``collect_board`` (``sweep/board/data.py``) builds a ``BoardData``; ``build_figures`` and ``render_board``
only read it. The review section's values live beside the code that builds them, in
``sweep/board/reviews.py``; setting importance is ``sweep.search.SettingImportance``.

Dicts that stay dicts: a header's ``space``, ``fixed``, ``counts`` and ``windows`` (name -> value maps
shown as they are), and the ranking rows (see ``BoardData.rows``).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from sweep.board.reviews import BoardReview
from sweep.search import SettingImportance

__all__ = [
    "BestBaseline",
    "BestTrial",
    "BoardData",
    "BoardHeader",
    "DatasetFacts",
    "EpochCount",
    "EpochUse",
    "GapPoint",
    "GapPoints",
    "LearningCurve",
    "MadeBy",
    "ProgressPoint",
    "TargetFacts",
]


# ---------------------------------------------------------------------------------------- header


@dataclass(frozen=True)
class DatasetFacts:
    """The price file the study was run on, as the record keeps it.

    Attributes:
        source: the file's path as the study file named it.
        n_rows: rows kept after the checks; ``first_date`` and ``last_date`` their span (ISO dates).
        sha256: the file's SHA-256; ``sha256_short`` its first 12 characters.
        n_dropped: rows the checks dropped.
    """

    source: str
    n_rows: int
    first_date: str
    last_date: str
    sha256: str
    sha256_short: str
    n_dropped: int


@dataclass(frozen=True)
class TargetFacts:
    """What the study forecasts, from the study file kept in the record."""

    estimator: str
    horizons: tuple[int, ...]
    scale: str
    task: str


@dataclass(frozen=True)
class BestTrial:
    """The best complete trial with a finite objective."""

    trial: int
    objective: float


@dataclass(frozen=True)
class BestBaseline:
    """The best validation-window baseline with a finite objective."""

    name: str
    objective: float


@dataclass(frozen=True)
class BoardHeader:
    """What the top of the board says about the study, its data and how it ran.

    Attributes:
        study, created, objective, direction, task: from the study's record.
        target: from the study file kept in the record; None when it could not be read.
        dataset: the price file.
        windows: window name -> rows (``train``, ``valid``, ``test``), or None when not recorded.
        sampler, pruner: as recorded; ``search_details`` a sentence on their settings ("" without a spec).
        max_epochs: the most epochs a trial could run (``EpochUse.max_epochs``).
        space: searched setting -> its plain form (``Setting.to_plain()``); ``fixed``: setting -> value.
        counts: trial state -> number of trials (every state of ``sweep.record.TRIAL_STATES``).
        n_trials: trials in all; ``compute_seconds`` their summed run time; ``wall_seconds`` first start
            to last finish (None when no trial has both).
        code_version, git_commit, git_commit_short, python, platform, spec_hash_short: provenance.
        spec_problem: why the study file kept in the record could not be read, or None.
        best_trial, best_baseline: None when there is none.
        n_beating: trials that beat the best baseline.
    """

    study: str
    created: str
    objective: str
    direction: str
    task: str
    target: TargetFacts | None
    dataset: DatasetFacts
    windows: dict[str, int] | None
    sampler: str
    pruner: str
    search_details: str
    max_epochs: int
    space: dict[str, Any]
    fixed: dict[str, Any]
    counts: dict[str, int]
    n_trials: int
    compute_seconds: float
    wall_seconds: float | None
    code_version: str
    git_commit: str | None
    git_commit_short: str | None
    python: str
    platform: str
    spec_hash_short: str
    spec_problem: str | None
    best_trial: BestTrial | None
    best_baseline: BestBaseline | None
    n_beating: int


# ---------------------------------------------------------------------------------------- pictures


@dataclass(frozen=True)
class ProgressPoint:
    """One trial in the objective-by-trial picture.

    Attributes:
        trial: the trial's number; ``state`` its state; ``objective`` its objective (None when it has none).
        running_best: the best complete objective up to and including this trial, or None.
    """

    trial: int
    state: str
    objective: float | None
    running_best: float | None


@dataclass(frozen=True)
class LearningCurve:
    """The loss per epoch of one of the best complete trials (its latest fold with walk-forward folds).

    Attributes:
        trial: the trial's number; ``rank`` its place among complete trials (1 = best).
        objective, best_epoch: from the trial's ranking row.
        epoch, train_loss, valid_loss: one entry per epoch run, in epoch order.
    """

    trial: int
    rank: int
    objective: float
    best_epoch: int | None
    epoch: tuple[int, ...]
    train_loss: tuple[float, ...]
    valid_loss: tuple[float, ...]


@dataclass(frozen=True)
class GapPoint:
    """One complete trial in an overfit-gap picture: its ``x`` is the setting's value."""

    trial: int
    x: float
    gap: float
    gap_ratio: float | None
    objective: float | None


@dataclass(frozen=True)
class GapPoints:
    """The points of one overfit-gap picture, or why there are none (``reason``, else None)."""

    points: tuple[GapPoint, ...] = ()
    reason: str | None = None


# ---------------------------------------------------------------------------------------- epochs


@dataclass(frozen=True)
class EpochCount:
    """The epochs one trial ran (every fold counted)."""

    trial: int
    state: str
    epochs: int


@dataclass(frozen=True)
class EpochUse:
    """Epochs used per trial and the share pruning saved (``sweep.board.saved_share``).

    Attributes:
        max_epochs: the most epochs a trial could run; ``max_epochs_source`` says where that comes from.
        trials: one count per trial, in number order.
        n_run: epochs run by trials of every state; ``n_saved``: epochs pruned trials did not run.
        saved_share: ``n_saved / (n_saved + n_run)``, None when both are 0.
        n_pruned: pruned trials.
    """

    max_epochs: int
    max_epochs_source: str
    trials: tuple[EpochCount, ...]
    n_run: int
    n_saved: int
    saved_share: float | None
    n_pruned: int


# ---------------------------------------------------------------------------------------- the whole board


@dataclass(frozen=True)
class MadeBy:
    """How this board was made: the ``command`` line, volsweep's ``version`` and the ``time`` (ISO, UTC)."""

    command: str
    version: str
    time: str


@dataclass(frozen=True)
class BoardData:
    """Everything the board shows, as plain values (no records, no figures).

    Attributes:
        header: study, dataset, target, objective, search, trial counts, compute time, code version.
        rows: the ranking (trials and validation-window baselines). These stay the dicts
            ``sweep.record.rank_rows`` gives, the same rows the CLI prints as JSON (``trial``, ``kind``,
            ``rank``, ``state``, ``objective``, ``beats_best_baseline``, ...), each with three more keys:
            ``settings`` (values in ``settings`` order; None for baselines), ``behind`` (True: a trial
            that does not beat the best baseline) and ``marker`` (the text of the table's marker column).
        settings: the searched settings, in table order; ``setting_kinds`` says "num" or "text" for each.
        progress: one point per trial in number order.
        curves: the best complete trials' learning curves, best first.
        scatter: setting name -> its overfit-gap points (``SCATTER_SETTINGS``).
        importance: setting importance of the complete trials.
        epochs: epochs used per trial and the share pruning saved.
        review: notes, confirmations, holdout results and comparisons.
        made: the command, version and time of this board.
    """

    header: BoardHeader
    rows: list[dict]
    settings: tuple[str, ...]
    setting_kinds: dict[str, str]
    progress: tuple[ProgressPoint, ...]
    curves: tuple[LearningCurve, ...]
    scatter: dict[str, GapPoints]
    importance: SettingImportance
    epochs: EpochUse
    made: MadeBy
    review: BoardReview = field(default_factory=BoardReview)

    @property
    def has_review(self) -> bool:
        """True when the record holds notes, confirmations, holdout results or comparisons for the study."""
        return self.review.has_records
