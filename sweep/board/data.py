"""The board's data step: records in, typed values out (``sweep/board/values.py``), no figures and no HTML.

``collect_board(tracker, study)`` reads one study into a ``BoardData``. Each ``collect_*`` function
builds one part of it from records the tracker returned; only ``collect_curves`` and
``collect_review`` (``sweep/board/reviews.py``) read from the tracker themselves.
"""

from __future__ import annotations

import json
import shlex
from collections.abc import Iterable
from datetime import datetime, timezone

from sweep.board.reviews import collect_review
from sweep.board.values import (
    BestBaseline,
    BestTrial,
    BoardData,
    BoardHeader,
    DatasetFacts,
    EpochCount,
    EpochUse,
    GapPoint,
    GapPoints,
    LearningCurve,
    MadeBy,
    ProgressPoint,
    TargetFacts,
)
from sweep.errors import SpecError
from sweep.record import TRIAL_STATES, StudyRecord, Tracker, code_version, is_finite, rank_rows
from sweep.search import SettingImportance, setting_importance
from sweep.study import Fixed, StudySpec, spec_from_text

__all__ = [
    "N_CURVES",
    "SCATTER_SETTINGS",
    "collect_board",
    "collect_curves",
    "collect_epochs",
    "collect_header",
    "collect_importance",
    "collect_progress",
    "collect_rows",
    "collect_scatter",
    "read_spec",
    "saved_share",
]

N_CURVES = 8
SCATTER_SETTINGS = ("hidden_units", "dropout")


def read_spec(record: StudyRecord) -> tuple[StudySpec | None, str | None]:
    """The study's spec from the text kept in the record: (StudySpec, None) or (None, problem)."""
    try:
        return spec_from_text(record.spec_text), None
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


def collect_rows(record, spec, trials, baselines) -> tuple[list[dict], tuple[str, ...], dict[str, str]]:
    """The ranking rows, the searched settings and their kinds ("num" or "text").

    Rows are the dicts ``sweep.record.rank_rows`` gives (ascending objective, missing last; reversed
    for a study that maximizes), left as dicts: they are the rows the CLI prints as JSON. Each row
    gets ``settings`` (values in ``names`` order; None for baselines), ``behind`` and ``marker``.
    """
    rows = rank_rows(trials, baselines, sort="objective")
    if record.direction == "maximize":
        rows.sort(key=lambda r: (not is_finite(r["objective"]), -(r["objective"] if is_finite(r["objective"]) else 0)))
        best = max((b.objective for b in baselines if is_finite(b.objective)), default=None)
        for i, row in enumerate(rows, start=1):
            row["rank"] = i
            beats = row["kind"] == "trial" and is_finite(row["objective"]) and best is not None
            row["beats_best_baseline"] = (row["objective"] > best) if beats else None
    has_baseline = any(is_finite(b.objective) for b in baselines)
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
    return rows, tuple(names), kinds


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


