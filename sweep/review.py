"""Reopening a study from its record alone: replay a trial, confirm finalists on fresh seeds, look at the
test window once, keep decision notes, and say what differs between two studies.

Each function takes an open ``Tracker`` and returns plain, JSON-able dicts (the CLI prints them).
Forecast comparisons (Diebold-Mariano, the model confidence set, SPA) live in ``sweep/compare.py``;
networks and forecasts from the record in ``sweep/forecast.py``.

Seeds. A trial trains on ``np.random.default_rng([study_seed, trial_number])``. A confirmation trains
seed ``k`` (0-based) of trial ``n`` on ``[study_seed, n, 1000 + k]``: a sequence of three numbers, so
never the trial's own two-number seed, and the same seeds on every machine and every call.

Example:
    >>> tracker = Tracker.open("studies/demo.sqlite", create=False)   # doctest: +SKIP
    >>> replay_trial(tracker, 3)["identical"]                           # doctest: +SKIP
    True
"""

from __future__ import annotations

import math
import platform
from pathlib import Path

import numpy as np
from scipy import stats

from sweep.forecast import (
    ReviewError,
    network_for,
    one_blas_thread,
    open_study,
    ranked_complete,
    retrain_folds,
    window_forecasts,
)
from sweep.inputs import fold_mean, window_losses
from sweep.provenance import code_version, git_commit, package_versions
from sweep.records import ConfirmRecord, HoldoutRecord, NoteRecord, utc_now
from sweep.space import params_to_configs
from sweep.spec import diff_specs, parse_spec
from trainers import metrics
from trainers.data import sha256_file
from trainers.fit import fit_mlp_stacked

__all__ = [
    "CONFIRM_SEED_OFFSET",
    "HoldoutAlreadyUsed",
    "ReviewError",
    "add_decision_note",
    "confirm_seeds",
    "confirm_trials",
    "diff_studies",
    "environment_differences",
    "holdout_trial",
    "list_notes",
    "replay_trial",
    "trial_key",
]

CONFIRM_SEED_OFFSET = 1000


class HoldoutAlreadyUsed(ReviewError):
    """The study's test window was already used; ``previous`` holds the earlier holdout records."""

    def __init__(self, message: str, previous: list):
        super().__init__(message)
        self.previous = previous


def trial_key(number: int) -> str:
    """How a trial is named beside the baselines in tables and records: ``"trial 17"``."""
    return f"trial {number}"


def _finite(value) -> float | None:
    return None if value is None or not math.isfinite(value) else float(value)


# ----------------------------------------------------------------------------------------- replay


def environment_differences(record) -> list[dict]:
    """Package versions, Python, platform, volsweep version and git commit that differ from the record.

    The git commit ends in ``+dirty`` when the checkout had uncommitted changes; two dirty checkouts of
    one commit look the same here even if their changes differ.
    """
    current = package_versions()
    rows = [{"name": name, "recorded": record.packages.get(name), "current": current.get(name)}
            for name in sorted(set(record.packages) | set(current))]
    rows += [{"name": "python", "recorded": record.python, "current": platform.python_version()},
             {"name": "platform", "recorded": record.platform, "current": platform.platform()},
             {"name": "volsweep", "recorded": record.code_version, "current": code_version()},
             {"name": "git commit", "recorded": record.git_commit, "current": git_commit()}]
    return [r for r in rows if r["recorded"] != r["current"]]


def _source_status(dataset) -> dict:
    path = Path(dataset.source)
    if not path.is_file():
        return {"path": dataset.source, "exists": False, "changed": None}
    return {"path": dataset.source, "exists": True, "changed": sha256_file(path) != dataset.sha256}


def _abs_diff(a, b) -> float:
    """|a - b| for recorded/replayed values; 0 when both are missing or both the same non-finite value."""
    a = math.nan if a is None else a
    b = math.nan if b is None else b
    if a == b or (math.isnan(a) and math.isnan(b)):
        return 0.0
    return math.inf if not (math.isfinite(a) and math.isfinite(b)) else abs(a - b)


