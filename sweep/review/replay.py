"""Replay: retrain a recorded trial from the record alone and compare its learning curve epoch by epoch.

A trial trains on ``np.random.default_rng([study_seed, trial_number])``, so on the same machine and the
same package versions a replay is identical bit for bit; elsewhere the differences are measured and the
environment that changed is named.

Example:
    >>> tracker = Tracker.open("studies/demo.sqlite", create=False)   # doctest: +SKIP
    >>> replay_trial(tracker, 3).identical                              # doctest: +SKIP
    True
"""

from __future__ import annotations

import math
import platform
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from sweep.record import DatasetRecord, StudyRecord, Tracker, code_version, finite_or_none, git_commit, package_versions
from sweep.review.context import open_study, retrain_folds, window_forecasts
from sweep.study import fold_mean
from trainers.data import sha256_file

__all__ = [
    "EnvironmentCheck", "EnvironmentDifference", "EpochDifference", "ReplayReport", "SourceStatus",
    "environment_differences", "replay_trial",
]


@dataclass(frozen=True)
class EnvironmentDifference:
    """One part of the environment (a package, Python, platform, volsweep, git commit) that changed."""

    name: str
    recorded: str | None
    current: str | None

    def to_dict(self) -> dict:
        return {"name": self.name, "recorded": self.recorded, "current": self.current}


@dataclass(frozen=True)
class EnvironmentCheck:
    """Whether this environment is the recorded one, and what differs."""

    same: bool
    differences: tuple[EnvironmentDifference, ...]

    def to_dict(self) -> dict:
        return {"same": self.same, "differences": [d.to_dict() for d in self.differences]}


@dataclass(frozen=True)
class SourceStatus:
    """The study's original price file now: ``changed`` is None when the file is gone."""

    path: str
    exists: bool
    changed: bool | None

    def to_dict(self) -> dict:
        return {"path": self.path, "exists": self.exists, "changed": self.changed}


@dataclass(frozen=True)
class EpochDifference:
    """|recorded - replayed| of one epoch's train loss, valid loss and score, and their maximum.

    When only one side has the epoch, every difference is None and ``missing`` names the side without it
    ("replayed" or "recorded").
    """

    epoch: int
    train_loss: float | None
    valid_loss: float | None
    valid_score: float | None
    max_abs_diff: float | None
    missing: str | None = None

    def to_dict(self) -> dict:
        row = {"epoch": self.epoch, "train_loss": self.train_loss, "valid_loss": self.valid_loss,
               "valid_score": self.valid_score, "max_abs_diff": self.max_abs_diff}
        if self.missing is not None:
            row["missing"] = self.missing
        return row


@dataclass(frozen=True)
class ReplayReport:
    """A trial retrained from the record, compared with its recorded learning curve (see ``replay_trial``)."""

    study: str
    trial: int
    state: str
    identical: bool
    max_abs_diff: float
    n_epochs_recorded: int
    n_epochs_replayed: int
    best_epoch_recorded: int | None
    best_epoch_replayed: int
    objective_recorded: float | None
    objective_replayed: float | None
    forecasts_max_abs_diff: float | None
    weights_max_abs_diff: float | None
    epochs: tuple[EpochDifference, ...]
    environment: EnvironmentCheck
    source: SourceStatus
    message: str

    @property
    def source_changed(self) -> bool | None:
        """True/False: the original price file changed or not; None: it is gone."""
        return self.source.changed

    def to_dict(self) -> dict:
        """The report as JSON-able values (non-finite floats left as they are), keys in print order."""
        return {
            "study": self.study, "trial": self.trial, "state": self.state, "identical": self.identical,
            "max_abs_diff": self.max_abs_diff, "n_epochs_recorded": self.n_epochs_recorded,
            "n_epochs_replayed": self.n_epochs_replayed, "best_epoch_recorded": self.best_epoch_recorded,
            "best_epoch_replayed": self.best_epoch_replayed, "objective_recorded": self.objective_recorded,
            "objective_replayed": self.objective_replayed, "forecasts_max_abs_diff": self.forecasts_max_abs_diff,
            "weights_max_abs_diff": self.weights_max_abs_diff, "epochs": [e.to_dict() for e in self.epochs],
            "environment": self.environment.to_dict(), "source": self.source.to_dict(),
            "source_changed": self.source_changed, "message": self.message,
        }


def environment_differences(record: StudyRecord) -> list[EnvironmentDifference]:
    """Package versions, Python, platform, volsweep version and git commit that differ from the record.

    The git commit ends in ``+dirty`` when the checkout had uncommitted changes; two dirty checkouts of
    one commit look the same here even if their changes differ.
    """
    current = package_versions()
    rows = [EnvironmentDifference(name, record.packages.get(name), current.get(name))
            for name in sorted(set(record.packages) | set(current))]
    rows += [EnvironmentDifference("python", record.python, platform.python_version()),
             EnvironmentDifference("platform", record.platform, platform.platform()),
             EnvironmentDifference("volsweep", record.code_version, code_version()),
             EnvironmentDifference("git commit", record.git_commit, git_commit())]
    return [r for r in rows if r.recorded != r.current]


