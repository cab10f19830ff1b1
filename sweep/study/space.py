"""The search space of a study: its settings, their forms, and the optuna calls that sample them.

Each searchable setting takes one of three forms in the study file:

* a scalar (`activation = "relu"`): fixed, never suggested, always in the parameters;
* a list (`batch_size = [32, 64, 128]`): one value is chosen (`trial.suggest_categorical`);
* a table (`learning_rate = { low = 1e-4, high = 1e-2, log = true }`): a range
  (`trial.suggest_int` or `trial.suggest_float`, with the same `low`, `high`, `log`, `step`).

This module never imports optuna: `suggest_params` receives the trial object.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from typing import Any

from sweep.errors import SpecError
from trainers.mlp import ACTIVATIONS

__all__ = [
    "ACTIVATIONS",
    "SETTINGS",
    "Choice",
    "Fixed",
    "FloatRange",
    "FrozenMap",
    "IntRange",
    "Setting",
    "SettingRule",
    "check_value",
    "did_you_mean",
    "format_value",
    "grid_problems",
    "grid_values",
    "parse_space",
    "suggest_params",
]

RANGE_KEYS = ("low", "high", "log", "step")


@dataclass(frozen=True)
class SettingRule:
    """What one searchable setting accepts.

    Attributes:
        kind: "int", "float" or "text".
        default: the fixed value used when the study file leaves the setting out.
        low, high: bounds (None = unbounded); `low_open`/`high_open` make them strict.
        choices: the allowed values of a text setting.
    """

    kind: str
    default: Any
    low: float | None = None
    high: float | None = None
    low_open: bool = False
    high_open: bool = False
    choices: tuple[str, ...] = ()

    def describe(self) -> str:
        if self.kind == "text":
            return "one of " + ", ".join(format_value(c) for c in self.choices)
        noun, cast = ("a whole number", int) if self.kind == "int" else ("a number", float)
        bounds = []
        if self.low is not None:
            bounds.append(f"{'>' if self.low_open else '>='} {format_value(cast(self.low))}")
        if self.high is not None:
            bounds.append(f"{'<' if self.high_open else '<='} {format_value(cast(self.high))}")
        return noun + (" " + " and ".join(bounds) if bounds else "")


# Defaults follow trainers.mlp.MLPConfig and trainers.fit.TrainConfig.
SETTINGS: dict[str, SettingRule] = {
    "batch_size": SettingRule("int", 64, low=1),
    "hidden_units": SettingRule("int", 32, low=1),
    "layers": SettingRule("int", 1, low=0),  # 0 = linear model
    "dropout": SettingRule("float", 0.0, low=0.0, high=1.0, high_open=True),
    "patience": SettingRule("int", 20, low=1),
    "learning_rate": SettingRule("float", 1e-3, low=0.0, low_open=True),
    "weight_decay": SettingRule("float", 0.0, low=0.0),
    "activation": SettingRule("text", "relu", choices=ACTIVATIONS),
}


@dataclass(frozen=True)
class Fixed:
    """A setting that is not searched."""

    value: Any

    def to_plain(self) -> Any:
        return self.value


@dataclass(frozen=True)
class Choice:
    """A setting chosen from a list of values."""

    values: tuple

    def to_plain(self) -> list:
        return list(self.values)


@dataclass(frozen=True)
class IntRange:
    """A whole-number setting drawn from low..high (inclusive), optionally on a log scale."""

    low: int
    high: int
    log: bool = False
    step: int = 1

    def to_plain(self) -> dict:
        out: dict = {"low": self.low, "high": self.high}
        if self.log:
            out["log"] = True
        if self.step != 1:
            out["step"] = self.step
        return out


@dataclass(frozen=True)
class FloatRange:
    """A real setting drawn from [low, high], optionally on a log scale or a grid of `step`."""

    low: float
    high: float
    log: bool = False
    step: float | None = None

    def to_plain(self) -> dict:
        out: dict = {"low": self.low, "high": self.high}
        if self.log:
            out["log"] = True
        if self.step is not None:
            out["step"] = self.step
        return out


Setting = Fixed | Choice | IntRange | FloatRange


class FrozenMap(Mapping):
    """A read-only, hashable mapping that keeps its insertion order."""

    __slots__ = ("_items",)

    def __init__(self, items: Mapping | None = None):
        self._items = tuple(dict(items or {}).items())

    def __getitem__(self, key):
        for k, v in self._items:
            if k == key:
                return v
        raise KeyError(key)

    def __iter__(self) -> Iterator:
        return (k for k, _ in self._items)

    def __len__(self) -> int:
        return len(self._items)

    def __hash__(self) -> int:
        return hash(self._items)

    def __eq__(self, other) -> bool:
        if isinstance(other, Mapping):
            return dict(self._items) == dict(other.items())
        return NotImplemented

    def __repr__(self) -> str:
        return f"FrozenMap({dict(self._items)!r})"


def format_value(value: Any) -> str:
    """Write a value the way a study file would: `"relu"`, `true`, `[32, 64]`, `{low=0.0, high=0.3}`."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, Mapping):
        return "{" + ", ".join(f"{k}={format_value(v)}" for k, v in value.items()) + "}"
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(format_value(v) for v in value) + "]"
    if value is None:
        return "(not set)"
    return repr(value) if isinstance(value, float) else str(value)


