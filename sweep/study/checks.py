"""The checks of a study file: one per value, then the ones across keys and sections.

Each check records a problem (naming the key, what it got and the fix) and returns `_BAD`, so that
`sweep.study.reader.parse_spec` can report every problem of a file at once.
"""

from __future__ import annotations

import datetime as dt
import re
import tomllib
from collections.abc import Callable, Mapping
from dataclasses import MISSING, fields
from typing import Any

from sweep.study.space import (
    SETTINGS, FrozenMap, Setting, SettingRule, check_value, did_you_mean, format_value, grid_problems,
)
from sweep.study.spec import (
    HAR_MIN_ROWS, OBJECTIVES, PRICE_COLUMNS, PRUNERS, SAMPLERS, SECTION_TYPES, SECTIONS, check_name,
)
from trainers.baselines import BASELINES
from trainers.volatility import ESTIMATORS

__all__ = ["CHECKS", "Values", "check_inputs", "check_search", "check_split", "check_target", "check_top_level",
           "decode_problem", "read_section"]


# ---- checks of one value: each returns the value (converted), or _BAD after recording a problem ----
_BAD = object()
Check = Callable[[str, Any, list], Any]


def _rule(kind: str, low=None, high=None, *, low_open=False, high_open=False, choices=()) -> Check:
    rule = SettingRule(kind, None, low=low, high=high, low_open=low_open, high_open=high_open, choices=choices)

    def check(path, value, problems):
        out = check_value(path, value, rule, problems)
        return _BAD if out is None else out

    return check


def _bool(path, value, problems):
    if isinstance(value, bool):
        return value
    problems.append(f"{path}: must be true or false, got {format_value(value)}")
    return _BAD


def _name(path, value, problems):
    checked = check_name(path, value, problems)
    return _BAD if checked is None else checked


def _file(path, value, problems):
    if isinstance(value, str) and value.strip():
        return value
    problems.append(f"{path}: must be the path of a price file, got {format_value(value)}; "
                    'e.g. file = "data/prices.csv"')
    return _BAD


def _date(path, value, problems):
    if isinstance(value, dt.date) and not isinstance(value, dt.datetime):
        return value.isoformat()
    if isinstance(value, str) and re.fullmatch(r"\d{4}-\d{2}-\d{2}", value):
        try:
            return dt.date.fromisoformat(value).isoformat()
        except ValueError:
            pass
    key = path.split(".")[-1]
    problems.append(f'{path}: must be a date YYYY-MM-DD, got {format_value(value)}; e.g. {key} = 2021-01-04')
    return _BAD


def _ints(low: int, *, nonempty: bool = True) -> Check:
    def check(path, value, problems):
        good = isinstance(value, list) and (value or not nonempty) and all(
            isinstance(v, int) and not isinstance(v, bool) and v >= low for v in value)
        if good and value == sorted(set(value)):
            return tuple(value)
        need = "a non-empty list" if nonempty else "a list"
        problems.append(f"{path}: must be {need} of whole numbers >= {low}, ascending, each once; "
                        f"got {format_value(value)}")
        return _BAD

    return check


def _texts(choices: tuple[str, ...] = ()) -> Check:
    def check(path, value, problems):
        if not isinstance(value, list) or any(not isinstance(v, str) or not v for v in value):
            problems.append(f"{path}: must be a list of names, got {format_value(value)}")
            return _BAD
        if len(set(value)) != len(value):
            problems.append(f"{path}: a name repeats, got {format_value(value)}; list each once")
            return _BAD
        unknown = [v for v in value if choices and v not in choices]
        for v in unknown:
            problems.append(f"{path}: unknown name {format_value(v)}{did_you_mean(v, choices, as_value=True)} "
                            f"(choose from {', '.join(choices)})")
        return _BAD if unknown else tuple(value)

    return check


def _headers(path, value, problems):
    if not isinstance(value, Mapping) or any(not isinstance(v, str) or not v for v in value.values()):
        problems.append(f"{path}: must be a table of our name -> the file's header, got {format_value(value)}; "
                        'e.g. columns = { date = "Day", close = "Last" }')
        return _BAD
    if len(set(value.values())) != len(value):
        problems.append(f"{path}: two names point at the same header, got {format_value(value)}")
        return _BAD
    return FrozenMap(value)