def replay_trial(tracker, number: int, *, study: str | None = None) -> dict:
    """Retrain a recorded trial from the record and compare its learning curve epoch by epoch.

    Pruned and interrupted trials are replayed up to their recorded number of epochs.

    Returns:
        Keys: ``identical`` (every recorded loss and score equal, the same epochs), ``max_abs_diff``
        (largest |recorded - replayed| over epochs and values), ``epochs`` (per epoch: the differences
        of train loss, valid loss and score, and their maximum), ``n_epochs_recorded``/``_replayed``,
        ``best_epoch_recorded``/``_replayed``, ``forecasts_max_abs_diff`` (validation forecasts of the
        best weights, when recorded), ``weights_max_abs_diff`` (when weights were stored),
        ``environment`` (``same`` and the ``differences`` in packages, Python, platform),
        ``source_changed`` (True/False, None when the original price file is gone) and ``message``.

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
            epochs.append({"epoch": i + 1, "train_loss": None, "valid_loss": None, "valid_score": None,
                           "max_abs_diff": None, "missing": "replayed" if new is None else "recorded"})
            continue
        row = {"epoch": i + 1, "train_loss": _abs_diff(old.train_loss, new.train_loss),
               "valid_loss": _abs_diff(old.valid_loss, new.valid_loss),
               "valid_score": _abs_diff(old.valid_score, _finite(new.valid_score))}
        row["max_abs_diff"] = max(row["train_loss"], row["valid_loss"], row["valid_score"])
        epochs.append(row)
    max_diff = max((e["max_abs_diff"] for e in epochs if e["max_abs_diff"] is not None), default=0.0)
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
        changed = ", ".join(f"{d['name']} {d['recorded']} -> {d['current']}" for d in differences)
        length = "" if same_length else (f"; the replay stopped after {len(replayed)} epochs, the record after "
                                         f"{len(trial.epochs)}")
        message = (f"trial {number} replays with differences: largest absolute difference {max_diff:.3g} over "
                   f"the {min(len(replayed), len(trial.epochs))} epochs both have{length}; "
                   + (f"differences from the recorded environment: {changed}" if differences
                      else "the recorded package versions, Python and platform are the same as here"))
    if source["changed"]:
        message += f"; note: the original price file {source['path']} has changed since the study was made"
    return {
        "study": ctx.name, "trial": number, "state": trial.state, "identical": identical,
        "max_abs_diff": max_diff, "n_epochs_recorded": len(trial.epochs), "n_epochs_replayed": len(replayed),
        "best_epoch_recorded": trial.best_epoch, "best_epoch_replayed": result.best_epoch,
        "objective_recorded": trial.objective,
        "objective_replayed": _finite(fold_mean([math.nan if r.valid_score is None else r.valid_score
                                                 for r in fold_results])),
        "forecasts_max_abs_diff": forecasts_diff, "weights_max_abs_diff": weights_diff, "epochs": epochs,
        "environment": {"same": not differences, "differences": differences},
        "source": source, "source_changed": source["changed"], "message": message,
    }


# ----------------------------------------------------------------------------------------- confirm


def confirm_seeds(study_seed: int, number: int, n_seeds: int) -> list[list[int]]:
    """The fresh seeds of a confirmation: ``[study_seed, number, 1000 + k]`` for k = 0 .. n_seeds - 1."""
    return [[int(study_seed), int(number), CONFIRM_SEED_OFFSET + k] for k in range(int(n_seeds))]


def _fold_value(results, name: str) -> float | None:
    """The mean over folds of one seed's value at its best epoch (the value itself for one split)."""
    values = [_finite(getattr(r, name)) if r.best_epoch > 0 else None for r in results]
    return None if any(v is None for v in values) else fold_mean(values)


def _fold_gap(results) -> float | None:
    if len(results) == 1:
        r = results[0]
        return _finite(r.gap) if r.best_epoch > 0 else None
    train, valid = _fold_value(results, "train_loss"), _fold_value(results, "valid_loss")
    return None if train is None or valid is None else valid - train