def did_you_mean(word: str, options, prefix: str = "", *, as_value: bool = False) -> str:
    """'; did you mean X?' for the nearest option (difflib), or '' when nothing is close.

    Keys are written as `prefix + key`; values (`as_value=True`) as the study file writes them.
    """
    close = difflib.get_close_matches(str(word), [str(o) for o in options], n=1, cutoff=0.6)
    if not close:
        return ""
    return f"; did you mean {format_value(close[0]) if as_value else prefix + close[0]}?"


def check_value(path: str, value: Any, rule: SettingRule, problems: list[str]) -> Any:
    """The value converted to the setting's type, or None after recording a problem."""
    want = rule.describe()
    if rule.kind == "text":
        if not isinstance(value, str) or value not in rule.choices:
            hint = did_you_mean(value, rule.choices, as_value=True) if isinstance(value, str) else ""
            problems.append(f"{path}: must be {want}, got {format_value(value)}{hint}")
            return None
        return value
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        problems.append(f"{path}: must be {want}, got {format_value(value)}")
        return None
    if rule.kind == "int" and not isinstance(value, int):
        hint = "; write it without a decimal point" if float(value).is_integer() else ""
        problems.append(f"{path}: must be {want}, got {format_value(value)}{hint}")
        return None
    value = int(value) if rule.kind == "int" else float(value)
    if rule.kind == "float" and not math.isfinite(value):
        problems.append(f"{path}: must be {want}, got {format_value(value)}")
        return None
    too_low = rule.low is not None and (value <= rule.low if rule.low_open else value < rule.low)
    too_high = rule.high is not None and (value >= rule.high if rule.high_open else value > rule.high)
    if too_low or too_high:
        problems.append(f"{path}: must be {want}, got {format_value(value)}")
        return None
    return value


def _parse_choice(path: str, raw: list, rule: SettingRule, problems: list[str]) -> Setting | None:
    if not raw:
        example = f"{path.split('.')[-1]} = [{format_value(rule.default)}]"
        problems.append(f"{path}: the list is empty; give at least one value, e.g. {example}")
        return None
    n_before = len(problems)
    values = [check_value(path, v, rule, problems) for v in raw]
    if len(problems) > n_before:
        return None
    if len(set(values)) != len(values):
        problems.append(f"{path}: the list repeats a value, got {format_value(raw)}; list each value once")
        return None
    return Choice(tuple(values))


def _parse_range(path: str, raw: Mapping, rule: SettingRule, problems: list[str]) -> Setting | None:
    name = path.split(".")[-1]
    if rule.kind == "text":
        problems.append(
            f"{path}: a text setting cannot be a range, got {format_value(raw)}; "
            f"give one value or a list, e.g. {name} = {format_value(list(rule.choices[:2]))}"
        )
        return None
    n_before = len(problems)
    for key in raw:
        if key not in RANGE_KEYS:
            problems.append(f"unknown key {path}.{key}{did_you_mean(key, RANGE_KEYS, path + '.')} "
                            f"(a range takes {', '.join(RANGE_KEYS)})")
    if "low" not in raw or "high" not in raw:
        problems.append(f"{path}: a range needs both low and high, got {format_value(raw)}")
        return None
    low = check_value(f"{path}.low", raw["low"], rule, problems)
    high = check_value(f"{path}.high", raw["high"], rule, problems)
    log = raw.get("log", False)
    if not isinstance(log, bool):
        problems.append(f"{path}.log: must be true or false, got {format_value(log)}")
    step = raw.get("step")
    if step is not None:
        step_rule = SettingRule(rule.kind, None, low=0, low_open=True)
        step = check_value(f"{path}.step", step, step_rule, problems)
    if len(problems) > n_before:
        return None
    if low >= high:
        problems.append(
            f"{path}: low must be below high, got low={format_value(low)}, high={format_value(high)}; "
            f"for one value write {name} = {format_value(low)}"
        )
        return None
    if log and low <= 0:
        problems.append(f"{path}: a log range needs low > 0, got low={format_value(low)}; raise low or drop log")
        return None
    if log and step is not None and (rule.kind == "float" or step != 1):  # as optuna allows
        problems.append(f"{path}: a log range cannot have a step, got step={format_value(step)}; drop one of them")
        return None
    if step is not None:
        n_steps = (high - low) / step
        if abs(n_steps - round(n_steps)) > 1e-9:
            problems.append(
                f"{path}: high - low must be a multiple of step, got low={format_value(low)}, "
                f"high={format_value(high)}, step={format_value(step)}"
            )
            return None
    if rule.kind == "int":
        return IntRange(low, high, log=log, step=1 if step is None else step)
    return FloatRange(low, high, log=log, step=step)


