"""The ranking of a study: trials and baselines side by side, ordered by a key. Pure functions on records."""

from __future__ import annotations

import math

from sweep.errors import InputError
from sweep.record.values import TRIAL_STATES, BaselineRecord, TrialRecord

__all__ = ["SORT_KEYS", "baseline_row", "rank_rows", "trial_row"]

SORT_KEYS = ("objective", "train_loss", "gap", "gap_ratio", "best_epoch", "epochs", "seconds", "trial")


def trial_row(t: TrialRecord) -> dict:
    """One trial as a plain row (the JSON shape of `volsweep top`)."""
    return {
        "kind": "trial",
        "trial": t.number,
        "state": t.state,
        "objective": t.objective,
        "train_loss": t.train_loss,
        "valid_loss": t.valid_loss,
        "gap": t.gap,
        "gap_ratio": t.gap_ratio,
        "best_epoch": t.best_epoch,
        "epochs": t.n_epochs,
        "stop_reason": t.stop_reason,
        "seconds": t.seconds,
        "params": dict(t.params),
    }


def baseline_row(b: BaselineRecord) -> dict:
    """A baseline on the validation window, in the same shape as a trial row."""
    return {
        "kind": "baseline",
        "trial": b.name,
        "state": "baseline",
        "objective": b.objective,
        "train_loss": None,
        "valid_loss": None,
        "gap": None,
        "gap_ratio": None,
        "best_epoch": None,
        "epochs": None,
        "stop_reason": None,
        "seconds": None,
        "params": dict(b.params),
    }


def _sort_value(row: dict, key: str):
    value = row.get(key)
    if key == "trial":
        return (0, row["trial"]) if row["kind"] == "trial" else (1, str(row["trial"]))
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return (1, 0.0)
    return (0, value)


def rank_rows(
    trials: list[TrialRecord],
    baselines: list[BaselineRecord],
    *,
    sort: str = "objective",
    states: tuple[str, ...] | None = None,
    include_baselines: bool = True,
) -> list[dict]:
    """Trials (filtered by state) and validation-window baselines, sorted ascending by `sort`.

    Rows with no value for the key go last. Each row gets `rank` (1-based, over the sorted rows) and
    `beats_best_baseline` (True, False, or None when there is no baseline or no objective).

    Raises:
        InputError: for an unknown sort key or state, naming the allowed ones.
    """
    if sort not in SORT_KEYS:
        raise InputError(f"unknown sort key {sort!r}; use one of {', '.join(SORT_KEYS)}")
    for s in states or ():
        if s not in TRIAL_STATES:
            raise InputError(f"unknown state {s!r}; use one of {', '.join(TRIAL_STATES)}")
    rows = [trial_row(t) for t in trials if states is None or t.state in states]
    valid_baselines = [b for b in baselines if b.window == "valid"]
    if include_baselines:
        rows += [baseline_row(b) for b in valid_baselines]
    rows.sort(key=lambda r: _sort_value(r, sort))
    finite = [b.objective for b in valid_baselines if b.objective is not None and math.isfinite(b.objective)]
    best_baseline = min(finite) if finite else None
    for i, row in enumerate(rows, start=1):
        row["rank"] = i
        if row["kind"] == "trial" and row["objective"] is not None and best_baseline is not None:
            row["beats_best_baseline"] = row["objective"] < best_baseline
        else:
            row["beats_best_baseline"] = None
    return rows
