"""The board's data step: records in, plain values out (private to ``sweep/board.py``).

Each ``collect_*`` function builds one part of ``BoardData`` from records the tracker returned;
only ``collect_curves`` and ``collect_review`` read from the tracker themselves.
"""

from __future__ import annotations

import json
import math
from datetime import datetime
from pathlib import Path

from sweep.ranking import rank_rows
from sweep.records import TRIAL_STATES
from sweep.space import Choice, Fixed, FloatRange, IntRange

__all__ = [
    "N_CURVES",
    "SCATTER_SETTINGS",
    "collect_curves",
    "collect_epochs",
    "collect_header",
    "collect_importance",
    "collect_progress",
    "collect_comparisons",
    "collect_review",
    "collect_rows",
    "collect_scatter",
    "read_spec",
    "saved_share",
]

N_CURVES = 8
SCATTER_SETTINGS = ("hidden_units", "dropout")
IMPORTANCE_EVALUATOR = "PedAnovaImportanceEvaluator"


def _finite(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


def read_spec(text: str):
    """The study's spec parsed from the text kept in the record: (StudySpec, None) or (None, problem)."""
    from sweep.spec import SpecError, parse_spec

    try:
        return parse_spec(text, base_dir=Path(".")), None
    except SpecError as exc:
        return None, f"the study file kept in the record could not be read again: {exc}"


# ---------------------------------------------------------------------------------------- ranking


def _searched(spec, trials) -> list[str]:
    """The searched settings: from the spec's space when it was read, else the params that vary."""
    if spec is not None:
        names = [n for n, s in spec.space.items() if not isinstance(s, Fixed)]
    else:
        seen: dict[str, set] = {}
        for t in trials:
            for k, v in t.params.items():
                seen.setdefault(k, set()).add(json.dumps(v, sort_keys=True))
        names = [k for k, values in seen.items() if len(values) > 1]
    return names


def collect_rows(record, spec, trials, baselines):
    """The ranking rows, the searched settings and their kinds ("num" or "text").

    Rows come from ``sweep.ranking.rank_rows`` (ascending objective, missing last; reversed for a
    study that maximizes). Each row gets ``settings`` (values in ``names`` order; None for baselines),
    ``behind`` and ``marker``.
    """
    rows = rank_rows(trials, baselines, sort="objective")
    if record.direction == "maximize":
        rows.sort(key=lambda r: (not _finite(r["objective"]), -(r["objective"] if _finite(r["objective"]) else 0)))
        best = max((b.objective for b in baselines if _finite(b.objective)), default=None)
        for i, row in enumerate(rows, start=1):
            row["rank"] = i
            beats = row["kind"] == "trial" and _finite(row["objective"]) and best is not None
            row["beats_best_baseline"] = (row["objective"] > best) if beats else None
    has_baseline = any(_finite(b.objective) for b in baselines)
    names = _searched(spec, trials)
    kinds = {}
    for name in names:
        values = [t.params.get(name) for t in trials if t.params.get(name) is not None]
        numeric = all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in values)
        kinds[name] = "num" if numeric else "text"
    for row in rows:
        trial = row["kind"] == "trial"
        row["settings"] = [row["params"].get(n) if trial else None for n in names]
        row["behind"] = trial and has_baseline and row["beats_best_baseline"] is not True
        if not trial:
            row["marker"] = "baseline"
        elif not has_baseline:
            row["marker"] = ""
        elif row["beats_best_baseline"]:
            row["marker"] = "beats"
        elif row["objective"] is None:
            row["marker"] = "no objective"
        else:
            row["marker"] = "behind"
    return rows, names, kinds


# ---------------------------------------------------------------------------------------- header


def _seconds_between(first: str | None, last: str | None) -> float | None:
    try:
        return (datetime.fromisoformat(last) - datetime.fromisoformat(first)).total_seconds()
    except (TypeError, ValueError):
        return None


def _search_details(spec) -> str:
    if spec is None:
        return ""
    s = spec.search
    parts = []
    if s.sampler == "tpe":
        parts.append(f"{s.startup_trials} random start trials")
    if s.pruner == "median":
        parts.append(f"pruning after {s.startup_trials} trials and {s.warmup_epochs} warm-up epochs")
    elif s.pruner in ("halving", "hyperband"):
        parts.append(f"first rung {s.min_epochs} epochs, reduction factor {s.reduction_factor}")
    return "; ".join(parts)


def _short_commit(commit: str | None) -> str | None:
    """The first 12 characters of a commit, keeping a "+dirty" mark."""
    if not commit:
        return None
    head, _, rest = commit.partition("+")
    return head[:12] + ("+" + rest if rest else "")