def parse_space(raw: Mapping, problems: list[str], *, section: str = "space") -> FrozenMap:
    """Read the `[space]` table; every setting left out is fixed at its default.

    Args:
        raw: the table as tomllib returns it.
        problems: list that receives one line per mistake (nothing is raised here).
        section: the table's name in messages.

    Returns:
        FrozenMap setting name -> Fixed | Choice | IntRange | FloatRange, in the order of SETTINGS.
    """
    for key in raw:
        if key not in SETTINGS:
            problems.append(f"unknown key {section}.{key}{did_you_mean(key, SETTINGS, section + '.')}")
    space = {}
    for name, rule in SETTINGS.items():
        path = f"{section}.{name}"
        if name not in raw:
            space[name] = Fixed(rule.default)
            continue
        value = raw[name]
        if isinstance(value, Mapping):
            setting = _parse_range(path, value, rule, problems)
        elif isinstance(value, list):
            setting = _parse_choice(path, value, rule, problems)
        else:
            checked = check_value(path, value, rule, problems)
            setting = None if checked is None else Fixed(checked)
        space[name] = setting if setting is not None else Fixed(rule.default)
    return FrozenMap(space)


def grid_problems(space: Mapping[str, Setting], *, section: str = "space") -> list[str]:
    """One line per range in `space`: the grid sampler needs every searched setting as a list."""
    problems = []
    for name, setting in space.items():
        if isinstance(setting, (IntRange, FloatRange)):
            problems.append(
                f"{section}.{name}: sampler \"grid\" needs a list of values, got the range "
                f"{format_value(setting.to_plain())}; write a list, e.g. {name} = "
                f"{format_value([setting.low, setting.high])}, or choose another sampler"
            )
    return problems


def grid_values(space: Mapping[str, Setting]) -> dict[str, list]:
    """The search space of optuna's GridSampler: every listed setting and its values.

    Fixed settings are left out (they are never suggested).

    Raises:
        SpecError: naming each setting given as a range.

    Example:
        >>> grid_values({"batch_size": Choice((32, 64)), "activation": Fixed("relu")})
        {'batch_size': [32, 64]}
    """
    problems = grid_problems(space)
    if problems:
        raise SpecError(problems)
    return {name: list(s.values) for name, s in space.items() if isinstance(s, Choice)}


def suggest_params(trial, space: Mapping[str, Setting]) -> dict[str, Any]:
    """Sample one value per setting through an optuna trial.

    Args:
        trial: an `optuna.trial.Trial` (or anything with its suggest_* methods).
        space: setting name -> Fixed | Choice | IntRange | FloatRange.

    Returns:
        dict name -> value for every setting, fixed ones included, in the order of `space`.

    Example:
        >>> import optuna
        >>> trial = optuna.create_study().ask()
        >>> suggest_params(trial, {"dropout": FloatRange(0.0, 0.3), "layers": Fixed(1)})["layers"]
        1
    """
    params: dict[str, Any] = {}
    for name, setting in space.items():
        if isinstance(setting, Fixed):
            params[name] = setting.value
        elif isinstance(setting, Choice):
            params[name] = trial.suggest_categorical(name, list(setting.values))
        elif isinstance(setting, IntRange):
            params[name] = trial.suggest_int(name, setting.low, setting.high, step=setting.step, log=setting.log)
        elif isinstance(setting, FloatRange):
            params[name] = trial.suggest_float(name, setting.low, setting.high, step=setting.step, log=setting.log)
        else:
            raise TypeError(f"space.{name}: expected Fixed, Choice, IntRange or FloatRange, got {setting!r}")
    return params
