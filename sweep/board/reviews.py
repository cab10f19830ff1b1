"""The board's review section: notes, confirmations, holdout results and comparisons, as plain values."""

from __future__ import annotations

from sweep.record import Tracker

__all__ = ["collect_comparisons", "collect_review"]


def collect_review(tracker: Tracker, study: str, *, objective: str | None = None) -> dict:
    """Notes, confirmations and holdout results, as plain dicts with their dates.

    Each holdout gets ``n_uses`` (how many holdout results the study holds: the number of times the
    test window was used) and ``repeat`` (True for every look after the first, or one recorded with
    ``again``). Holdout ``metrics`` list the study's ``objective`` first, then the others by name.
    """
    notes = [{"created": n.created, "trial": n.trial, "author": n.author, "text": n.text}
             for n in tracker.load_notes(study)]
    confirmations = [{"created": c.created, "trial": c.trial, "seeds": c.seeds, "objectives": c.objectives,
                      "gaps": c.gaps, "summary": c.summary, "extra": c.extra}
                     for c in tracker.load_confirmations(study)]
    # one sentence per confirm run (its confirmations share `created`): does the ranking hold?
    rankings = []
    for c in confirmations:
        words = (c["extra"] or {}).get("ranking", {}).get("words")
        if words and all(r["created"] != c["created"] for r in rankings):
            rankings.append({"created": c["created"], "words": words})
    holdouts = tracker.load_holdouts(study)
    n_uses = len(holdouts)
    looks = []
    for h in holdouts:
        metrics = sorted({m for v in h.results.values() if isinstance(v, dict) for m in v},
                         key=lambda m: (m != objective, m))  # the study's objective first
        looks.append({"sequence": h.sequence, "trial": h.trial, "created": h.created, "command": h.command,
                      "again": h.again, "results": h.results, "metrics": metrics, "n_uses": n_uses,
                      "repeat": bool(h.again or (h.sequence or 1) > 1)})
    comparisons, n_comparisons = collect_comparisons(tracker, study)
    return {"notes": notes, "confirmations": confirmations, "rankings": rankings, "holdouts": looks,
            "n_holdouts": n_uses,
            "comparisons": comparisons, "n_comparisons": n_comparisons}


def collect_comparisons(tracker: Tracker, study: str) -> tuple[list[dict], int]:
    """The latest recorded comparison per window (valid first), and how many comparisons the study holds.

    Each keeps its Diebold-Mariano rows on the all-horizons loss (the per-horizon rows stay in the
    record), the confidence set and the SPA result, each with its plain-words reading.
    """
    found = tracker.load_comparisons(study)
    latest = {c.window: c for c in found}  # in sequence order, so the last one per window wins
    shown = []
    for window in ("valid", "test"):
        if window not in latest:
            continue
        c, r = latest[window], latest[window].results
        shown.append({"sequence": c.sequence, "created": c.created, "window": window, "command": c.command,
                      "objective": r.get("objective"), "level": r.get("level"), "rows": r.get("rows"),
                      "first_date": r.get("first_date"), "last_date": r.get("last_date"),
                      "dm": [d for d in r.get("dm", []) if d.get("horizon") == "all"],
                      "dm_horizon": r.get("dm_horizon_all"), "mcs": r.get("mcs") or {}, "spa": r.get("spa"),
                      "spa_skipped": r.get("spa_skipped")})
    return shown, len(found)