def collect_header(record, dataset, spec, spec_problem, trials, rows, epochs) -> dict:
    """What the top of the board says about the study, its data and how it ran."""
    counts = {state: 0 for state in TRIAL_STATES}
    for t in trials:
        counts[t.state] = counts.get(t.state, 0) + 1
    starts = [t.started for t in trials if t.started]
    ends = [t.finished for t in trials if t.finished]
    trial_rows = [r for r in rows if r["kind"] == "trial"]
    complete = [r for r in trial_rows if r["state"] == "complete" and _finite(r["objective"])]
    base = [r for r in rows if r["kind"] == "baseline" and _finite(r["objective"])]
    target = None
    fixed, space = {}, {}
    if spec is not None:
        target = {"estimator": spec.target.estimator, "horizons": list(spec.target.horizons),
                  "scale": spec.target.scale, "task": spec.target.task}
        for name, setting in spec.space.items():
            if isinstance(setting, Fixed):
                fixed[name] = setting.value
            else:
                space[name] = setting.to_plain()
    return {
        "study": record.name,
        "created": record.created,
        "objective": record.objective,
        "direction": record.direction,
        "task": record.task,
        "target": target,
        "dataset": {
            "source": dataset.source, "n_rows": dataset.n_rows, "first_date": dataset.first_date,
            "last_date": dataset.last_date, "sha256": dataset.sha256, "sha256_short": dataset.sha256[:12],
            "n_dropped": len(dataset.dropped),
        },
        "windows": record.settings.get("windows"),
        "sampler": record.sampler,
        "pruner": record.pruner,
        "search_details": _search_details(spec),
        "max_epochs": epochs["max_epochs"],
        "space": space,
        "fixed": fixed,
        "counts": counts,
        "n_trials": len(trials),
        "compute_seconds": float(sum(t.seconds for t in trials)),
        "wall_seconds": _seconds_between(min(starts), max(ends)) if starts and ends else None,
        "code_version": record.code_version,
        "git_commit": record.git_commit,
        "git_commit_short": _short_commit(record.git_commit),
        "python": record.python,
        "platform": record.platform,
        "spec_hash_short": record.spec_hash[:12],
        "spec_problem": spec_problem,
        "best_trial": ({"trial": complete[0]["trial"], "objective": complete[0]["objective"]}
                       if complete else None),
        "best_baseline": ({"name": base[0]["trial"], "objective": base[0]["objective"]} if base else None),
        "n_beating": sum(1 for r in trial_rows if r["beats_best_baseline"] is True),
    }


# ---------------------------------------------------------------------------------------- pictures


def collect_progress(trials, direction: str = "minimize") -> list[dict]:
    """Objective by trial number, with the best complete objective so far."""
    better = max if direction == "maximize" else min
    best, out = None, []
    for t in sorted(trials, key=lambda t: t.number):
        if t.state == "complete" and _finite(t.objective):
            best = t.objective if best is None else better(best, t.objective)
        out.append({"trial": t.number, "state": t.state, "objective": t.objective, "running_best": best})
    return out


def collect_curves(tracker, study: str, rows: list[dict], n_curves: int = N_CURVES) -> list[dict]:
    """Learning curves of the ``n_curves`` best complete trials (loaded for those trials only).

    With walk-forward folds, the curve of the latest fold: the network a holdout or a forecast uses.
    """
    best = [r for r in rows if r["kind"] == "trial" and r["state"] == "complete" and _finite(r["objective"])]
    curves = []
    for rank, row in enumerate(best[:n_curves], start=1):
        epochs = tracker.load_trial(study, row["trial"]).epochs
        last_fold = max((e.fold for e in epochs), default=0)
        epochs = [e for e in epochs if e.fold == last_fold]
        curves.append({
            "trial": row["trial"], "rank": rank, "objective": row["objective"], "best_epoch": row["best_epoch"],
            "epoch": [e.epoch for e in epochs], "train_loss": [e.train_loss for e in epochs],
            "valid_loss": [e.valid_loss for e in epochs],
        })
    return curves


def collect_scatter(trials, names=SCATTER_SETTINGS) -> dict[str, dict]:
    """Overfit gap against each setting in ``names`` for complete trials (values from their params)."""
    out = {}
    complete = [t for t in trials if t.state == "complete" and _finite(t.gap)]
    for name in names:
        points = [{"trial": t.number, "x": t.params[name], "gap": t.gap, "gap_ratio": t.gap_ratio,
                   "objective": t.objective} for t in complete if _finite(t.params.get(name))]
        reason = None
        if not complete:
            reason = "no complete trial with an overfit gap yet"
        elif not points:
            reason = f"the trials' settings hold no numeric {name}"
        out[name] = {"points": points, "reason": reason}
    return out


def _distribution(setting):
    from optuna.distributions import CategoricalDistribution, FloatDistribution, IntDistribution

    if isinstance(setting, IntRange):
        return IntDistribution(setting.low, setting.high, log=setting.log, step=setting.step)
    if isinstance(setting, FloatRange):
        return FloatDistribution(setting.low, setting.high, log=setting.log, step=setting.step)
    if isinstance(setting, Choice):
        return CategoricalDistribution(list(setting.values))
    return None


def _categorical_value(value):
    return value if value is None or isinstance(value, (bool, int, float, str)) else json.dumps(value)