CHECKS: dict[str, dict[str, Check]] = {
    "study": {
        "name": _name,
        "seed": _rule("int", 0),
        "trials": _rule("int", 1),
        "workers": _rule("int", 1),
        "objective": _rule("text", choices=sum(OBJECTIVES.values(), ())),
    },
    "data": {
        "file": _file,
        "columns": _headers,
        "bad_rows": _rule("text", choices=("error", "drop")),
    },
    "target": {
        "estimator": _rule("text", choices=ESTIMATORS),
        "yang_zhang_window": _rule("int", 2),
        "horizons": _ints(1),
        "scale": _rule("text", choices=("log", "level")),
        "task": _rule("text", choices=tuple(OBJECTIVES)),
        "classes": _rule("int", 2),
    },
    "features": {
        "har_windows": _ints(1, nonempty=False),
        "extra_lags": _ints(1, nonempty=False),
        "returns": _bool,
        "abs_returns": _bool,
        "exogenous": _texts(),
    },
    "split": {
        "valid": _rule("float", 0, 1, low_open=True, high_open=True),
        "test": _rule("float", 0, 1, high_open=True),
        "valid_start": _date,
        "test_start": _date,
        "embargo": _rule("int", 0),
        "folds": _rule("int", 0),
        "expanding": _bool,
    },
    "search": {
        "sampler": _rule("text", choices=SAMPLERS),
        "pruner": _rule("text", choices=PRUNERS),
        "startup_trials": _rule("int", 0),
        "warmup_epochs": _rule("int", 0),
        "min_epochs": _rule("int", 1),
        "reduction_factor": _rule("int", 2),
    },
    "training": {
        "max_epochs": _rule("int", 1),
        "min_delta": _rule("float", 0),
        "optimizer": _rule("text", choices=("adam", "sgd")),
        "momentum": _rule("float", 0, 1, high_open=True),
    },
    "baselines": {
        "include": _texts(BASELINES),
        "ewma_lambda": _rule("float", 0, 1, low_open=True, high_open=True),
        "har_window": _rule("int", 1),
    },
}
_REQUIRED = {"study.name": 'name = "harbor-demo"', "data.file": 'file = "data/prices.csv"'}


class Values:
    """The checked values of every section: given ones (possibly _BAD), else the dataclass default."""

    def __init__(self):
        self.given: dict[str, dict[str, Any]] = {s: {} for s in CHECKS}

    def __call__(self, section: str, key: str) -> Any:
        if key in self.given[section]:
            return self.given[section][key]
        (f,) = [f for f in fields(SECTION_TYPES[section]) if f.name == key]
        return f.default_factory() if f.default is MISSING else f.default

    def ok(self, *keys: str) -> bool:
        """True when none of the "section.key" values is _BAD."""
        return all(self(*k.split(".")) is not _BAD for k in keys)


def read_section(section: str, raw: Mapping, present: bool, values: Values, problems: list[str]) -> None:
    checks = CHECKS[section]
    for key, value in raw.items():
        if key in checks:
            values.given[section][key] = checks[key](f"{section}.{key}", value, problems)
        else:
            hint = did_you_mean(key, checks, section + ".") or f" ([{section}] takes {', '.join(checks)})"
            problems.append(f"unknown key {section}.{key}{hint}")
    for path, example in _REQUIRED.items():
        if path.startswith(section + ".") and path.split(".")[1] not in raw:
            values.given[section][path.split(".")[1]] = _BAD
            if present:  # a missing section is reported once, as a section
                problems.append(f"{path}: missing; add {example} under [{section}]")


def check_target(v: Values, problems: list[str]) -> None:
    task, objective = v("target", "task"), v.given["study"].get("objective")
    if v.ok("target.task") and objective is None:
        v.given["study"]["objective"] = OBJECTIVES[task][0]
    elif v.ok("target.task", "study.objective") and objective not in OBJECTIVES[task]:
        fitting = ", ".join(map(format_value, OBJECTIVES[task]))
        problems.append(f"study.objective: {format_value(objective)} does not fit target.task = "
                        f"{format_value(task)}; use one of {fitting}")
    if not v.ok("target.horizons"):
        return
    longest, embargo = max(v("target", "horizons")), v.given["split"].get("embargo")
    if embargo is None:
        v.given["split"]["embargo"] = longest
    elif embargo is not _BAD and embargo < longest:
        problems.append(f"split.embargo: must be >= the longest horizon ({longest}) so that no target "
                        f"overlaps the next window, got {embargo}; set embargo = {longest} or more")


