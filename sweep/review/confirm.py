"""Confirm: retrain the best trials on fresh seeds, record the spread, and say whether the ranking holds.

Seeds. A confirmation trains seed ``k`` (0-based) of trial ``n`` on ``[study_seed, n, 1000 + k]``: a
sequence of three numbers, so never the trial's own two-number seed, and the same seeds on every
machine and every call.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats

from sweep.errors import InputError, ReviewError
from sweep.record import ConfirmRecord, Tracker, finite_or_none, utc_now
from sweep.review.context import one_blas_thread, open_study, ranked_complete
from sweep.search import params_to_configs
from sweep.study import fold_mean
from trainers.fit import fit_mlp_stacked

__all__ = [
    "CONFIRM_SEED_OFFSET", "ConfirmReport", "ConfirmedTrial", "RankingCheck", "SpreadSummary", "confirm_seeds",
    "confirm_trials",
]

CONFIRM_SEED_OFFSET = 1000


@dataclass(frozen=True)
class SpreadSummary:
    """Mean, standard deviation (n - 1; None below two values), minimum and maximum of the finite values."""

    mean: float | None
    std: float | None
    min: float | None
    max: float | None
    n_finite: int

    def to_dict(self) -> dict:
        return {"mean": self.mean, "std": self.std, "min": self.min, "max": self.max, "n_finite": self.n_finite}


@dataclass(frozen=True)
class ConfirmedTrial:
    """One finalist retrained on fresh seeds: per seed its objective, gap, best epoch and stop reason."""

    trial: int
    objective_recorded: float | None
    gap_recorded: float | None
    seeds: tuple[tuple[int, ...], ...]
    objectives: tuple[float | None, ...]
    gaps: tuple[float | None, ...]
    best_epochs: tuple[int, ...]
    stop_reasons: tuple[str, ...]
    objective_spread: SpreadSummary
    gap_spread: SpreadSummary

    def summary_dict(self) -> dict:
        """``{"objective": spread, "gap": spread}``, as the record keeps it."""
        return {"objective": self.objective_spread.to_dict(), "gap": self.gap_spread.to_dict()}

    def to_dict(self) -> dict:
        return {"trial": self.trial, "objective_recorded": self.objective_recorded,
                "gap_recorded": self.gap_recorded, "seeds": [list(s) for s in self.seeds],
                "objectives": list(self.objectives), "gaps": list(self.gaps), "best_epochs": list(self.best_epochs),
                "stop_reasons": list(self.stop_reasons), "summary": self.summary_dict()}


@dataclass(frozen=True)
class RankingCheck:
    """How well the recorded ranking of the finalists holds across the fresh seeds; ``words`` says it."""

    leader: int
    leader_first: int
    n_seeds: int
    leader_first_share: float
    spearman: float | None
    order_by_mean: tuple[int, ...]
    order_recorded: tuple[int, ...]
    words: str

    def to_dict(self) -> dict:
        return {"leader": self.leader, "leader_first": self.leader_first, "n_seeds": self.n_seeds,
                "leader_first_share": self.leader_first_share, "spearman": self.spearman,
                "order_by_mean": list(self.order_by_mean), "order_recorded": list(self.order_recorded),
                "words": self.words}


@dataclass(frozen=True)
class ConfirmReport:
    """The finalists of a study retrained on fresh seeds (see ``confirm_trials``)."""

    study: str
    created: str
    objective: str
    seed_rule: str
    trials: tuple[ConfirmedTrial, ...]
    ranking: RankingCheck

    def to_dict(self) -> dict:
        """The report as JSON-able values, keys in print order."""
        return {"study": self.study, "created": self.created, "objective": self.objective,
                "seed_rule": self.seed_rule, "trials": [t.to_dict() for t in self.trials],
                "ranking": self.ranking.to_dict()}


def confirm_seeds(study_seed: int, number: int, n_seeds: int) -> list[list[int]]:
    """The fresh seeds of a confirmation: ``[study_seed, number, 1000 + k]`` for k = 0 .. n_seeds - 1."""
    return [[int(study_seed), int(number), CONFIRM_SEED_OFFSET + k] for k in range(int(n_seeds))]


def _fold_value(results, name: str) -> float | None:
    """The mean over folds of one seed's value at its best epoch (the value itself for one split)."""
    values = [finite_or_none(getattr(r, name)) if r.best_epoch > 0 else None for r in results]
    return None if any(v is None for v in values) else fold_mean(values)


def _fold_gap(results) -> float | None:
    if len(results) == 1:
        r = results[0]
        return finite_or_none(r.gap) if r.best_epoch > 0 else None
    train, valid = _fold_value(results, "train_loss"), _fold_value(results, "valid_loss")
    return None if train is None or valid is None else valid - train