def _inferred(values: list):
    """A distribution covering the values seen (when the spec's space cannot be used)."""
    from optuna.distributions import CategoricalDistribution, FloatDistribution, IntDistribution

    if all(isinstance(v, int) and not isinstance(v, bool) for v in values):
        return IntDistribution(min(values), max(values))
    if all(_finite(v) for v in values):
        return FloatDistribution(float(min(values)), float(max(values)))
    return CategoricalDistribution(sorted({_categorical_value(v) for v in values}, key=str))


def _frozen_trial(trial, distributions):
    """An optuna FrozenTrial of a recorded complete trial (raises ValueError for a value outside its space)."""
    import optuna

    params = {}
    for name, dist in distributions.items():
        value = trial.params[name]
        params[name] = _categorical_value(value) if isinstance(dist, optuna.distributions.CategoricalDistribution) \
            else value
    return optuna.trial.create_trial(params=params, distributions=distributions, value=trial.objective)


def collect_importance(trials, spec, direction: str = "minimize") -> dict:
    """Setting importance by optuna's default evaluator on an in-memory study of the complete trials.

    Distributions come from the spec's space (``sweep/space.py`` forms: a range -> Int/Float
    distribution with the same low, high, log and step; a list -> categorical); settings that took a
    single value among the complete trials are left out. When the spec cannot be used (not readable,
    or a value outside its space), distributions are inferred from the values seen.
    """
    done = [t for t in trials if t.state == "complete" and _finite(t.objective)]
    out = {"values": {}, "evaluator": IMPORTANCE_EVALUATOR, "n_trials": len(done), "reason": None}
    if len(done) < 2:
        out["reason"] = (f"setting importance needs at least 2 complete trials with an objective; "
                         f"this study has {len(done)}")
        return out
    names = [n for n in _searched(spec, done)
             if all(n in t.params for t in done) and len({json.dumps(t.params[n]) for t in done}) > 1]
    if not names:
        out["reason"] = "no searched setting took more than one value among the complete trials"
        return out
    import optuna

    space = dict(spec.space) if spec is not None else {}
    made = None
    for distributions in ({n: _distribution(space.get(n)) for n in names},
                          {n: _inferred([t.params[n] for t in done]) for n in names}):
        if any(d is None for d in distributions.values()):
            continue
        try:
            made = [_frozen_trial(t, distributions) for t in done]
            break
        except ValueError:  # a recorded value outside the spec's space: infer from the values instead
            continue
    if made is None:
        out["reason"] = "the recorded settings fit no search space optuna accepts"
        return out
    verbosity = optuna.logging.get_verbosity()
    optuna.logging.set_verbosity(optuna.logging.WARNING)  # no "study created" line on the terminal
    try:
        study = optuna.create_study(direction=direction, storage=optuna.storages.InMemoryStorage())
        study.add_trials(made)
        importances = optuna.importance.get_param_importances(study)
    except (ValueError, RuntimeError) as exc:
        out["reason"] = f"optuna could not estimate setting importance: {exc}"
        return out
    finally:
        optuna.logging.set_verbosity(verbosity)
    out["values"] = {k: float(v) for k, v in importances.items()}
    return out


# ---------------------------------------------------------------------------------------- epochs


def saved_share(max_epochs: int, trials: list[dict]) -> tuple[int, int, float | None]:
    """Epochs pruning saved: (n_saved, n_run, share).

    ``n_saved`` is the sum over pruned trials of ``max_epochs - epochs run`` (never below 0);
    ``n_run`` is every epoch actually run, by trials of every state; ``share = n_saved / (n_saved + n_run)``
    (None when both are 0). It is an upper bound: early stopping might have ended some pruned trials sooner.
    """
    n_saved = sum(max(0, max_epochs - t["epochs"]) for t in trials if t["state"] == "pruned")
    n_run = sum(t["epochs"] for t in trials)
    total = n_saved + n_run
    return n_saved, n_run, (n_saved / total if total else None)


def collect_epochs(trials, spec) -> dict:
    """Epochs used per trial, and the share pruning saved (see ``saved_share``)."""
    per_trial = [{"trial": t.number, "state": t.state, "epochs": t.n_epochs}
                 for t in sorted(trials, key=lambda t: t.number)]
    if spec is not None and spec.split.folds:
        max_epochs = spec.training.max_epochs * spec.split.folds
        source = "training.max_epochs times split.folds of the study file"
    elif spec is not None:
        max_epochs, source = spec.training.max_epochs, "training.max_epochs of the study file"
    else:
        max_epochs = max((t["epochs"] for t in per_trial), default=0)
        source = "the longest trial (the study file kept in the record could not be read)"
    n_saved, n_run, share = saved_share(max_epochs, per_trial)
    return {"max_epochs": max_epochs, "max_epochs_source": source, "trials": per_trial,
            "n_run": n_run, "n_saved": n_saved, "saved_share": share,
            "n_pruned": sum(1 for t in per_trial if t["state"] == "pruned")}


# ---------------------------------------------------------------------------------------- review


def collect_review(tracker, study: str, *, objective: str | None = None) -> dict:
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


def collect_comparisons(tracker, study: str) -> tuple[list[dict], int]:
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
