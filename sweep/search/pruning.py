"""Pruning decisions after every epoch, without a storage round trip per epoch.

A trial reports its validation score after every epoch. Writing each report to a durable optuna storage
costs a locked, synced write (about a millisecond or more on a journal file, several on SQLite), which
on small networks is a large share of the training itself. So each worker keeps a `PruningView`: an
in-memory optuna study that holds the recorded learning curves of finished trials (read from the
record, which keeps every epoch anyway) and the running trial's own reports. The study's pruner
decides on that view exactly as it would on the durable storage; trials finished by other workers
join the view when the next trial starts.

The durable optuna study keeps what the sampler needs (settings, final values, states) and, for a
pruned trial, its objective as the one intermediate value at the epoch it was stopped.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
import optuna
from optuna.trial import TrialState

__all__ = ["PercentileRule", "PruningView"]

_STATES = {"complete": TrialState.COMPLETE, "pruned": TrialState.PRUNED}


class PercentileRule(NamedTuple):
    """The settings of optuna's percentile pruner (the median pruner is its 50th percentile).

    The view applies this rule itself in constant time per epoch (`_PercentileDecider`); `pruner()`
    gives optuna's own pruner with the same settings, which makes the same decisions.
    """

    percentile: float
    n_startup_trials: int = 5
    n_warmup_steps: int = 0
    interval_steps: int = 1
    n_min_trials: int = 1

    def pruner(self) -> optuna.pruners.PercentilePruner:
        return optuna.pruners.PercentilePruner(self.percentile, self.n_startup_trials, self.n_warmup_steps,
                                               self.interval_steps, n_min_trials=self.n_min_trials)


class PruningView:
    """An in-memory mirror of a study's learning curves, for the pruner.

    Args:
        pruner: an optuna pruner (the study's, from the spec).
        direction: "minimize" (volsweep's objectives are losses).
        epochs_per_fold: with walk-forward folds, the steps of fold k are
            `k * epochs_per_fold + epoch`, so trials are compared fold by fold, epoch by epoch.

    Example:
        >>> view = PruningView(optuna.pruners.MedianPruner(n_startup_trials=0))
        >>> view.start()
        >>> view.should_prune(1, 0.5)
        False
    """

    def __init__(self, pruner=None, direction: str = "minimize", *, rule: PercentileRule | None = None,
                 epochs_per_fold: int = 0):
        if pruner is None and rule is None:
            raise ValueError("PruningView needs an optuna pruner or a PercentileRule; got neither")
        pruner = rule.pruner() if pruner is None else pruner
        self._study = optuna.create_study(
            direction=direction, pruner=pruner, sampler=optuna.samplers.RandomSampler(seed=0)
        )
        self._seen: set[int] = set()
        self._trial = None
        self._rule = rule
        self._decider = None
        self._curve: dict[int, float] = {}
        self.epochs_per_fold = int(epochs_per_fold)
        self._replay_rungs = isinstance(
            pruner, (optuna.pruners.SuccessiveHalvingPruner, optuna.pruners.HyperbandPruner)
        )
        self._never = isinstance(pruner, optuna.pruners.NopPruner)

    @property
    def n_trials(self) -> int:
        """Finished trials in the view."""
        return len(self._seen)

    def add_finished(self, number: int, state: str, value: float | None, curve) -> None:
        """Add one finished trial (complete or pruned) with its curve [(step, score), ...].

        The curve is replayed through the view so that rung-based pruners (halving, hyperband) keep
        the marks they would have left had the trial run in this process.
        """
        if number in self._seen or state not in _STATES or (state == "complete" and value is None):
            return
        if self._trial is not None:
            raise RuntimeError("add finished trials before start() or after discard()")
        trial = self._study.ask()
        for epoch, score in curve:
            if score is None:
                continue
            trial.report(float(score), int(epoch))
            if self._replay_rungs:
                trial.should_prune()
        if state == "complete":
            self._study.tell(trial, float(value))
        else:
            self._study.tell(trial, state=TrialState.PRUNED)
        self._seen.add(number)

    def refresh(self, tracker, study: str) -> int:
        """Add the recorded trials this view has not seen yet; returns how many were added."""
        finished = [t for t in tracker.load_trials(study, states=tuple(_STATES)) if t.number not in self._seen]
        if not finished:
            return 0
        curves = tracker.load_curves(study, [t.number for t in finished])
        for t in finished:
            curve = [(self.step(fold, epoch), score) for fold, epoch, score in curves.get(t.number, ())]
            self.add_finished(t.number, t.state, t.objective, curve)
        return len(finished)

    def step(self, fold: int, epoch: int) -> int:
        """The pruner's step of an epoch of a fold."""
        return int(fold) * self.epochs_per_fold + int(epoch)

    def start(self) -> None:
        """Begin the running trial's curve."""
        if self._trial is not None:
            self.discard()
        self._trial = self._study.ask()
        self._curve = {}
        self._decider = None
        if self._rule is not None:
            completed = self._study.get_trials(deepcopy=False, states=(TrialState.COMPLETE,))
            self._decider = _PercentileDecider(self._rule, [t.intermediate_values for t in completed])

    def should_prune(self, epoch: int, score: float) -> bool:
        """Report one epoch's score of the running trial and ask the pruner.

        With a `PercentileRule` the curve stays in this view until the trial ends (constant time per
        epoch); otherwise each score goes through optuna's trial object and its pruner decides.
        """
        if self._decider is not None or self._never:
            self._curve[int(epoch)] = float(score)
            return False if self._never else self._decider.decide(int(epoch), float(score))
        self._trial.report(float(score), int(epoch))
        return self._trial.should_prune()

    def finish(self, number: int, state: str, value: float | None = None) -> None:
        """End the running trial as it ended for real, so it counts in this view from now on.

        Args:
            number: the trial's number in the durable study (refresh will not add it again).
            state: "complete", "pruned" or "failed" (failed trials never vote, but marks a rung
                pruner left on them stay, as they do in a durable optuna storage).
            value: the objective of a complete trial.
        """
        trial, self._trial = self._trial, None
        if trial is None:
            return
        for epoch, score in sorted(self._curve.items()):  # a curve kept in this view alone
            trial.report(score, epoch)
        self._curve = {}
        if state == "complete" and value is not None:
            self._study.tell(trial, float(value))
        elif state == "pruned":
            self._study.tell(trial, state=TrialState.PRUNED)
        else:
            self._study.tell(trial, state=TrialState.FAIL)
        self._seen.add(int(number))

    def discard(self) -> None:
        """End the running trial's curve without keeping it."""
        if self._trial is not None:
            self._study.tell(self._trial, state=TrialState.FAIL)
            self._trial = None


class _PercentileDecider:
    """optuna's percentile (and median) pruning rule for one running trial, in constant time per epoch.

    `PercentilePruner.prune` gathers the completed trials, rescans the running trial's steps and takes
    a percentile over the trials at every call: a cost that grows with epochs and trials. The finished
    trials of a view do not change while a trial runs, so the percentile at each step is computed once
    and the running trial's best value and previous step are carried along. The decisions are the same
    as the pruner's (`tests/sweep/search/test_pruning.py` checks them against optuna's own, epoch by
    epoch); steps must arrive in increasing order, as a training loop reports them.
    """

    def __init__(self, rule: PercentileRule, completed_curves: list[dict]):
        self.percentile = float(rule.percentile)
        self.n_startup = int(rule.n_startup_trials)
        self.n_warmup = int(rule.n_warmup_steps)
        self.interval = int(rule.interval_steps)
        self.n_min = int(rule.n_min_trials)
        self.curves = completed_curves
        self.cache: dict[int, float] = {}
        self.best = math.inf
        self.previous = -1

    def _threshold(self, step: int) -> float:
        if step not in self.cache:
            values = [c[step] for c in self.curves if step in c]
            self.cache[step] = (math.nan if len(values) < self.n_min
                                else float(np.nanpercentile(np.array(values, dtype=float), self.percentile)))
        return self.cache[step]

    def decide(self, step: int, value: float) -> bool:
        previous, self.previous = self.previous, step
        self.best = min(self.best, value)
        n = len(self.curves)
        if n == 0 or n < self.n_startup or step < self.n_warmup:
            return False
        nearest_lower = (step - self.n_warmup) // self.interval * self.interval + self.n_warmup
        if previous >= nearest_lower:  # not the first report in this interval
            return False
        p = self._threshold(step)
        return False if math.isnan(p) else self.best > p
