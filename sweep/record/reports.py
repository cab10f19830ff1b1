"""Plain, JSON-able summaries of a record behind `volsweep top`, `list` and `show`.

The CLI prints these; the logic lives here so it can be tested without a terminal.
"""

from __future__ import annotations

from sweep.record.ranking import rank_rows, trial_row
from sweep.record.tracker import Tracker

__all__ = ["list_report", "show_report", "top_report"]


def top_report(tracker: Tracker, *, study=None, n=20, sort="objective", states=None) -> dict:
    """The ranking of a study, baselines included and marked."""
    record = tracker.find_study(study)
    trials = tracker.load_trials(record.name)
    rows = rank_rows(trials, tracker.load_baselines(record.name), sort=sort,
                     states=tuple(states) if states else None)
    return {"study": record.name, "objective": record.objective, "rows": rows[:n]}


def list_report(tracker: Tracker) -> list[dict]:
    return tracker.list_studies()


def show_report(tracker: Tracker, number: int, *, study=None) -> dict:
    """One trial in full, with the study's provenance."""
    record = tracker.find_study(study)
    t = tracker.load_trial(record.name, number)
    dataset = tracker.load_dataset(record.dataset_sha256)
    return {
        "study": {
            "name": record.name,
            "created": record.created,
            "objective": record.objective,
            "code_version": record.code_version,
            "git_commit": record.git_commit,
            "python": record.python,
            "platform": record.platform,
            "packages": record.packages,
            "spec_hash": record.spec_hash,
        },
        "dataset": {
            "sha256": dataset.sha256,
            "source": dataset.source,
            "rows": dataset.n_rows,
            "first_date": dataset.first_date,
            "last_date": dataset.last_date,
        },
        "trial": {
            **trial_row(t),
            "seed": t.seed,
            "started": t.started,
            "finished": t.finished,
            "error": t.error,
            "worker": t.worker,
            "curve": [
                {"epoch": e.epoch, "train_loss": e.train_loss, "valid_loss": e.valid_loss,
                 "valid_score": e.valid_score, "seconds": e.seconds}
                for e in t.epochs
            ],
            "has_weights": t.weights is not None,
        },
    }
