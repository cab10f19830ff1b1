"""The pruning view decides as optuna's own pruner does on a study that holds the same curves."""

from __future__ import annotations

import numpy as np
import optuna
import pytest

from sweep.search import PercentileRule, PruningView

optuna.logging.set_verbosity(optuna.logging.WARNING)

PRUNERS = {
    "median": lambda: optuna.pruners.MedianPruner(n_startup_trials=3, n_warmup_steps=2),
    "percentile": lambda: optuna.pruners.PercentilePruner(25.0, n_startup_trials=2),
    "median-interval": lambda: optuna.pruners.MedianPruner(n_startup_trials=2, n_warmup_steps=3,
                                                           interval_steps=4, n_min_trials=3),
    "halving": lambda: optuna.pruners.SuccessiveHalvingPruner(min_resource=2, reduction_factor=3),
}
# the same percentile rules, applied by the view itself in constant time per epoch
RULES = {
    "median": PercentileRule(50.0, n_startup_trials=3, n_warmup_steps=2),
    "percentile": PercentileRule(25.0, n_startup_trials=2),
    "median-interval": PercentileRule(50.0, n_startup_trials=2, n_warmup_steps=3, interval_steps=4, n_min_trials=3),
}
VIEWS = {**{name: (lambda make=make: PruningView(make())) for name, make in PRUNERS.items()},
         **{f"{name}-rule": (lambda rule=rule: PruningView(rule=rule)) for name, rule in RULES.items()}}


def _curves(n_trials=20, n_epochs=30, seed=0):
    rng = np.random.default_rng(seed)
    # falling validation curves with a level per trial and noise: some trials are clearly worse
    return [rng.normal(1.0, 0.5) + 1.0 / np.arange(1, n_epochs + 1) + rng.normal(0, 0.02, n_epochs)
            for _ in range(n_trials)]


@pytest.mark.parametrize("name", sorted(VIEWS))
def test_pruning_view_decides_like_optuna(name):
    # reference: optuna's pruner on a plain in-memory study that receives every report (optuna's
    # documented report/should_prune loop). Odd trials run in "this worker" (both decide, and the
    # decisions must agree); even trials run "elsewhere" and reach the view from the record.
    reference = optuna.create_study(pruner=PRUNERS[name.removesuffix("-rule")]())
    view = VIEWS[name]()
    ours, theirs = [], []
    for number, curve in enumerate(_curves()):
        here = number % 2 == 1
        if here:
            view.start()
        trial = reference.ask()
        stopped_at = None
        for epoch, score in enumerate(curve, start=1):
            if here:
                ours.append(view.should_prune(epoch, score))
            trial.report(score, epoch)
            pruned = trial.should_prune()
            if here:
                theirs.append(pruned)
            if pruned:
                stopped_at = epoch
                break
        run = curve[:stopped_at] if stopped_at else curve
        state, value = ("pruned", None) if stopped_at else ("complete", float(min(run)))
        if stopped_at:
            reference.tell(trial, state=optuna.trial.TrialState.PRUNED)
        else:
            reference.tell(trial, value)
        if here:
            view.finish(number, state, value)
        else:
            view.add_finished(number, state, value, [(e, float(v)) for e, v in enumerate(run, start=1)])
    assert ours == theirs
    # the comparison means something only if the pruner pruned some of this worker's trials, not all
    assert 0 < sum(theirs) < len(_curves()) // 2


def test_pruning_view_ignores_trials_it_has_seen_and_unfinished_ones():
    view = PruningView(optuna.pruners.MedianPruner(n_startup_trials=0))
    view.add_finished(0, "complete", 0.5, [(1, 0.9), (2, 0.5)])
    view.add_finished(0, "complete", 0.5, [(1, 0.9), (2, 0.5)])  # the same trial again
    view.add_finished(1, "failed", None, [(1, 0.1)])  # failed trials do not vote
    view.add_finished(2, "complete", None, [(1, 0.1)])  # no objective: nothing to compare with
    assert view.n_trials == 1
    view.start()
    # worse than the one completed trial at epoch 1 -> pruned (median of one trial is that trial)
    assert view.should_prune(1, 2.0)


def test_percentile_rule_gives_optuna_pruner_with_the_same_settings():
    # reference: optuna's MedianPruner is its PercentilePruner at the 50th percentile (optuna's documentation)
    pruner = PercentileRule(50.0, n_startup_trials=3, n_warmup_steps=2).pruner()
    assert isinstance(pruner, optuna.pruners.PercentilePruner)
    with pytest.raises(ValueError, match="PercentileRule"):
        PruningView()