def collect_header(record, dataset, spec, spec_problem, trials, rows, epochs: EpochUse) -> BoardHeader:
    """What the top of the board says about the study, its data and how it ran."""
    counts = {state: 0 for state in TRIAL_STATES}
    for t in trials:
        counts[t.state] = counts.get(t.state, 0) + 1
    starts = [t.started for t in trials if t.started]
    ends = [t.finished for t in trials if t.finished]
    trial_rows = [r for r in rows if r["kind"] == "trial"]
    complete = [r for r in trial_rows if r["state"] == "complete" and is_finite(r["objective"])]
    base = [r for r in rows if r["kind"] == "baseline" and is_finite(r["objective"])]
    target = None
    fixed, space = {}, {}
    if spec is not None:
        target = TargetFacts(estimator=spec.target.estimator, horizons=tuple(spec.target.horizons),
                             scale=spec.target.scale, task=spec.target.task)
        for name, setting in spec.space.items():
            if isinstance(setting, Fixed):
                fixed[name] = setting.value
            else:
                space[name] = setting.to_plain()
    return BoardHeader(
        study=record.name,
        created=record.created,
        objective=record.objective,
        direction=record.direction,
        task=record.task,
        target=target,
        dataset=DatasetFacts(
            source=dataset.source, n_rows=dataset.n_rows, first_date=dataset.first_date,
            last_date=dataset.last_date, sha256=dataset.sha256, sha256_short=dataset.sha256[:12],
            n_dropped=len(dataset.dropped),
        ),
        windows=record.settings.get("windows"),
        sampler=record.sampler,
        pruner=record.pruner,
        search_details=_search_details(spec),
        max_epochs=epochs.max_epochs,
        space=space,
        fixed=fixed,
        counts=counts,
        n_trials=len(trials),
        compute_seconds=float(sum(t.seconds for t in trials)),
        wall_seconds=_seconds_between(min(starts), max(ends)) if starts and ends else None,
        code_version=record.code_version,
        git_commit=record.git_commit,
        git_commit_short=_short_commit(record.git_commit),
        python=record.python,
        platform=record.platform,
        spec_hash_short=record.spec_hash[:12],
        spec_problem=spec_problem,
        best_trial=BestTrial(trial=complete[0]["trial"], objective=complete[0]["objective"]) if complete else None,
        best_baseline=BestBaseline(name=base[0]["trial"], objective=base[0]["objective"]) if base else None,
        n_beating=sum(1 for r in trial_rows if r["beats_best_baseline"] is True),
    )


# ---------------------------------------------------------------------------------------- pictures


def collect_progress(trials, direction: str = "minimize") -> tuple[ProgressPoint, ...]:
    """Objective by trial number, with the best complete objective so far."""
    better = max if direction == "maximize" else min
    best, out = None, []
    for t in sorted(trials, key=lambda t: t.number):
        if t.state == "complete" and is_finite(t.objective):
            best = t.objective if best is None else better(best, t.objective)
        out.append(ProgressPoint(trial=t.number, state=t.state, objective=t.objective, running_best=best))
    return tuple(out)


def collect_curves(tracker, study: str, rows: list[dict], n_curves: int = N_CURVES) -> tuple[LearningCurve, ...]:
    """Learning curves of the ``n_curves`` best complete trials (loaded for those trials only).

    With walk-forward folds, the curve of the latest fold: the network a holdout or a forecast uses.
    """
    best = [r for r in rows if r["kind"] == "trial" and r["state"] == "complete" and is_finite(r["objective"])]
    curves = []
    for rank, row in enumerate(best[:n_curves], start=1):
        epochs = tracker.load_trial(study, row["trial"]).epochs
        last_fold = max((e.fold for e in epochs), default=0)
        epochs = [e for e in epochs if e.fold == last_fold]
        curves.append(LearningCurve(
            trial=row["trial"], rank=rank, objective=row["objective"], best_epoch=row["best_epoch"],
            epoch=tuple(e.epoch for e in epochs), train_loss=tuple(e.train_loss for e in epochs),
            valid_loss=tuple(e.valid_loss for e in epochs),
        ))
    return tuple(curves)


def collect_importance(trials, spec, direction: str = "minimize") -> SettingImportance:
    """Setting importance of the complete trials (``sweep.search.setting_importance``) over the searched settings."""
    done = [t for t in trials if t.state == "complete" and is_finite(t.objective)]
    return setting_importance(done, _searched(spec, done), spec.space if spec is not None else {}, direction)


def collect_scatter(trials, names=SCATTER_SETTINGS) -> dict[str, GapPoints]:
    """Overfit gap against each setting in ``names`` for complete trials (values from their params)."""
    out = {}
    complete = [t for t in trials if t.state == "complete" and is_finite(t.gap)]
    for name in names:
        points = tuple(GapPoint(trial=t.number, x=t.params[name], gap=t.gap, gap_ratio=t.gap_ratio,
                                objective=t.objective) for t in complete if is_finite(t.params.get(name)))
        reason = None
        if not complete:
            reason = "no complete trial with an overfit gap yet"
        elif not points:
            reason = f"the trials' settings hold no numeric {name}"
        out[name] = GapPoints(points=points, reason=reason)
    return out


