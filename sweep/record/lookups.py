"""Lookups every part of the record needs: a study's name checked, a trial's row found, the studies listed.

Each names what is missing and where to look, so a mistyped name or number gets one clear line.
"""

from __future__ import annotations

from sweep.errors import StudyNotFound, TrialNotFound
from sweep.record.values import TRIAL_STATES

__all__ = ["require_study", "require_trial", "study_names", "study_summaries"]


def study_names(db) -> list[str]:
    """The studies of a record, oldest first."""
    return [r["name"] for r in db.query("SELECT name FROM vs_studies ORDER BY created, name")]


def require_study(db, location: str, name: str) -> None:
    """Raise StudyNotFound, listing the studies there, unless the record holds study ``name``."""
    if next(db.query("SELECT 1 AS x FROM vs_studies WHERE name = ?", [name]), None) is None:
        names = study_names(db)
        listed = ", ".join(names) if names else "none yet"
        raise StudyNotFound(
            f"no study named {name!r} in {location}; studies there: {listed} (see `volsweep list {location}`)"
        )


def require_trial(db, location: str, study: str, number: int) -> dict:
    """The trial's row; StudyNotFound or TrialNotFound (with the numbers held) when it is not there."""
    require_study(db, location, study)
    found = next(db.query("SELECT * FROM vs_trials WHERE study = ? AND number = ?", [study, int(number)]), None)
    if found is None:
        span = next(db.query("SELECT COUNT(*) AS n, MIN(number) AS lo, MAX(number) AS hi FROM vs_trials "
                             "WHERE study = ?", [study]))
        held = f"{span['n']} trials, numbers {span['lo']}-{span['hi']}" if span["n"] else "no trials yet"
        raise TrialNotFound(
            f"study {study!r} in {location} has no trial {number} ({held}); see `volsweep list {location}`"
        )
    return found


def _all(db, sql: str, params=()) -> list[dict]:
    return list(db.query(sql, list(params)))


def _one(db, sql: str, params=()) -> dict | None:
    return next(db.query(sql, list(params)), None)


def study_summaries(db) -> list[dict]:
    """One summary dict per study, oldest first.

    Keys: ``name``, ``created``, ``objective``, ``direction``, ``n_trials``, ``trials`` (count per
    state, every state listed), ``best_trial`` and ``best_objective`` (complete trials; None if
    none), ``dataset`` (the source path), ``dataset_sha256``, ``n_rows``.
    """
    counts: dict[str, dict[str, int]] = {}
    for r in _all(db, "SELECT study, state, COUNT(*) AS n FROM vs_trials GROUP BY study, state"):
        counts.setdefault(r["study"], {})[r["state"]] = r["n"]
    summaries = []
    for s in _all(db, 
        "SELECT s.name, s.created, s.objective, s.direction, s.dataset_sha256, d.source, d.n_rows "
        "FROM vs_studies s JOIN vs_datasets d ON d.sha256 = s.dataset_sha256 ORDER BY s.created, s.name"
    ):
        order = "DESC" if s["direction"] == "maximize" else "ASC"
        best = _one(db, 
            "SELECT number, objective FROM vs_trials WHERE study = ? AND state = 'complete' AND "
            f"objective IS NOT NULL ORDER BY objective {order}, number LIMIT 1",
            [s["name"]],
        )
        by_state = {state: counts.get(s["name"], {}).get(state, 0) for state in TRIAL_STATES}
        summaries.append({
            "name": s["name"], "created": s["created"], "objective": s["objective"],
            "direction": s["direction"], "n_trials": sum(by_state.values()), "trials": by_state,
            "best_trial": best["number"] if best else None,
            "best_objective": best["objective"] if best else None,
            "dataset": s["source"], "dataset_sha256": s["dataset_sha256"], "n_rows": s["n_rows"],
        })
    return summaries
