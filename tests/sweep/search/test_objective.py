"""Tests of sweep/search/objective.py: params -> configs, a trial's seed, and one trial run against a real
in-memory optuna study and an in-memory record (`Tracker.memory()`).

Outside references: optuna's own view of each trial (state, value, params, intermediate values, user
attributes, queued trials) must equal what the record says; the scores recomputed from the stored
forecasts with the published QLIKE (Patton 2011, via sweep.study.score_forecasts) must equal the
recorded objective; the stored weights must rebuild the network that made the stored forecasts.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import optuna
import pytest
from optuna.trial import TrialState

from sweep.record import DatasetRecord, StudyRecord, Tracker, collect_provenance
from sweep.search import (
    PruningView, make_pruner, params_to_configs, percentile_rule, run_trial, train_params, trial_seed,
)
from sweep.study import (
    Choice, Fixed, FloatRange, FrozenMap, IntRange, TrainingSection, load_spec, load_study_prices, prepare_folds,
    score_forecasts, set_keys, suggest_params, valid_truth,
)
from sweep.study.demo import demo_study_text
from trainers.data import frame_to_csv_text
from trainers.fit import TrainConfig, fit_mlp
from trainers.mlp import MLPConfig, Network
from trainers.scenario import write_market_csv

# a small search space in the forms of a study file (used by the moved params_to_configs tests)
SPACE = FrozenMap({
    "batch_size": Choice((32, 64, 128)),
    "hidden_units": IntRange(4, 24, log=True),
    "layers": IntRange(0, 2),
    "dropout": FloatRange(0.0, 0.3, step=0.1),
    "patience": Fixed(10),
    "learning_rate": FloatRange(1e-4, 1e-2, log=True),
    "weight_decay": Fixed(0.0),
    "activation": Fixed("tanh"),
})

# a tiny study: four hidden units, at most eight epochs, two searched settings given as lists
TINY = dict(max_epochs="8", startup_trials="2", warmup_epochs="2", batch_size="64", hidden_units="4", layers="1",
            patience="[4, 5]", learning_rate="[1e-5, 1e-3, 1e-2, 1e3]", dropout="0.0", weight_decay="0.0",
            include='["random_walk"]')
STEADY = [{"learning_rate": 1e-2, "patience": 4}, {"learning_rate": 1e-2, "patience": 5}]  # train to the end
SLOW = {"learning_rate": 1e-5, "patience": 4}     # hardly moves from its start: the median rule stops it
WILD = {"learning_rate": 1e3, "patience": 4}      # diverges at once: no finite validation score
STATES = {TrialState.COMPLETE: "complete", TrialState.PRUNED: "pruned", TrialState.FAIL: "failed"}


@pytest.fixture(autouse=True)
def _quiet_optuna():
    optuna.logging.set_verbosity(optuna.logging.WARNING)


@pytest.fixture(scope="module")
def market(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("market")
    write_market_csv(folder / "data", seed=3, n_days=900, instruments=("harbor_index",))
    return folder


def tiny_study(folder: Path, name: str, **keys):
    """The spec, its folds, and an in-memory record holding the study (as `volsweep run` would save it)."""
    path = folder / f"{name}.toml"
    path.write_text(set_keys(demo_study_text(), name=f'"{name}"', **{**TINY, **keys}), encoding="utf-8")
    spec = load_spec(path)
    prices = load_study_prices(spec)
    frame = prices.frame
    tracker = Tracker.memory()
    tracker.save_study(
        StudyRecord(name=name, spec_text=spec.text, spec_hash=spec.spec_hash(), search_hash=spec.search_hash(),
                    dataset_sha256=prices.sha256, objective=spec.study.objective, **collect_provenance()),
        DatasetRecord(sha256=prices.sha256, source=str(prices.source), n_rows=len(frame),
                      first_date=frame.index[0].date().isoformat(), last_date=frame.index[-1].date().isoformat(),
                      columns=list(frame.columns), csv_text=frame_to_csv_text(frame)),
    )
    return spec, prepare_folds(spec, frame), tracker


def new_view(spec) -> PruningView:
    return PruningView(make_pruner(spec), rule=percentile_rule(spec), epochs_per_fold=spec.training.max_epochs)


@pytest.fixture(scope="module")
def four_trials(market):
    """Two steady trials, a slow one (pruned) and a wild one (fails), queued in that order."""
    spec, folds, tracker = tiny_study(market, "tiny")
    study = optuna.create_study(direction="minimize", sampler=optuna.samplers.RandomSampler(seed=0))
    view = new_view(spec)
    outcomes = []
    for params in (*STEADY, SLOW, WILD):
        study.enqueue_trial(params)
        outcomes.append(run_trial(study, spec, folds, tracker, view))
    return spec, folds, tracker, study, outcomes


# ---------------------------------------------------------------- params -> configs (moved from test_space.py)


def test_params_to_configs_builds_the_network_and_training_configs():
    training = TrainingSection(max_epochs=7, min_delta=1e-4, optimizer="sgd", momentum=0.5)
    params = {"batch_size": 16, "hidden_units": 12, "layers": 2, "dropout": 0.1, "patience": 3,
              "learning_rate": 0.01, "weight_decay": 1e-5, "activation": "tanh"}
    mlp, train = params_to_configs(params, n_inputs=3, n_outputs=2, task="regression", training=training)
    assert mlp == MLPConfig(n_inputs=3, n_outputs=2, hidden=(12, 12), activation="tanh", task="regression",
                            dropout=0.1)
    assert train == TrainConfig(batch_size=16, max_epochs=7, patience=3, min_delta=1e-4, optimizer="sgd",
                                learning_rate=0.01, momentum=0.5, weight_decay=1e-5)
    # zero layers is the linear model
    linear, _ = params_to_configs({**params, "layers": 0}, n_inputs=3, n_outputs=2, task="regression",
                                  training=training)
    assert linear.hidden == ()


def test_params_to_configs_trains_with_the_trainers():
    # the configs are accepted by the training loop end to end (two epochs on random data)
    rng = np.random.default_rng(0)
    X, y = rng.normal(size=(40, 3)), rng.normal(size=(40, 1))
    trial = optuna.create_study(sampler=optuna.samplers.RandomSampler(seed=1)).ask()
    params = suggest_params(trial, SPACE)
    mlp, train = params_to_configs(params, n_inputs=3, n_outputs=1, task="regression",
                                   training=TrainingSection(max_epochs=2))
    result = fit_mlp(mlp, train, X[:30], y[:30], X[30:], y[30:], rng=rng)
    assert len(result.history) == 2 and result.best_epoch in (1, 2)


def test_params_to_configs_names_missing_settings():
    with pytest.raises(ValueError, match=r"params lack dropout, activation"):
        params_to_configs({"batch_size": 8, "hidden_units": 4, "layers": 1, "patience": 2, "learning_rate": 0.1,
                           "weight_decay": 0.0}, n_inputs=1, n_outputs=1, task="regression",
                          training=TrainingSection())


# ---------------------------------------------------------------- seeds


def test_trial_seed_is_the_study_seed_and_the_trial_number():
    assert trial_seed(7, 3) == [7, 3]
    seed = trial_seed(np.int64(7), np.int64(3))
    # plain ints, so the record stores them as JSON numbers
    assert seed == [7, 3] and all(type(s) is int for s in seed)
    # numpy's SeedSequence gives different streams to different trials of a study
    draws = {tuple(np.random.default_rng(trial_seed(7, n)).integers(0, 2**32, 4)) for n in range(10)}
    assert len(draws) == 10


def test_train_params_replays_a_recorded_trial_bit_for_bit(four_trials):
    spec, folds, tracker, _, _ = four_trials
    recorded = tracker.load_trial("tiny", 0)
    # the recorded settings and seed give the same learning curve again
    run = train_params(spec, folds[0], recorded.params, recorded.seed)
    curve = [(e.train_loss, e.valid_loss, e.valid_score) for e in run]
    assert curve == [(e.train_loss, e.valid_loss, e.valid_score) for e in recorded.epochs]


# ---------------------------------------------------------------- one trial: record and optuna agree


def test_run_trial_record_equals_what_optuna_was_told(four_trials):
    spec, _, tracker, study, outcomes = four_trials
    recorded = {t.number: t for t in tracker.load_trials("tiny")}
    frozen = study.get_trials()
    assert [t.number for t in frozen] == sorted(recorded) == [0, 1, 2, 3]
    for t in frozen:
        r = recorded[t.number]
        assert STATES[t.state] == r.state
        # optuna holds the searched settings; the record adds the fixed ones
        assert set(t.params) == {"patience", "learning_rate"}
        assert t.params == {k: r.params[k] for k in t.params}
        assert set(r.params) == set(spec.space)
        assert r.seed == trial_seed(spec.study.seed, t.number)
        if r.state in ("complete", "pruned"):
            assert t.value == r.objective
    assert [o.state for o in outcomes] == ["complete", "complete", "pruned", "failed"]
    assert [(o.number, o.objective) for o in outcomes] == [(n, recorded[n].objective) for n in range(4)]


def test_run_trial_complete_keeps_forecasts_that_score_the_objective(four_trials):
    spec, (inputs,), tracker, _, _ = four_trials
    for number in (0, 1):
        r = tracker.load_trial("tiny", number)
        assert (r.state, r.stop_reason in ("patience", "max_epochs")) == ("complete", True)
        assert r.n_epochs == len(r.epochs) and 1 <= r.best_epoch <= r.n_epochs
        best = r.epochs[r.best_epoch - 1]
        assert r.objective == best.valid_score
        assert (r.train_loss, r.valid_loss) == (best.train_loss, best.valid_loss)
        assert r.gap == pytest.approx(best.valid_loss - best.train_loss, rel=1e-12)
        # the stored validation forecasts, scored with QLIKE (Patton 2011), give the recorded objective
        assert r.valid_forecasts.shape == inputs.truth["valid"].shape
        assert score_forecasts("qlike", inputs.truth["valid"], r.valid_forecasts) == pytest.approx(r.objective,
                                                                                                   rel=1e-12)
        # and the stored weights rebuild the network that made them
        network = Network.from_arrays(r.weights)
        np.testing.assert_array_equal(inputs.forecasts(network.predict(inputs.X["valid"])), r.valid_forecasts)


def test_run_trial_pruned_reports_its_objective_once_to_optuna(four_trials):
    spec, _, tracker, study, _ = four_trials
    r = tracker.load_trial("tiny", 2)
    t = study.trials[2]
    assert (r.state, r.stop_reason, t.state) == ("pruned", "pruned", TrialState.PRUNED)
    # stopped after the warm-up epochs and before the end, its partial curve kept
    assert spec.search.warmup_epochs <= r.n_epochs < spec.training.max_epochs
    assert len(r.epochs) == r.n_epochs
    # optuna gets one intermediate value, the recorded objective, at the epoch it stopped; optuna takes
    # a pruned trial's value from its last intermediate value
    assert t.intermediate_values == {r.n_epochs: r.objective}
    assert t.value == r.objective
    assert r.weights is None


def test_run_trial_that_diverges_is_recorded_as_failed_with_the_reason(four_trials):
    _, _, tracker, study, outcomes = four_trials
    r = tracker.load_trial("tiny", 3)
    t = study.trials[3]
    # the record keeps the curve up to the divergence and why training stopped
    assert (r.state, r.stop_reason, t.state) == ("failed", "diverged", TrialState.FAIL)
    assert r.error.startswith("diverged: non-finite loss, score or weights at epoch") and r.epochs
    assert "lower space.learning_rate" in r.error and "Traceback" not in r.error
    # optuna keeps no failure reason of its own (library notes), so the trial carries it as a user attribute
    assert t.user_attrs["error"] == r.error
    assert outcomes[3].error == r.error
    assert r.objective is None and r.valid_forecasts is None and r.weights is None


class _StopNow:
    def is_set(self) -> bool:
        return True


def test_run_trial_stopped_records_an_interrupted_trial_and_queues_its_settings(market):
    spec, folds, tracker = tiny_study(market, "stopped")
    study = optuna.create_study(direction="minimize", sampler=optuna.samplers.RandomSampler(seed=0))
    view = new_view(spec)
    study.enqueue_trial(STEADY[0])
    outcome = run_trial(study, spec, folds, tracker, view, stop=_StopNow())
    assert outcome.state == "interrupted"
    r = tracker.load_trial("stopped", 0)
    # left after its first epoch, recorded as failed with the reason, failed in optuna too
    assert (r.state, r.n_epochs) == ("failed", 1)
    assert r.error.startswith("interrupted: the run was stopped before this trial finished")
    assert study.trials[0].state == TrialState.FAIL and study.trials[0].user_attrs["interrupted"] is True
    # its settings wait in optuna's queue and are the next trial's
    (waiting,) = study.get_trials(states=(TrialState.WAITING,))
    assert waiting.number == 1
    following = run_trial(study, spec, folds, tracker, view)
    assert following.state == "complete"
    assert study.trials[1].params == study.trials[0].params == STEADY[0]


def test_run_trial_walk_forward_trains_every_fold_and_tells_optuna_their_mean(market):
    spec, folds, tracker = tiny_study(market, "folds", folds="2", pruner='"none"')
    study = optuna.create_study(direction="minimize", sampler=optuna.samplers.RandomSampler(seed=0))
    study.enqueue_trial(STEADY[0])
    outcome = run_trial(study, spec, folds, tracker, new_view(spec))
    r = tracker.load_trial("folds", 0)
    assert outcome.state == r.state == "complete"
    assert sorted({e.fold for e in r.epochs}) == [0, 1]
    # the objective is the mean of the folds' scores at their best epochs (each fold stops on its own)
    best = [min(e.valid_score for e in r.epochs if e.fold == k) for k in (0, 1)]
    assert r.objective == pytest.approx(np.mean(best), rel=1e-12)
    assert study.trials[0].value == r.objective
    # forecasts of every fold's validation block, oldest first, scored fold by fold give the objective
    assert r.valid_forecasts.shape == valid_truth(folds).shape
    n0 = len(folds[0].windows.valid)
    scores = [score_forecasts("qlike", folds[0].truth["valid"], r.valid_forecasts[:n0]),
              score_forecasts("qlike", folds[1].truth["valid"], r.valid_forecasts[n0:])]
    assert np.mean(scores) == pytest.approx(r.objective, rel=1e-12)