# ---------------------------------------------------------------------------------------- epochs


def saved_share(max_epochs: int, trials: Iterable[EpochCount]) -> tuple[int, int, float | None]:
    """Epochs pruning saved: (n_saved, n_run, share).

    ``n_saved`` is the sum over pruned trials of ``max_epochs - epochs run`` (never below 0);
    ``n_run`` is every epoch actually run, by trials of every state; ``share = n_saved / (n_saved + n_run)``
    (None when both are 0). It is an upper bound: early stopping might have ended some pruned trials sooner.
    """
    trials = list(trials)
    n_saved = sum(max(0, max_epochs - t.epochs) for t in trials if t.state == "pruned")
    n_run = sum(t.epochs for t in trials)
    total = n_saved + n_run
    return n_saved, n_run, (n_saved / total if total else None)


def collect_epochs(trials, spec) -> EpochUse:
    """Epochs used per trial, and the share pruning saved (see ``saved_share``)."""
    per_trial = tuple(EpochCount(trial=t.number, state=t.state, epochs=t.n_epochs)
                      for t in sorted(trials, key=lambda t: t.number))
    if spec is not None and spec.split.folds:
        max_epochs = spec.training.max_epochs * spec.split.folds
        source = "training.max_epochs times split.folds of the study file"
    elif spec is not None:
        max_epochs, source = spec.training.max_epochs, "training.max_epochs of the study file"
    else:
        max_epochs = max((t.epochs for t in per_trial), default=0)
        source = "the longest trial (the study file kept in the record could not be read)"
    n_saved, n_run, share = saved_share(max_epochs, per_trial)
    return EpochUse(max_epochs=max_epochs, max_epochs_source=source, trials=per_trial, n_run=n_run,
                    n_saved=n_saved, saved_share=share, n_pruned=sum(1 for t in per_trial if t.state == "pruned"))


# ---------------------------------------------------------------------------------------- the whole board


def collect_board(tracker: Tracker, study: str | None = None, *, command: str | None = None,
                  now: str | None = None, n_curves: int = N_CURVES) -> BoardData:
    """Read one study of the record into a ``BoardData``.

    Learning curves are loaded only for the ``n_curves`` best complete trials.

    Args:
        tracker: an open ``sweep.record.Tracker``.
        study: the study's name; None for the file's only study.
        command: the command line that made the board (shown in the footer).
        now: the time to show as the board's making time (ISO text, UTC); default: now.
        n_curves: how many of the best complete trials get their learning curves drawn.

    Raises:
        StudyNotFound: no such study (or several and no name given).
    """
    record = tracker.find_study(study)
    dataset = tracker.load_dataset(record.dataset_sha256)
    spec, spec_problem = read_spec(record)
    trials = tracker.load_trials(record.name)
    baselines = tracker.load_baselines(record.name, window="valid")
    rows, settings, kinds = collect_rows(record, spec, trials, baselines)
    epochs = collect_epochs(trials, spec)
    header = collect_header(record, dataset, spec, spec_problem, trials, rows, epochs)
    review = collect_review(tracker, record.name, objective=record.objective)
    return BoardData(
        header=header,
        rows=rows,
        settings=settings,
        setting_kinds=kinds,
        progress=collect_progress(trials, record.direction),
        curves=collect_curves(tracker, record.name, rows, n_curves),
        scatter=collect_scatter(trials),
        importance=collect_importance(trials, spec, record.direction),
        epochs=epochs,
        review=review,
        made=MadeBy(
            command=command or f"volsweep board <record> --study {shlex.quote(record.name)}",
            version=code_version(),
            time=now or datetime.now(timezone.utc).isoformat(timespec="seconds"),
        ),
    )