def _summary(values: list[float | None]) -> dict:
    finite = np.array([v for v in values if v is not None], dtype=np.float64)
    if finite.size == 0:
        return {"mean": None, "std": None, "min": None, "max": None, "n_finite": 0}
    return {"mean": float(finite.mean()), "std": float(finite.std(ddof=1)) if finite.size > 1 else None,
            "min": float(finite.min()), "max": float(finite.max()), "n_finite": int(finite.size)}


def _ranking(numbers: list[int], recorded: list[float], per_seed: np.ndarray) -> dict:
    """How well the recorded ranking of ``numbers`` holds across seeds (per_seed: n_trials x n_seeds)."""
    ranked = np.where(np.isfinite(per_seed), per_seed, np.inf)
    leader_first = int(np.sum(np.argmin(ranked, axis=0) == 0))  # numbers[0] is the recorded leader
    with np.errstate(all="ignore"):
        means = np.array([np.nanmean(row) if np.isfinite(row).any() else np.inf for row in per_seed])
    rho = None
    if len(numbers) >= 2 and np.isfinite(means).all():
        rho = _finite(float(stats.spearmanr(recorded, means).statistic))
    by_mean = [numbers[i] for i in np.argsort(means, kind="stable")]
    n_seeds = per_seed.shape[1]
    words = (f"trial {numbers[0]} (first on the recorded ranking) stays first on {leader_first} of {n_seeds} "
             f"seeds; ranked by the mean over seeds the order is {', '.join(map(str, by_mean))}")
    if rho is not None:
        words += f"; Spearman rank correlation with the recorded ranking {rho:.2f}"
    return {"leader": numbers[0], "leader_first": leader_first, "n_seeds": n_seeds,
            "leader_first_share": leader_first / n_seeds, "spearman": rho, "order_by_mean": by_mean,
            "order_recorded": list(numbers), "words": words}


def confirm_trials(tracker, *, study: str | None = None, top: int = 5, n_seeds: int = 8) -> dict:
    """Retrain the best ``top`` complete trials on ``n_seeds`` fresh seeds each and record the spread.

    The seeds of one trial train in one stacked pass (``trainers.fit.fit_mlp_stacked``); result ``k``
    equals ``fit_mlp`` on seed ``k`` alone. Each trial gets one ``ConfirmRecord`` with the objective and
    overfit gap (validation minus training loss at the best epoch) per seed, and their mean, standard
    deviation (n - 1), minimum and maximum. A seed that diverges counts as None and is left out of the
    summary. The ranking check ranks trials per seed by that seed's objective (a missing one last).

    Returns:
        ``{"study", "created", "seed_rule", "trials": [per trial: number, recorded objective, seeds,
        objectives, gaps, summary], "ranking": {leader_first, leader_first_share, spearman, ...}}``.

    Raises:
        ValueError: ``top`` or ``n_seeds`` below 1. ReviewError: no complete trial.
    """
    if top < 1 or n_seeds < 1:
        raise ValueError(f"top and seeds must be at least 1; got top={top}, seeds={n_seeds}")
    ctx = open_study(tracker, study)
    finalists = ranked_complete(tracker.load_trials(ctx.name, states=["complete"]))[:top]
    if not finalists:
        raise ReviewError(f"study {ctx.name!r} has no complete trial with a finite objective to confirm; "
                          "run more trials first (`volsweep run STUDY.toml --trials N`)")
    created, inputs = utc_now(), ctx.inputs
    rows = []
    for trial in finalists:
        seeds = confirm_seeds(ctx.spec.study.seed, trial.number, n_seeds)
        mlp_config, train_config = params_to_configs(trial.params, n_inputs=inputs.n_inputs,
                                                     n_outputs=inputs.n_outputs, task=inputs.task,
                                                     training=ctx.spec.training)
        per_fold = []  # per fold, the K seeds' results; folds train one after another, as in the sweep
        with one_blas_thread():
            for f in ctx.all_folds:
                per_fold.append(fit_mlp_stacked(mlp_config, train_config, f.X["train"], f.y["train"],
                                                f.X["valid"], f.y["valid"],
                                                rngs=[np.random.default_rng(s) for s in seeds],
                                                valid_score=f.scorer("valid")))
        objectives = [_fold_value([fold[k] for fold in per_fold], "valid_score") for k in range(n_seeds)]
        gaps = [_fold_gap([fold[k] for fold in per_fold]) for k in range(n_seeds)]
        results = per_fold[-1]
        rows.append({"trial": trial.number, "objective_recorded": trial.objective, "gap_recorded": trial.gap,
                     "seeds": seeds, "objectives": objectives, "gaps": gaps,
                     "best_epochs": [r.best_epoch for r in results], "stop_reasons": [r.stop_reason for r in results],
                     "summary": {"objective": _summary(objectives), "gap": _summary(gaps)}})
    per_seed = np.array([[math.nan if v is None else v for v in r["objectives"]] for r in rows])
    ranking = _ranking([r["trial"] for r in rows], [r["objective_recorded"] for r in rows], per_seed)
    seed_rule = f"[study_seed, trial_number, {CONFIRM_SEED_OFFSET} + k], k = 0..{n_seeds - 1}"
    for r in rows:
        tracker.record_confirmation(ConfirmRecord(
            study=ctx.name, trial=r["trial"], created=created, seeds=r["seeds"], objectives=r["objectives"],
            gaps=r["gaps"], summary={**r["summary"], "objective_recorded": r["objective_recorded"]},
            extra={"best_epochs": r["best_epochs"], "stop_reasons": r["stop_reasons"], "seed_rule": seed_rule,
                   "confirmed_together": [x["trial"] for x in rows], "ranking": ranking, "stacked": True}))
    return {"study": ctx.name, "created": created, "objective": ctx.record.objective, "seed_rule": seed_rule,
            "trials": rows, "ranking": ranking}