def _summary(values: list[float | None]) -> SpreadSummary:
    finite = np.array([v for v in values if v is not None], dtype=np.float64)
    if finite.size == 0:
        return SpreadSummary(mean=None, std=None, min=None, max=None, n_finite=0)
    return SpreadSummary(mean=float(finite.mean()), std=float(finite.std(ddof=1)) if finite.size > 1 else None,
                         min=float(finite.min()), max=float(finite.max()), n_finite=int(finite.size))


def _ranking(numbers: list[int], recorded: list[float], per_seed: np.ndarray) -> RankingCheck:
    """How well the recorded ranking of ``numbers`` holds across seeds (per_seed: n_trials x n_seeds)."""
    ranked = np.where(np.isfinite(per_seed), per_seed, np.inf)
    leader_first = int(np.sum(np.argmin(ranked, axis=0) == 0))  # numbers[0] is the recorded leader
    with np.errstate(all="ignore"):
        means = np.array([np.nanmean(row) if np.isfinite(row).any() else np.inf for row in per_seed])
    rho = None
    if len(numbers) >= 2 and np.isfinite(means).all():
        rho = finite_or_none(float(stats.spearmanr(recorded, means).statistic))
    by_mean = [numbers[i] for i in np.argsort(means, kind="stable")]
    n_seeds = per_seed.shape[1]
    words = (f"trial {numbers[0]} (first on the recorded ranking) stays first on {leader_first} of {n_seeds} "
             f"seeds; ranked by the mean over seeds the order is {', '.join(map(str, by_mean))}")
    if rho is not None:
        words += f"; Spearman rank correlation with the recorded ranking {rho:.2f}"
    return RankingCheck(leader=numbers[0], leader_first=leader_first, n_seeds=n_seeds,
                        leader_first_share=leader_first / n_seeds, spearman=rho, order_by_mean=tuple(by_mean),
                        order_recorded=tuple(numbers), words=words)


def confirm_trials(tracker: Tracker, *, study: str | None = None, top: int = 5,
                   n_seeds: int = 8) -> ConfirmReport:
    """Retrain the best ``top`` complete trials on ``n_seeds`` fresh seeds each and record the spread.

    The seeds of one trial train in one stacked pass (``trainers.fit.fit_mlp_stacked``); result ``k``
    equals ``fit_mlp`` on seed ``k`` alone. Each trial gets one ``ConfirmRecord`` with the objective and
    overfit gap (validation minus training loss at the best epoch) per seed, and their mean, standard
    deviation (n - 1), minimum and maximum. A seed that diverges counts as None and is left out of the
    summary. The ranking check ranks trials per seed by that seed's objective (a missing one last).

    Returns:
        A ``ConfirmReport``: ``study``, ``created``, ``objective``, ``seed_rule``, ``trials`` (per trial a
        ``ConfirmedTrial``: number, recorded objective, seeds, objectives, gaps, their spreads) and
        ``ranking`` (a ``RankingCheck``: leader_first, leader_first_share, spearman, ...). ``to_dict()``
        gives the JSON the CLI prints.

    Raises:
        InputError: ``top`` or ``n_seeds`` below 1. ReviewError: no complete trial.
    """
    if top < 1 or n_seeds < 1:
        raise InputError(f"top and seeds must be at least 1; got top={top}, seeds={n_seeds}")
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
        rows.append(ConfirmedTrial(
            trial=trial.number, objective_recorded=trial.objective, gap_recorded=trial.gap,
            seeds=tuple(tuple(s) for s in seeds), objectives=tuple(objectives), gaps=tuple(gaps),
            best_epochs=tuple(r.best_epoch for r in results), stop_reasons=tuple(r.stop_reason for r in results),
            objective_spread=_summary(objectives), gap_spread=_summary(gaps)))
    per_seed = np.array([[math.nan if v is None else v for v in r.objectives] for r in rows])
    ranking = _ranking([r.trial for r in rows], [r.objective_recorded for r in rows], per_seed)
    seed_rule = f"[study_seed, trial_number, {CONFIRM_SEED_OFFSET} + k], k = 0..{n_seeds - 1}"
    for r in rows:
        row = r.to_dict()
        tracker.record_confirmation(ConfirmRecord(
            study=ctx.name, trial=r.trial, created=created, seeds=row["seeds"], objectives=row["objectives"],
            gaps=row["gaps"], summary={**row["summary"], "objective_recorded": r.objective_recorded},
            extra={"best_epochs": row["best_epochs"], "stop_reasons": row["stop_reasons"], "seed_rule": seed_rule,
                   "confirmed_together": [x.trial for x in rows], "ranking": ranking.to_dict(), "stacked": True}))
    return ConfirmReport(study=ctx.name, created=created, objective=ctx.record.objective, seed_rule=seed_rule,
                         trials=tuple(rows), ranking=ranking)
