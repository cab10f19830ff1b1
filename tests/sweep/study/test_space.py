"""The search space against a real optuna: suggest calls and the grid sampler.

The configs of a trial (`params_to_configs`, now in sweep/search/objective.py) are tested in
tests/sweep/search/test_objective.py.
"""

from __future__ import annotations

import itertools
import math
from pathlib import Path

import optuna
import pytest
from optuna.distributions import CategoricalDistribution, FloatDistribution, IntDistribution

from sweep.study.space import (
    SETTINGS,
    Choice,
    Fixed,
    FloatRange,
    FrozenMap,
    IntRange,
    format_value,
    grid_values,
    parse_space,
    suggest_params,
)
from sweep.study import SpecError, load_spec

DEMO = Path(__file__).resolve().parents[3] / "studies" / "demo.toml"

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


@pytest.fixture(autouse=True)
def _quiet_optuna():
    optuna.logging.set_verbosity(optuna.logging.WARNING)


def test_suggest_params_passes_fixed_values_and_keeps_ranges_in_bounds():
    study = optuna.create_study(sampler=optuna.samplers.RandomSampler(seed=0))  # in-memory storage
    for _ in range(40):
        trial = study.ask()
        params = suggest_params(trial, SPACE)
        # every setting is returned, in the order of the space, fixed ones unchanged
        assert list(params) == list(SPACE)
        assert (params["patience"], params["weight_decay"], params["activation"]) == (10, 0.0, "tanh")
        # fixed values are not suggested: optuna only knows the searched ones
        assert set(trial.params) == {"batch_size", "hidden_units", "layers", "dropout", "learning_rate"}
        assert params["batch_size"] in (32, 64, 128)
        assert isinstance(params["hidden_units"], int) and 4 <= params["hidden_units"] <= 24
        assert isinstance(params["layers"], int) and 0 <= params["layers"] <= 2
        assert 1e-4 <= params["learning_rate"] <= 1e-2
        # a stepped range stays on its grid 0.0, 0.1, 0.2, 0.3
        assert min(abs(params["dropout"] - k / 10) for k in range(4)) < 1e-12
        study.tell(trial, 0.0)


def test_suggest_params_builds_optuna_distributions_of_the_same_shape():
    trial = optuna.create_study().ask()
    suggest_params(trial, SPACE)
    # optuna's own distribution objects, built here by hand from the space's numbers
    assert trial.distributions == {
        "batch_size": CategoricalDistribution((32, 64, 128)),
        "hidden_units": IntDistribution(4, 24, log=True),
        "layers": IntDistribution(0, 2),
        "dropout": FloatDistribution(0.0, 0.3, step=0.1),
        "learning_rate": FloatDistribution(1e-4, 1e-2, log=True),
    }


def test_suggest_params_on_the_demo_space_with_tpe():
    space = load_spec(DEMO).space
    study = optuna.create_study(sampler=optuna.samplers.TPESampler(seed=7, n_startup_trials=3))

    def objective(trial):
        params = suggest_params(trial, space)
        return math.log(params["learning_rate"]) ** 2 + params["dropout"]

    study.optimize(objective, n_trials=8)
    assert len(study.trials) == 8
    for trial in study.trials:
        assert trial.state == optuna.trial.TrialState.COMPLETE
        assert 4 <= trial.params["hidden_units"] <= 32 and 0.0 <= trial.params["dropout"] <= 0.3
        assert "activation" not in trial.params


def test_grid_values_runs_the_full_grid_with_optuna():
    space = FrozenMap({"batch_size": Choice((32, 64)), "layers": Choice((0, 1, 2)),
                       "activation": Choice(("relu", "tanh")), "dropout": Fixed(0.1)})
    grid = grid_values(space)
    assert grid == {"batch_size": [32, 64], "layers": [0, 1, 2], "activation": ["relu", "tanh"]}
    study = optuna.create_study(sampler=optuna.samplers.GridSampler(grid, seed=0))
    seen = []

    def objective(trial):
        params = suggest_params(trial, space)
        assert params["dropout"] == 0.1
        seen.append((params["batch_size"], params["layers"], params["activation"]))
        return float(params["layers"])

    # the grid sampler stops the study once every point has run, before 100 trials
    study.optimize(objective, n_trials=100)
    assert sorted(seen) == sorted(itertools.product([32, 64], [0, 1, 2], ["relu", "tanh"]))
    assert len(seen) == 12


def test_grid_values_refuses_a_range_and_names_the_setting():
    space = FrozenMap({"batch_size": Choice((32, 64)), "learning_rate": FloatRange(1e-4, 1e-2, log=True),
                       "hidden_units": IntRange(4, 8)})
    with pytest.raises(SpecError) as info:
        grid_values(space)
    assert [p.split(":")[0] for p in info.value.problems] == ["space.learning_rate", "space.hidden_units"]
    assert 'sampler "grid" needs a list of values, got the range {low=0.0001, high=0.01, log=true}' in str(info.value)


def test_parse_space_fills_defaults_and_collects_problems():
    problems: list[str] = []
    space = parse_space({"layers": 0, "dropout": 1.5, "hiden_units": 3}, problems)
    assert list(space) == list(SETTINGS)
    assert space["layers"] == Fixed(0)
    assert space["hidden_units"] == Fixed(SETTINGS["hidden_units"].default)
    assert problems == [
        "unknown key space.hiden_units; did you mean space.hidden_units?",
        "space.dropout: must be a number >= 0.0 and < 1.0, got 1.5",
    ]


@pytest.mark.parametrize(
    "value, text",
    [
        ("relu", '"relu"'),
        (True, "true"),
        (0.3, "0.3"),
        (64, "64"),
        ([32, 64], "[32, 64]"),
        ({"low": 0.0, "high": 0.3}, "{low=0.0, high=0.3}"),
    ],
)
def test_format_value_writes_study_file_forms(value, text):
    assert format_value(value) == text


def test_frozen_map_is_a_hashable_read_only_mapping():
    a, b = FrozenMap({"x": 1, "y": 2}), FrozenMap({"x": 1, "y": 2})
    assert a == b and hash(a) == hash(b) and a == {"x": 1, "y": 2}
    assert list(a) == ["x", "y"] and a["y"] == 2 and len(a) == 2
    with pytest.raises(TypeError):
        a["x"] = 3
    with pytest.raises(KeyError):
        a["z"]