# ----------------------------------------------------------------------------------------- holdout


def _model_losses(inputs, truth_window: str, forecasts: np.ndarray) -> dict:
    if inputs.task == "classification":
        labels = inputs.labels[truth_window]
        return {"deviance": float(metrics.deviance(labels, forecasts)),
                "accuracy": float(metrics.accuracy(labels, forecasts))}
    return window_losses(inputs.truth[truth_window], forecasts)


def _holdout_summary(h) -> dict:
    return {"sequence": h.sequence, "trial": h.trial, "created": h.created, "again": h.again,
            "command": h.command, "results": h.results}


def holdout_trial(tracker, number: int, *, study: str | None = None, again: bool = False,
                  command: str = "volsweep holdout") -> dict:
    """Score one trial and every baseline on the test window, once, and record that it was done.

    The network is the trial's stored weights, or retrained from the record where they are missing
    (``network`` in the result says which). Regression results carry qlike, mse_log, mse, mae and
    mz_r2 (``sweep.inputs.window_losses``); classification deviance and accuracy.

    Raises:
        HoldoutAlreadyUsed: the study's test window was used before and ``again`` is False; the error's
            ``previous`` lists the earlier results. ReviewError: the trial is not complete.
    """
    ctx = open_study(tracker, study)
    previous = tracker.load_holdouts(ctx.name)
    if previous and not again:
        first = previous[0]
        raise HoldoutAlreadyUsed(
            f"the test window of study {ctx.name!r} was already used on {first.created[:10]} for trial "
            f"{first.trial}; --again records a repeat, kept beside the first",
            [_holdout_summary(h) for h in previous])
    trial = tracker.load_trial(ctx.name, number)
    if trial.state != "complete":
        raise ReviewError(f"trial {number} of study {ctx.name!r} is {trial.state}; the holdout scores a complete "
                          "trial: pick one from `volsweep top`")
    network, source = network_for(ctx, trial)
    results = {trial_key(number): _model_losses(ctx.inputs, "test", window_forecasts(ctx.inputs, network, "test"))}
    for b in tracker.load_baselines(ctx.name, "test"):
        results[b.name] = _model_losses(ctx.inputs, "test", b.forecasts)
    stored = tracker.record_holdout(HoldoutRecord(study=ctx.name, trial=number, created=utc_now(),
                                                  command=command, again=bool(previous), results=results))
    objective = ctx.record.objective
    order = sorted(results, key=lambda k: (results[k].get(objective) is None, results[k].get(objective)))
    dates = ctx.inputs.dates("test")
    return {"study": ctx.name, "trial": number, "sequence": stored.sequence, "created": stored.created,
            "again": stored.again, "network": source, "objective": objective, "results": results,
            "order": order, "window": {"rows": int(len(dates)), "first": dates[0].date().isoformat(),
                                       "last": dates[-1].date().isoformat()},
            "previous": [_holdout_summary(h) for h in previous]}