def check_split(v: Values, problems: list[str]) -> None:
    given = v.given["split"]
    fractions = [k for k in ("valid", "test") if k in given]
    dates = [k for k in ("valid_start", "test_start") if k in given]
    if fractions and dates:
        problems.append("split: give either fractions (valid, test) or dates (valid_start, test_start), "
                        f"not both; got {', '.join(fractions + dates)}")
    elif len(dates) == 1:
        other = "test_start" if dates == ["valid_start"] else "valid_start"
        problems.append(f"split.{other}: missing; dates need both valid_start and test_start, got only {dates[0]}")
    elif dates and v.ok("split.valid_start", "split.test_start") and given["valid_start"] >= given["test_start"]:
        problems.append(f"split: valid_start must come before test_start, got {given['valid_start']} "
                        f"and {given['test_start']}")
    elif not dates and v.ok("split.valid", "split.test") and v("split", "valid") + v("split", "test") >= 1:
        problems.append(f"split: valid + test must leave rows to train on (sum < 1), got valid = "
                        f"{v('split', 'valid')}, test = {v('split', 'test')}")
    if dates:
        given["valid"] = given["test"] = None
        if v.ok("split.folds") and v("split", "folds") > 0:
            problems.append(f"split.folds: walk-forward folds need fractions (valid, test), not dates; "
                            f"got folds = {v('split', 'folds')}; use fractions or set folds = 0")


def check_inputs(v: Values, problems: list[str]) -> None:
    keys = [f"features.{k}" for k in CHECKS["features"]]
    if v.ok(*keys) and not any(v(*k.split(".")) for k in keys):
        problems.append("features: the network has no inputs; keep har_windows = [1, 5, 22] or add "
                        "extra_lags, returns, abs_returns or exogenous")
    if not v.ok("features.exogenous"):
        return
    exogenous = v("features", "exogenous")
    for name in exogenous:
        if name in PRICE_COLUMNS:
            problems.append(f"features.exogenous: {format_value(name)} is a price column, not an extra "
                            "input; remove it (har_windows, returns and abs_returns cover prices)")
    ours = PRICE_COLUMNS + exogenous
    for key in v("data", "columns") if v.ok("data.columns") else ():
        if key not in ours:
            problems.append(f"unknown key data.columns.{key}{did_you_mean(key, ours, 'data.columns.')} "
                            f"(columns maps {', '.join(ours)} to the file's headers)")


def check_search(v: Values, space: Mapping[str, Setting], problems: list[str]) -> None:
    if v.ok("search.sampler") and v("search", "sampler") == "grid":
        problems.extend(grid_problems(space))
    for key in ("min_epochs", "warmup_epochs"):
        if v.ok(f"search.{key}", "training.max_epochs") and v("search", key) > v("training", "max_epochs"):
            problems.append(f"search.{key}: must be <= training.max_epochs ({v('training', 'max_epochs')}), "
                            f"got {v('search', key)}")
    window = v("baselines", "har_window")
    if v.ok("baselines.har_window") and window < HAR_MIN_ROWS:
        problems.append(f"baselines.har_window: the rolling HAR needs at least {HAR_MIN_ROWS} rows per fit, "
                        f"got {window}; set har_window = {HAR_MIN_ROWS} or more")


def check_top_level(raw: Mapping, problems: list[str]) -> None:
    for key, value in raw.items():
        if key in SECTIONS:
            if not isinstance(value, Mapping):
                problems.append(f"{key}: must be a section [{key}], got {format_value(value)}")
        elif isinstance(value, Mapping):
            close = did_you_mean(key, SECTIONS, "[").replace("?", "]?")
            problems.append(f"unknown section [{key}]{close or ' (sections: ' + ', '.join(SECTIONS) + ')'}")
        else:
            homes = [s for s in SECTIONS if key in (SETTINGS if s == "space" else CHECKS[s])]
            hint = f"; did you mean {homes[0]}.{key} (under [{homes[0]}])?" if homes else ""
            problems.append(f"unknown key {key} at the top of the file{hint}")
    for path, example in _REQUIRED.items():
        section = path.split(".")[0]
        if section not in raw:
            problems.append(f"missing section [{section}]; add [{section}] with {example}")


def decode_problem(error: tomllib.TOMLDecodeError) -> str:
    message = str(error)
    found = re.search(r"\s*\(at line (\d+), column (\d+)\)$", message)
    if found:
        return f"line {found.group(1)}, column {found.group(2)}: not valid TOML: {message[:found.start()]}"
    return f"not valid TOML: {message}"
