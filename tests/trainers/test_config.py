"""Tests of trainers/config.py: `MLPConfig` checked when built, and the value checks `is_int`, `is_real`.

Outside references: Python's numeric tower (`numbers.Integral`, `numbers.Real`, with numpy's scalar types
registered in it, and bool excluded as the checks promise); He et al. (2015) and Glorot and Bengio (2010)
for the initialisation a relu or tanh/sigmoid network gets by default.
"""

import dataclasses
import numbers

import numpy as np
import pytest

from trainers.config import MLPConfig, fail, is_int, is_real

# ---------------------------------------------------------------- is_int, is_real

NUMBERS = [0, -3, 2**70, np.int8(1), np.int64(-5), np.uint32(7), 0.5, float("nan"), float("inf"), np.float16(1.5),
           np.float32(0.25), np.float64(2.0), np.longdouble(1.0)]
NOT_NUMBERS = [True, False, np.bool_(True), "1", b"1", None, 1j, np.complex128(1.0), [1], np.array([1]),
               np.array(1.0)]


@pytest.mark.parametrize("value", NUMBERS + NOT_NUMBERS, ids=repr)
def test_is_int_and_is_real_follow_the_numeric_tower_without_bool(value):
    # numpy registers its integer and floating scalars as numbers.Integral and numbers.Real
    integral = isinstance(value, numbers.Integral) and not isinstance(value, (bool, np.bool_))
    real = isinstance(value, numbers.Real) and not isinstance(value, (bool, np.bool_))
    assert is_int(value) == integral
    assert is_real(value) == real


def test_is_int_and_is_real_on_the_table_by_hand():
    assert [is_int(v) for v in (3, np.int64(3), 3.0, True, "3")] == [True, True, False, False, False]
    assert [is_real(v) for v in (3, np.int64(3), 3.0, np.float32(3), True, np.bool_(False), "3.0", None)] == \
           [True, True, True, True, False, False, False, False]


def test_fail_names_the_setting_the_rule_the_value_and_the_fix():
    with pytest.raises(ValueError) as info:
        fail("dropout", "a number with 0 <= dropout < 1", 1.5, "set space.dropout to a rate such as 0.1")
    assert str(info.value) == ("dropout must be a number with 0 <= dropout < 1, got dropout=1.5; "
                               "set space.dropout to a rate such as 0.1")


# ---------------------------------------------------------------- MLPConfig (checks moved from test_mlp.py)


@pytest.mark.parametrize("kwargs,match", [
    ({"n_inputs": 0}, r"n_inputs must be an integer >= 1, got n_inputs=0"),
    ({"n_outputs": 1, "task": "classification"}, r"n_outputs must be an integer >= 2"),
    ({"hidden": (8, 0)}, r"hidden must be a sequence of integers >= 1, got hidden=\(8, 0\); set space.hidden"),
    ({"hidden": "64"}, r"hidden must be a sequence"),
    ({"activation": "gelu"}, r"activation must be one of .*got activation='gelu'; set space.activation"),
    ({"task": "ranking"}, r"task must be one of"),
    ({"init": "lecun"}, r"init must be one of"),
    ({"dropout": 1.0}, r"dropout must be a number with 0 <= dropout < 1, got dropout=1.0; set space.dropout"),
    ({"dropout": -0.1}, r"dropout=-0.1"),
    ({"dtype": "float16"}, r"dtype must be one of"),
])
def test_mlp_config_rejects_bad_values(kwargs, match):
    base = {"n_inputs": 3, "n_outputs": 2}
    with pytest.raises(ValueError, match=match):
        MLPConfig(**{**base, **kwargs})


def test_mlp_config_accepts_list_hidden_and_empty():
    assert MLPConfig(3, 1, [8, 4]).hidden == (8, 4)
    assert MLPConfig(3, 1, []).hidden == ()


# ---------------------------------------------------------------- MLPConfig: more checks


@pytest.mark.parametrize("kwargs,match", [
    ({"n_inputs": True}, r"n_inputs must be an integer >= 1, got n_inputs=True"),
    ({"n_inputs": 3.0}, r"n_inputs must be an integer >= 1, got n_inputs=3.0; pass the number of feature columns"),
    ({"n_outputs": 0}, r"n_outputs must be an integer >= 1 for task='regression', got n_outputs=0"),
    ({"hidden": (8, 2.0)}, r"hidden must be a sequence of integers >= 1"),
    ({"hidden": 8.0}, r"hidden must be a sequence of layer widths, got hidden=8.0"),
    ({"hidden": (True,)}, r"hidden must be a sequence of integers >= 1"),
    ({"dropout": True}, r"dropout must be a number with 0 <= dropout < 1, got dropout=True"),
    ({"dropout": "0.1"}, r"dropout must be a number"),
    ({"dropout": float("nan")}, r"dropout=nan"),
])
def test_mlp_config_rejects_bools_and_wrong_types(kwargs, match):
    with pytest.raises(ValueError, match=match):
        MLPConfig(**{"n_inputs": 3, "n_outputs": 2, **kwargs})


def test_mlp_config_turns_numpy_numbers_into_python_ones():
    cfg = MLPConfig(np.int64(3), np.int32(2), hidden=np.array([8, 4]), dropout=np.float32(0.25))
    assert (cfg.n_inputs, cfg.n_outputs, cfg.hidden, cfg.dropout) == (3, 2, (8, 4), 0.25)
    assert type(cfg.n_inputs) is int and type(cfg.n_outputs) is int
    assert all(type(h) is int for h in cfg.hidden) and type(cfg.dropout) is float
    # one width given as an integer is one hidden layer; an integer dropout of 0 is a float
    assert MLPConfig(3, 1, hidden=16).hidden == (16,)
    assert MLPConfig(3, 1, dropout=0).dropout == 0.0 and type(MLPConfig(3, 1, dropout=0).dropout) is float


def test_mlp_config_is_frozen_and_compares_by_value():
    cfg = MLPConfig(3, 2, [8])
    assert cfg == MLPConfig(3, 2, (8,)) and hash(cfg) == hash(MLPConfig(3, 2, (8,)))
    with pytest.raises(dataclasses.FrozenInstanceError):
        cfg.dropout = 0.5


def test_mlp_config_widths_run_from_inputs_to_outputs():
    assert MLPConfig(5, 3, (16, 8)).widths == (5, 16, 8, 3)
    assert MLPConfig(5, 1, ()).widths == (5, 1)  # a linear model


@pytest.mark.parametrize("activation, scheme", [("relu", "he"), ("tanh", "glorot"), ("sigmoid", "glorot")])
def test_mlp_config_auto_init_follows_the_activation(activation, scheme):
    # He et al. (2015) derived their scale for rectifiers; Glorot and Bengio (2010) for symmetric saturating units
    assert MLPConfig(3, 1, activation=activation).init_scheme == scheme
    # an explicit choice wins
    assert MLPConfig(3, 1, activation=activation, init="glorot").init_scheme == "glorot"
    assert MLPConfig(3, 1, activation=activation, init="he").init_scheme == "he"