def _source_status(dataset: DatasetRecord) -> SourceStatus:
    path = Path(dataset.source)
    if not path.is_file():
        return SourceStatus(path=dataset.source, exists=False, changed=None)
    return SourceStatus(path=dataset.source, exists=True, changed=sha256_file(path) != dataset.sha256)


def _abs_diff(a, b) -> float:
    """|a - b| for recorded/replayed values; 0 when both are missing or both the same non-finite value."""
    a = math.nan if a is None else a
    b = math.nan if b is None else b
    if a == b or (math.isnan(a) and math.isnan(b)):
        return 0.0
    return math.inf if not (math.isfinite(a) and math.isfinite(b)) else abs(a - b)


def replay_trial(tracker: Tracker, number: int, *, study: str | None = None) -> ReplayReport:
    """Retrain a recorded trial from the record and compare its learning curve epoch by epoch.

    Pruned and interrupted trials are replayed up to their recorded number of epochs.

    Returns:
        A ``ReplayReport``: ``identical`` (every recorded loss and score equal, the same epochs), ``max_abs_diff``
        (largest |recorded - replayed| over epochs and values), ``epochs`` (per epoch an
        ``EpochDifference``: train loss, valid loss and score, and their maximum), ``n_epochs_recorded``/``_replayed``,
        ``best_epoch_recorded``/``_replayed``, ``forecasts_max_abs_diff`` (validation forecasts of the
        best weights, when recorded), ``weights_max_abs_diff`` (when weights were stored),
        ``environment`` (``same`` and the ``differences`` in packages, Python, platform), ``source``
        and ``source_changed`` (True/False, None when the original price file is gone) and ``message``.
        ``to_dict()`` gives the JSON the CLI prints.

    Raises:
        StudyNotFound, TrialNotFound, ReviewError: no such study or trial, or no epoch to replay.
    """
    ctx = open_study(tracker, study)
    trial = tracker.load_trial(ctx.name, number)
    fold_results = retrain_folds(ctx, trial)
    result = fold_results[-1]
    replayed = [e for r in fold_results for e in r.history]
    epochs = []
    for i in range(max(len(trial.epochs), len(replayed))):
        old = trial.epochs[i] if i < len(trial.epochs) else None
        new = replayed[i] if i < len(replayed) else None
        if old is None or new is None:
            epochs.append(EpochDifference(i + 1, None, None, None, None,
                                          missing="replayed" if new is None else "recorded"))
            continue
        train = _abs_diff(old.train_loss, new.train_loss)
        valid = _abs_diff(old.valid_loss, new.valid_loss)
        score = _abs_diff(old.valid_score, finite_or_none(new.valid_score))
        epochs.append(EpochDifference(i + 1, train, valid, score, max(train, valid, score)))
    max_diff = max((e.max_abs_diff for e in epochs if e.max_abs_diff is not None), default=0.0)
    same_length = len(replayed) == len(trial.epochs)
    forecasts_diff = weights_diff = None
    if trial.valid_forecasts is not None and result.best_epoch > 0 and len(fold_results) == len(ctx.all_folds):
        new_forecasts = np.concatenate([window_forecasts(f, r.network, "valid")
                                        for f, r in zip(ctx.all_folds, fold_results)])
        forecasts_diff = float(np.max(np.abs(new_forecasts - trial.valid_forecasts)))
    if trial.weights is not None:
        stored = np.asarray(trial.weights["params"], dtype=np.float64)
        new_params = np.asarray(result.network.params, dtype=np.float64)
        weights_diff = float(np.max(np.abs(stored - new_params))) if stored.shape == new_params.shape else math.inf
    identical = (max_diff == 0.0 and same_length and forecasts_diff in (None, 0.0)
                 and weights_diff in (None, 0.0))
    differences = environment_differences(ctx.record)
    source = _source_status(tracker.load_dataset(ctx.record.dataset_sha256))
    if identical:
        message = f"trial {number} replays identically: {len(replayed)} epochs, every loss equal bit for bit"
    else:
        changed = ", ".join(f"{d.name} {d.recorded} -> {d.current}" for d in differences)
        length = "" if same_length else (f"; the replay stopped after {len(replayed)} epochs, the record after "
                                         f"{len(trial.epochs)}")
        message = (f"trial {number} replays with differences: largest absolute difference {max_diff:.3g} over "
                   f"the {min(len(replayed), len(trial.epochs))} epochs both have{length}; "
                   + (f"differences from the recorded environment: {changed}" if differences
                      else "the recorded package versions, Python and platform are the same as here"))
    if source.changed:
        message += f"; note: the original price file {source.path} has changed since the study was made"
    return ReplayReport(
        study=ctx.name, trial=number, state=trial.state, identical=identical, max_abs_diff=max_diff,
        n_epochs_recorded=len(trial.epochs), n_epochs_replayed=len(replayed),
        best_epoch_recorded=trial.best_epoch, best_epoch_replayed=result.best_epoch,
        objective_recorded=trial.objective,
        objective_replayed=finite_or_none(fold_mean([math.nan if r.valid_score is None else r.valid_score
                                                     for r in fold_results])),
        forecasts_max_abs_diff=forecasts_diff, weights_max_abs_diff=weights_diff, epochs=tuple(epochs),
        environment=EnvironmentCheck(same=not differences, differences=tuple(differences)),
        source=source, message=message,
    )