# ----------------------------------------------------------------------------------------- notes


def add_decision_note(tracker, number: int | None, text: str, *, study: str | None = None,
                      author: str | None = None) -> NoteRecord:
    """Add a dated decision note on a trial (``number``) or the whole study (``None``); never overwritten."""
    record = tracker.find_study(study)
    note = NoteRecord(study=record.name, trial=number, created=utc_now(), text=text, author=author)
    tracker.add_note(note)
    return note


def list_notes(tracker, *, study: str | None = None) -> list[dict]:
    """The study's decision notes, oldest first."""
    record = tracker.find_study(study)
    return [{"created": n.created, "trial": n.trial, "author": n.author, "text": n.text}
            for n in tracker.load_notes(record.name)]


# ----------------------------------------------------------------------------------------- diff


def _study_side(tracker, name: str) -> dict:
    ctx = open_study(tracker, name)
    dataset = tracker.load_dataset(ctx.record.dataset_sha256)
    best = ranked_complete(tracker.load_trials(ctx.name, states=["complete"]))
    windows = {}
    for w in ("train", "valid", "test"):
        dates = ctx.inputs.dates(w)
        windows[w] = {"rows": int(len(dates)), "first": dates[0].date().isoformat(),
                      "last": dates[-1].date().isoformat()}
    return {"name": ctx.name, "created": ctx.record.created, "objective": ctx.record.objective,
            "best_trial": best[0].number if best else None, "best_objective": best[0].objective if best else None,
            "n_complete": len(best), "dataset": {"sha256": dataset.sha256, "source": dataset.source,
                                                 "rows": dataset.n_rows, "first_date": dataset.first_date,
                                                 "last_date": dataset.last_date},
            "windows": windows, "code_version": ctx.record.code_version, "git_commit": ctx.record.git_commit,
            "packages": ctx.record.packages, "spec": parse_spec(ctx.record.spec_text, base_dir=".").to_dict()}


def diff_studies(tracker, study_a: str, study_b: str) -> dict:
    """What differs between two studies of one record: settings, data, windows, best objective, versions.

    Returns:
        ``{"a": side, "b": side, "spec": ["section.key: a -> b", ...], "same_data": bool,
        "windows": [lines], "packages": [lines], "best": line}``.
    """
    a, b = _study_side(tracker, study_a), _study_side(tracker, study_b)
    spec_lines = [line for line in diff_specs(a["spec"], b["spec"]) if not line.startswith("study.name:")]
    window_lines = [f"{w}: {a['windows'][w]['first']}..{a['windows'][w]['last']} ({a['windows'][w]['rows']} rows)"
                    f" -> {b['windows'][w]['first']}..{b['windows'][w]['last']} ({b['windows'][w]['rows']} rows)"
                    for w in ("train", "valid", "test") if a["windows"][w] != b["windows"][w]]
    package_lines = [f"{p}: {a['packages'].get(p)} -> {b['packages'].get(p)}"
                     for p in sorted(set(a["packages"]) | set(b["packages"]))
                     if a["packages"].get(p) != b["packages"].get(p)]
    same_data = a["dataset"]["sha256"] == b["dataset"]["sha256"]

    def best(side):
        if side["best_trial"] is None:
            return f"{side['name']}: no complete trial"
        return f"{side['name']}: trial {side['best_trial']}, {side['objective']} {side['best_objective']:.6g}"

    for side in (a, b):
        side.pop("spec")
    return {"a": a, "b": b, "spec": spec_lines, "same_data": same_data, "windows": window_lines,
            "packages": package_lines, "best": f"{best(a)}; {best(b)}",
            "comparable": a["objective"] == b["objective"] and same_data and not window_lines}
