"""Forecast comparisons of a recorded study: Diebold-Mariano tests of each finalist against each baseline,
the model confidence set over finalists and baselines, and Hansen's SPA test of whether the best of all
completed trials beats HAR once the number of configurations tried is accounted for.

Losses. The loss is the study's objective, row by row (``trainers.metrics.loss_series``, truth and
forecasts floored as ``sweep.study.score_forecasts`` floors them), so the mean of a trial's series is
its recorded objective. "all horizons" is the per-row mean over the study's horizons, the quantity trials
are ranked by; a classification study's row loss is ``-2 log p`` of the true regime (its deviance share).

Horizons (Diebold and Mariano 1995; Harvey, Leybourne and Newbold 1997). The target at horizon ``h`` is
the mean variance over the next ``h`` days, so neighbouring rows overlap and the loss differential is
MA(h - 1): each horizon is tested on its own column with ``horizon = h``, and the all-horizons loss with
``horizon`` = the longest horizon (it holds that target). Decisions read the HLN-corrected p-value,
two-sided, and the sign of the mean loss difference says which side is better.

Windows. "valid" uses the forecasts kept in the record. "test" needs a recorded holdout first (looking at
the test window is what ``volsweep holdout`` guards and records); its forecasts come from the stored
weights (retrained from the record where missing).

Every comparison is recorded (``Tracker.record_comparison``) and never overwritten.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
import pandas as pd

from sweep.errors import InputError, ReviewError
from sweep.record import COMPARISON_WINDOWS, ComparisonRecord, Tracker, TrialRecord, utc_now
from sweep.review.context import StudyContext, network_for, open_study, ranked_complete, trial_key, window_forecasts
from sweep.study import FORECAST_FLOOR, StudyInputs, WindowRows, window_rows
from trainers import metrics

__all__ = [
    "BENCHMARK", "BaselineLoss", "ComparisonReport", "ConfidenceSet", "DMRow", "FinalistLoss", "SPATest",
    "compare_forecasts", "dm_words", "percent", "row_losses",
]

BENCHMARK = "har"


@dataclass(frozen=True)
class DMRow:
    """One Diebold-Mariano test of a finalist against a baseline, on all horizons or one.

    ``horizon`` is "all" or the horizon in days; ``dm_horizon`` the ``h`` of the test. The statistics are
    None, and ``problem`` says why, when the loss differential has no positive long-run variance.
    """

    model: str
    baseline: str
    horizon: int | str
    dm_horizon: int
    mean_diff: float
    statistic: float | None
    pvalue: float | None
    hln_statistic: float | None
    hln_pvalue: float | None
    n: int
    verdict: str
    words: str
    problem: str | None = None

    def to_dict(self) -> dict:
        row = {"model": self.model, "baseline": self.baseline, "horizon": self.horizon,
               "dm_horizon": self.dm_horizon, "mean_diff": self.mean_diff, "statistic": self.statistic,
               "pvalue": self.pvalue, "hln_statistic": self.hln_statistic, "hln_pvalue": self.hln_pvalue,
               "n": self.n}
        if self.problem is not None:
            row["problem"] = self.problem
        row.update(verdict=self.verdict, words=self.words)
        return row


@dataclass(frozen=True)
class ConfidenceSet:
    """The model confidence set over the finalists and baselines (``pvalues`` by model, arch's order)."""

    size: float
    reps: int
    seed: int
    method: str
    included: tuple[str, ...]
    excluded: tuple[str, ...]
    pvalues: dict[str, float]
    models: tuple[str, ...]
    words: str

    def to_dict(self) -> dict:
        return {"size": self.size, "reps": self.reps, "seed": self.seed, "method": self.method,
                "included": list(self.included), "excluded": list(self.excluded), "pvalues": self.pvalues,
                "models": list(self.models), "words": self.words}


@dataclass(frozen=True)
class SPATest:
    """Hansen's SPA test of every complete trial against the benchmark (``pvalues``: lower, consistent, upper)."""

    benchmark: str
    n_models: int
    best: str
    best_mean_loss: float
    benchmark_mean_loss: float
    pvalues: dict[str, float]
    better_models: tuple[str, ...]
    level: float
    reps: int
    seed: int
    beats_benchmark: bool
    words: str

    def to_dict(self) -> dict:
        return {"benchmark": self.benchmark, "n_models": self.n_models, "best": self.best,
                "best_mean_loss": self.best_mean_loss, "benchmark_mean_loss": self.benchmark_mean_loss,
                "pvalues": self.pvalues, "better_models": list(self.better_models), "level": self.level,
                "reps": self.reps, "seed": self.seed, "beats_benchmark": self.beats_benchmark, "words": self.words}


@dataclass(frozen=True)
class FinalistLoss:
    """A finalist's mean loss on the window beside its recorded validation objective."""

    model: str
    trial: int
    objective_recorded: float | None
    mean_loss: float

    def to_dict(self) -> dict:
        return {"model": self.model, "trial": self.trial, "objective_recorded": self.objective_recorded,
                "mean_loss": self.mean_loss}


@dataclass(frozen=True)
class BaselineLoss:
    """A baseline's mean loss on the window."""

    model: str
    mean_loss: float

    def to_dict(self) -> dict:
        return {"model": self.model, "mean_loss": self.mean_loss}


@dataclass(frozen=True)
class ComparisonReport:
    """Forecast comparisons on one window, as recorded (see ``compare_forecasts``).

    ``spa`` is None, and ``spa_skipped`` says why, when the benchmark is not a baseline; ``networks`` names
    where each trial's forecasts came from when not from the record. ``sequence`` and ``created`` are the
    record's.
    """

    study: str
    window: str
    objective: str
    level: float
    rows: int
    first_date: str
    last_date: str
    horizons: tuple[int, ...]
    dm_horizon_all: int
    finalists: tuple[FinalistLoss, ...]
    baselines: tuple[BaselineLoss, ...]
    dm: tuple[DMRow, ...]
    mcs: ConfidenceSet
    spa: SPATest | None
    spa_skipped: str | None
    n_trials: int
    networks: dict[str, str]
    sequence: int | None = None
    created: str | None = None

    def results_dict(self) -> dict:
        """What the record keeps as ``ComparisonRecord.results``: every key but ``sequence`` and ``created``."""
        return {
            "study": self.study, "window": self.window, "objective": self.objective, "level": self.level,
            "rows": self.rows, "first_date": self.first_date, "last_date": self.last_date,
            "horizons": list(self.horizons), "dm_horizon_all": self.dm_horizon_all,
            "finalists": [f.to_dict() for f in self.finalists], "baselines": [b.to_dict() for b in self.baselines],
            "dm": [r.to_dict() for r in self.dm], "mcs": self.mcs.to_dict(),
            "spa": None if self.spa is None else self.spa.to_dict(), "spa_skipped": self.spa_skipped,
            "n_trials": self.n_trials, "networks": self.networks,
        }

    def to_dict(self) -> dict:
        """The recorded results with ``sequence`` and ``created``, keys in print order."""
        return {**self.results_dict(), "sequence": self.sequence, "created": self.created}


def percent(level: float) -> str:
    """0.05 -> "5 %" (the spacing the reports use)."""
    return f"{100 * level:g} %"


def row_losses(inputs: StudyInputs, window: str, forecasts: np.ndarray,
               rows: WindowRows | None = None) -> tuple[np.ndarray, dict[int, np.ndarray]]:
    """The objective's loss per row: the all-horizons mean (n,) and, for regression, one series per horizon.

    ``rows`` (``sweep.study.window_rows``) gives the window's truth when it spans several folds.
    """
    truth_rows = inputs.truth[window] if rows is None else rows.truth
    if inputs.task == "classification":
        labels = inputs.labels[window] if rows is None else rows.labels
        p = np.clip(forecasts[np.arange(labels.size), labels], np.finfo(np.float64).eps, 1.0)
        return -2.0 * np.log(p), {}
    truth = np.maximum(truth_rows, FORECAST_FLOOR)
    forecasts = np.maximum(np.asarray(forecasts, dtype=np.float64), FORECAST_FLOOR)
    name = inputs.objective
    per_h = {h: metrics.loss_series(name, truth[:, j], forecasts[:, j]) for j, h in enumerate(inputs.horizons)}
    return metrics.loss_series(name, truth, forecasts), per_h


def dm_words(model: str, baseline: str, mean_diff: float, pvalue: float | None, level: float) -> tuple[str, str]:
    """(verdict, sentence) of a two-sided DM test; ``mean_diff`` < 0 means ``model`` has the lower loss."""
    if pvalue is None:
        return "untested", f"no test of {model} against {baseline}: the loss differential has no positive variance"
    if pvalue < level:
        if mean_diff < 0:
            return "better", f"at the {percent(level)} level, {model} beats {baseline}"
        return "worse", f"at the {percent(level)} level, {baseline} beats {model}"
    return "same", f"cannot tell {model} from {baseline} at the {percent(level)} level"


def _dm_row(model, baseline, loss_m, loss_b, horizon_label, dm_horizon, level) -> DMRow:
    mean_diff = float(np.mean(loss_m - loss_b))
    try:
        r = metrics.diebold_mariano(loss_m, loss_b, horizon=dm_horizon)
        found = dict(statistic=r.statistic, pvalue=r.pvalue, hln_statistic=r.hln_statistic,
                     hln_pvalue=r.hln_pvalue, n=r.n, problem=None)
    except ValueError as exc:  # identical losses, or a long-run variance <= 0 at this horizon
        found = dict(statistic=None, pvalue=None, hln_statistic=None, hln_pvalue=None, n=len(loss_m),
                     problem=str(exc))
    verdict, words = dm_words(model, baseline, mean_diff, found["hln_pvalue"], level)
    if horizon_label != "all":
        words += f" (horizon {horizon_label})"
    return DMRow(model=model, baseline=baseline, horizon=horizon_label, dm_horizon=dm_horizon, mean_diff=mean_diff,
                 verdict=verdict, words=words, **found)


def _forecasts(ctx: StudyContext, trial: TrialRecord, window: str, sources: dict) -> np.ndarray:
    if window == "valid" and trial.valid_forecasts is not None:
        return trial.valid_forecasts
    network, source = network_for(ctx, trial)
    sources[trial_key(trial.number)] = source
    return window_forecasts(ctx.inputs, network, window)


def _mcs(frame: pd.DataFrame, size: float, reps: int, seed: int) -> ConfidenceSet:
    r = metrics.model_confidence_set(frame, size=size, reps=reps, seed=seed)
    kept = ", ".join(r.included)
    left = ", ".join(r.excluded) or "none"
    words = (f"at the {percent(size)} level the model confidence set holds {kept} (the best model is among "
             f"them with probability {percent(1 - size)}); left out: {left}")
    return ConfidenceSet(size=size, reps=reps, seed=seed, method=r.method, included=tuple(r.included),
                         excluded=tuple(r.excluded), pvalues=r.pvalues, models=tuple(frame.columns), words=words)


def _spa(bench_name, bench: np.ndarray, frame: pd.DataFrame, level: float, reps: int, seed: int) -> SPATest:
    r = metrics.superior_predictive_ability(bench, frame, reps=reps, seed=seed, size=level)
    n = frame.shape[1]
    means = frame.mean()
    best = str(means.idxmin())
    p = r.pvalues["consistent"]
    tried = f"once the {n} configurations tried are accounted for (SPA consistent p = {p:.3g})"
    if p < level:
        words = f"at the {percent(level)} level, the best of the {n} completed trials ({best}) beats {bench_name} {tried}"
    else:
        words = (f"cannot say at the {percent(level)} level that any of the {n} completed trials beats "
                 f"{bench_name} {tried}")
    return SPATest(benchmark=bench_name, n_models=n, best=best, best_mean_loss=float(means.min()),
                   benchmark_mean_loss=float(np.mean(bench)), pvalues=r.pvalues,
                   better_models=tuple(r.better_models), level=level, reps=reps, seed=seed,
                   beats_benchmark=bool(p < level), words=words)


def compare_forecasts(tracker: Tracker, *, study: str | None = None, window: str = "valid", top: int = 5,
                      level: float = 0.05, mcs_size: float = 0.10, reps: int = 1000, seed: int | None = None,
                      command: str = "volsweep compare") -> ComparisonReport:
    """Compare the best ``top`` complete trials with the baselines on one window, and record the result.

    Args:
        tracker: an open Tracker.
        study: the study (None: the file's only study).
        window: "valid" or "test" (the test window needs a recorded holdout).
        top: finalists, best validation objective first.
        level: the level of the DM and SPA decisions.
        mcs_size: the size of the model confidence set (0.10: a 90 % set, common practice).
        reps: bootstrap replications of the MCS and SPA. seed: their seed (default the study's seed).
        command: the command line recorded with the result.

    Returns:
        A ``ComparisonReport``: ``finalists``, ``baselines``, ``dm`` (a ``DMRow`` per finalist, baseline
        and horizon, with ``words``), ``mcs`` (``ConfidenceSet``), ``spa`` (``SPATest``; None with a
        ``spa_skipped`` reason when HAR is not a baseline), ``networks`` (trials whose forecasts came from
        weights or retraining), ``sequence``. ``to_dict()`` gives the JSON the CLI prints;
        ``results_dict()`` what the record keeps.

    Raises:
        ReviewError: bad window, no holdout yet for "test", no complete trial, or no baseline.
    """
    if window not in COMPARISON_WINDOWS:
        raise ReviewError(f"window must be one of {', '.join(COMPARISON_WINDOWS)}, got {window!r}; "
                          "use --window valid or --window test")
    if top < 1:
        raise InputError(f"top must be at least 1; got top={top}")
    ctx = open_study(tracker, study)
    if window == "test" and not tracker.load_holdouts(ctx.name):
        raise ReviewError(f"the test window of study {ctx.name!r} has not been used yet; run `volsweep holdout "
                          f"{tracker.location} TRIAL` first (it records the look), or compare on --window valid")
    trials = ranked_complete(tracker.load_trials(ctx.name, states=["complete"], with_forecasts=True))
    if not trials:
        raise ReviewError(f"study {ctx.name!r} has no complete trial with a finite objective to compare")
    baselines = tracker.load_baselines(ctx.name, window)
    if not baselines:
        raise ReviewError(f"study {ctx.name!r} has no baselines on the {window} window to compare against")
    seed = int(ctx.spec.study.seed if seed is None else seed)
    inputs, sources = ctx.inputs, {}
    rows = window_rows(ctx.all_folds, window)
    losses, per_h = {}, {}
    for t in trials:
        losses[trial_key(t.number)], per_h[trial_key(t.number)] = row_losses(
            inputs, window, _forecasts(ctx, t, window, sources), rows)
    for b in baselines:
        losses[b.name], per_h[b.name] = row_losses(inputs, window, b.forecasts, rows)
    finalists = [trial_key(t.number) for t in trials[:top]]
    names = [b.name for b in baselines]
    longest = max(inputs.horizons) if inputs.task == "regression" else inputs.horizons[0]
    dm = []
    for model in finalists:
        for base in names:
            dm.append(_dm_row(model, base, losses[model], losses[base], "all", longest, level))
            for h in per_h[model]:
                dm.append(_dm_row(model, base, per_h[model][h], per_h[base][h], h, h, level))
    mcs = _mcs(pd.DataFrame({m: losses[m] for m in finalists + names}), mcs_size, reps, seed)
    spa, spa_skipped = None, None
    all_trials = pd.DataFrame({trial_key(t.number): losses[trial_key(t.number)] for t in trials})
    if BENCHMARK in losses:
        spa = _spa(BENCHMARK, losses[BENCHMARK], all_trials, level, reps, seed)
    else:
        spa_skipped = f"no {BENCHMARK!r} baseline on the {window} window (baselines: {', '.join(names)})"
    dates = rows.dates
    report = ComparisonReport(
        study=ctx.name, window=window, objective=ctx.record.objective, level=level, rows=int(len(dates)),
        first_date=dates[0].date().isoformat(), last_date=dates[-1].date().isoformat(),
        horizons=tuple(inputs.horizons), dm_horizon_all=longest,
        finalists=tuple(FinalistLoss(model=trial_key(t.number), trial=t.number, objective_recorded=t.objective,
                                     mean_loss=float(np.mean(losses[trial_key(t.number)]))) for t in trials[:top]),
        baselines=tuple(BaselineLoss(model=n, mean_loss=float(np.mean(losses[n]))) for n in names),
        dm=tuple(dm), mcs=mcs, spa=spa, spa_skipped=spa_skipped, n_trials=len(trials), networks=sources,
    )
    stored = tracker.record_comparison(ComparisonRecord(study=ctx.name, created=utc_now(), window=window,
                                                        command=command, results=report.results_dict()))
    return dataclasses.replace(report, sequence=stored.sequence, created=stored.created)
