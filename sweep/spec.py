"""A study file (TOML) -> a frozen `StudySpec`; every mistake is named with its key and a fix.

`load_spec(path)` reads a file, `parse_spec(text, base_dir=...)` reads text. All problems of a file are
collected and raised together as one `SpecError`, one problem a line, before anything runs.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import re
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field, fields, replace
from pathlib import Path
from typing import Any

from sweep.errors import VolsweepError
from trainers.baselines import BASELINES
from trainers.volatility import ESTIMATORS
from sweep.space import (
    ACTIVATIONS,
    Choice,
    Fixed,
    FloatRange,
    FrozenMap,
    IntRange,
    Setting,
    SETTINGS,
    SettingRule,
    check_value,
    did_you_mean,
    format_value,
    grid_problems,
    parse_space,
)

__all__ = [
    "ACTIVATIONS", "BASELINES", "ESTIMATORS", "HAR_MIN_ROWS", "OBJECTIVES", "PRUNERS", "SAMPLERS", "SECTIONS",
    "BaselineSection", "Choice", "DataSection", "FeatureSection", "Fixed", "FloatRange", "IntRange",
    "SearchSection", "SpecError", "SplitSection", "StudySection", "StudySpec", "TargetSection",
    "TrainingSection", "diff_specs", "load_spec", "parse_spec",
]

# The fewest rows of a rolling HAR fit: forecast_baselines' default har_min_rows (checked in the tests).
HAR_MIN_ROWS = 250
OBJECTIVES = {"regression": ("qlike", "mse_log", "mse"), "classification": ("deviance",)}
SAMPLERS = ("tpe", "random", "qmc", "grid")
PRUNERS = ("median", "halving", "hyperband", "none")
PRICE_COLUMNS = ("date", "open", "high", "low", "close")
SECTIONS = ("study", "data", "target", "features", "split", "search", "space", "training", "baselines")
NAME_PATTERN = re.compile(r"[A-Za-z0-9_.-]{1,100}")


class SpecError(VolsweepError):
    """A study file that cannot be used; `problems` holds one line per mistake."""

    def __init__(self, problems, *, path: str | Path | None = None):
        self.problems = tuple(problems)
        self.path = path
        where = f"study file {path}" if path is not None else "study spec"
        if len(self.problems) == 1:
            message = f"{where}: {self.problems[0]}"
        else:
            message = f"{where} has {len(self.problems)} problems:\n" + "\n".join(f"  {p}" for p in self.problems)
        super().__init__(message)


@dataclass(frozen=True)
class StudySection:
    name: str
    seed: int = 0
    trials: int = 20            # trials for the whole study, over all workers
    workers: int = 1
    objective: str = "qlike"    # OBJECTIVES[task]


@dataclass(frozen=True)
class DataSection:
    file: Path                  # the price file, resolved against the study file's folder
    file_as_written: str        # the same as written in the study file (what to_dict and the hashes keep)
    columns: FrozenMap = field(default_factory=FrozenMap)   # our name -> the file's header
    bad_rows: str = "error"     # "error" | "drop"


@dataclass(frozen=True)
class TargetSection:
    estimator: str = "garman_klass"
    yang_zhang_window: int = 22
    horizons: tuple[int, ...] = (1, 5, 22)
    scale: str = "log"          # "log" | "level"
    task: str = "regression"    # "regression" | "classification"
    classes: int = 3            # used by classification only


@dataclass(frozen=True)
class FeatureSection:
    har_windows: tuple[int, ...] = (1, 5, 22)
    extra_lags: tuple[int, ...] = ()
    returns: bool = False
    abs_returns: bool = False
    exogenous: tuple[str, ...] = ()


@dataclass(frozen=True)
class SplitSection:
    """Either fractions (`valid`, `test`) or dates (`valid_start`, `test_start`, ISO text); the other pair is None."""

    valid: float | None = 0.2
    test: float | None = 0.2
    valid_start: str | None = None
    test_start: str | None = None
    embargo: int = 22
    folds: int = 0              # walk-forward folds; 0 = one split
    expanding: bool = True

    @property
    def by_dates(self) -> bool:
        return self.valid_start is not None


@dataclass(frozen=True)
class SearchSection:
    sampler: str = "tpe"
    pruner: str = "median"
    startup_trials: int = 5
    warmup_epochs: int = 5
    min_epochs: int = 5
    reduction_factor: int = 3


@dataclass(frozen=True)
class TrainingSection:
    max_epochs: int = 100
    min_delta: float = 0.0
    optimizer: str = "adam"     # "adam" | "sgd"
    momentum: float = 0.9       # sgd only


@dataclass(frozen=True)
class BaselineSection:
    include: tuple[str, ...] = BASELINES
    ewma_lambda: float = 0.94
    har_window: int = 1000


# ---- checks of single values: each returns the value, or _BAD after recording a problem ----------
_BAD = object()


def _rule(kind, low=None, high=None, *, low_open=False, high_open=False, choices=()):
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
    if isinstance(value, str) and NAME_PATTERN.fullmatch(value) and value.strip("."):
        return value
    problems.append(f"{path}: must be 1-100 letters, digits, '-', '_' or '.', got {format_value(value)}; "
                    f'e.g. name = "harbor-demo"')
    return _BAD


def _file(path, value, problems):
    if isinstance(value, str) and value.strip():
        return value
    problems.append(f'{path}: must be the path of a price file, got {format_value(value)}; e.g. file = "data/prices.csv"')
    return _BAD


def _date(path, value, problems):
    if isinstance(value, dt.date) and not isinstance(value, dt.datetime):
        return value.isoformat()
    if isinstance(value, str) and re.fullmatch(r"\d{4}-\d{2}-\d{2}", value):
        try:
            return dt.date.fromisoformat(value).isoformat()
        except ValueError:
            pass
    problems.append(f'{path}: must be a date YYYY-MM-DD, got {format_value(value)}; e.g. {path.split(".")[-1]} = "2021-01-04"')
    return _BAD


def _ints(low, *, nonempty=True):
    def check(path, value, problems):
        bad = not isinstance(value, list) or (nonempty and not value) or any(
            isinstance(v, bool) or not isinstance(v, int) or v < low for v in value)
        if not bad and value != sorted(set(value)):
            bad = True
        if bad:
            need = "a non-empty list" if nonempty else "a list"
            problems.append(f"{path}: must be {need} of whole numbers >= {low}, ascending, each once; "
                            f"got {format_value(value)}")
            return _BAD
        return tuple(value)

    return check


def _texts(choices=()):
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
        problems.append(f'{path}: must be a table of our name -> the file\'s header, got {format_value(value)}; '
                        f'e.g. columns = {{ date = "Day", close = "Last" }}')
        return _BAD
    if len(set(value.values())) != len(value):
        problems.append(f"{path}: two names point at the same header, got {format_value(value)}")
        return _BAD
    return FrozenMap(value)


_REQUIRED = object()
_UNSET = object()
_KEYS: dict[str, dict[str, tuple]] = {
    "study": {"name": (_name, _REQUIRED), "seed": (_rule("int", 0), 0), "trials": (_rule("int", 1), 20),
              "workers": (_rule("int", 1), 1),
              "objective": (_rule("text", choices=sum(OBJECTIVES.values(), ())), _UNSET)},
    "data": {"file": (_file, _REQUIRED), "columns": (_headers, FrozenMap()),
             "bad_rows": (_rule("text", choices=("error", "drop")), "error")},
    "target": {"estimator": (_rule("text", choices=ESTIMATORS), "garman_klass"),
               "yang_zhang_window": (_rule("int", 2), 22), "horizons": (_ints(1), (1, 5, 22)),
               "scale": (_rule("text", choices=("log", "level")), "log"),
               "task": (_rule("text", choices=tuple(OBJECTIVES)), "regression"),
               "classes": (_rule("int", 2), 3)},
    "features": {"har_windows": (_ints(1, nonempty=False), (1, 5, 22)),
                 "extra_lags": (_ints(1, nonempty=False), ()), "returns": (_bool, False),
                 "abs_returns": (_bool, False), "exogenous": (_texts(), ())},
    "split": {"valid": (_rule("float", 0, 1, low_open=True, high_open=True), _UNSET),
              "test": (_rule("float", 0, 1, high_open=True), _UNSET),
              "valid_start": (_date, _UNSET), "test_start": (_date, _UNSET),
              "embargo": (_rule("int", 0), _UNSET), "folds": (_rule("int", 0), 0), "expanding": (_bool, True)},
    "search": {"sampler": (_rule("text", choices=SAMPLERS), "tpe"), "pruner": (_rule("text", choices=PRUNERS), "median"),
               "startup_trials": (_rule("int", 0), 5), "warmup_epochs": (_rule("int", 0), 5),
               "min_epochs": (_rule("int", 1), 5), "reduction_factor": (_rule("int", 2), 3)},
    "training": {"max_epochs": (_rule("int", 1), 100), "min_delta": (_rule("float", 0), 0.0),
                 "optimizer": (_rule("text", choices=("adam", "sgd")), "adam"),
                 "momentum": (_rule("float", 0, 1, high_open=True), 0.9)},
    "baselines": {"include": (_texts(BASELINES), BASELINES), "ewma_lambda": (_rule("float", 0, 1, low_open=True,
                  high_open=True), 0.94), "har_window": (_rule("int", 1), 1000)},
}
_EXAMPLE_REQUIRED = {"study.name": 'name = "harbor-demo"', "data.file": 'file = "data/prices.csv"'}


def _read_section(section: str, raw: Mapping, problems: list[str], *, present: bool = True) -> dict:
    """Check every key of one section; bad values become _BAD, missing ones their default."""
    keys = _KEYS[section]
    for key in raw:
        if key not in keys:
            problems.append(f"unknown key {section}.{key}{did_you_mean(key, keys, section + '.')}"
                            + ("" if did_you_mean(key, keys) else f" ([{section}] takes {', '.join(keys)})"))
    values = {}
    for key, (check, default) in keys.items():
        path = f"{section}.{key}"
        if key in raw:
            values[key] = check(path, raw[key], problems)
        elif default is _REQUIRED:
            if present:  # a missing section is reported once, as a section
                problems.append(f"{path}: missing; add {_EXAMPLE_REQUIRED[path]} under [{section}]")
            values[key] = _BAD
        else:
            values[key] = default
    return values


def _ok(*values) -> bool:
    return all(v is not _BAD for v in values)


def _check_across(v: dict[str, dict], space: Mapping[str, Setting], problems: list[str]) -> None:
    """Checks that involve more than one key; skipped where a key involved is already wrong."""
    study, data, target, features, split = v["study"], v["data"], v["target"], v["features"], v["split"]
    task = target["task"]
    if _ok(task):
        fitting = OBJECTIVES[task]
        if study["objective"] is _UNSET:
            study["objective"] = fitting[0]
        elif _ok(study["objective"]) and study["objective"] not in fitting:
            problems.append(f"study.objective: {format_value(study['objective'])} does not fit target.task = "
                            f"{format_value(task)}; use one of {', '.join(map(format_value, fitting))}")
    horizons = target["horizons"]
    if _ok(horizons):
        longest = max(horizons)
        if split["embargo"] is _UNSET:
            split["embargo"] = longest
        elif _ok(split["embargo"]) and split["embargo"] < longest:
            problems.append(f"split.embargo: must be >= the longest horizon ({longest}) so that no target "
                            f"overlaps the next window, got {split['embargo']}; set embargo = {longest} or more")
    fractions = [k for k in ("valid", "test") if split[k] is not _UNSET]
    dates = [k for k in ("valid_start", "test_start") if split[k] is not _UNSET]
    if fractions and dates:
        problems.append(f"split: give either fractions (valid, test) or dates (valid_start, test_start), not both; "
                        f"got {', '.join(fractions + dates)}")
    elif dates:
        if len(dates) == 1:
            other = "test_start" if dates[0] == "valid_start" else "valid_start"
            problems.append(f"split.{other}: missing; dates need both valid_start and test_start, got only {dates[0]}")
        elif _ok(split["valid_start"], split["test_start"]) and split["valid_start"] >= split["test_start"]:
            problems.append(f"split: valid_start must come before test_start, got {split['valid_start']} and "
                            f"{split['test_start']}")
        if _ok(split["folds"]) and split["folds"] > 0:
            problems.append(f"split.folds: walk-forward folds need fractions (valid, test), not dates; "
                            f"got folds = {split['folds']}; use fractions or set folds = 0")
    else:
        split["valid"] = 0.2 if split["valid"] is _UNSET else split["valid"]
        split["test"] = 0.2 if split["test"] is _UNSET else split["test"]
        if _ok(split["valid"], split["test"]) and split["valid"] + split["test"] >= 1:
            problems.append(f"split: valid + test must leave rows to train on (sum < 1), got valid = "
                            f"{split['valid']}, test = {split['test']}")
    for key in ("valid", "test", "valid_start", "test_start"):
        split[key] = None if split[key] is _UNSET else split[key]

    if all(_ok(features[k]) for k in features) and not (features["har_windows"] or features["extra_lags"]
                                                      or features["returns"] or features["abs_returns"]
                                                      or features["exogenous"]):
        problems.append("features: the network has no inputs; keep har_windows = [1, 5, 22] or add extra_lags, "
                        "returns, abs_returns or exogenous")
    exogenous = features["exogenous"]
    if _ok(exogenous):
        for name in exogenous:
            if name in PRICE_COLUMNS:
                problems.append(f"features.exogenous: {format_value(name)} is a price column, not an extra input; "
                                "remove it (har_windows, returns and abs_returns cover prices)")
        columns = data["columns"]
        if _ok(columns):
            ours = PRICE_COLUMNS + exogenous
            for key in columns:
                if key not in ours:
                    problems.append(f"unknown key data.columns.{key}{did_you_mean(key, ours, 'data.columns.')} "
                                    f"(columns maps {', '.join(ours)} to the file's headers)")
    window = v["baselines"]["har_window"]
    if _ok(window) and window < HAR_MIN_ROWS:
        problems.append(f"baselines.har_window: the rolling HAR needs at least {HAR_MIN_ROWS} rows per fit, "
                        f"got {window}; set har_window = {HAR_MIN_ROWS} or more")
    search, max_epochs = v["search"], v["training"]["max_epochs"]
    if _ok(search["sampler"]) and search["sampler"] == "grid":
        problems.extend(grid_problems(space))
    for key in ("min_epochs", "warmup_epochs"):
        if _ok(search[key], max_epochs) and search[key] > max_epochs:
            problems.append(f"search.{key}: must be <= training.max_epochs ({max_epochs}), got {search[key]}")


def _decode_problem(error: tomllib.TOMLDecodeError) -> str:
    message = str(error)
    found = re.search(r"\s*\(at line (\d+), column (\d+)\)$", message)
    if found:
        return f"line {found.group(1)}, column {found.group(2)}: not valid TOML: {message[:found.start()]}"
    return f"not valid TOML: {message}"


def parse_spec(text: str, *, base_dir: str | Path, path: str | Path | None = None) -> StudySpec:
    """Read a study from TOML text.

    Args:
        text: the study file's text.
        base_dir: folder that relative `data.file` paths start from (the study file's folder).
        path: the study file, kept in the spec and named in errors.

    Returns:
        The StudySpec, with every default filled in.

    Raises:
        SpecError: listing every problem, one a line.

    Example:
        >>> spec = parse_spec('[study]\\nname = "a"\\n[data]\\nfile = "p.csv"\\n', base_dir=".")
        >>> spec.study.objective, spec.split.embargo
        ('qlike', 22)
    """
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise SpecError([_decode_problem(error)], path=path) from None
    problems: list[str] = []
    for key, value in raw.items():
        if key in SECTIONS and not isinstance(value, Mapping):
            problems.append(f"{key}: must be a section [{key}], got {format_value(value)}")
        elif key not in SECTIONS and isinstance(value, Mapping):
            close = did_you_mean(key, SECTIONS)
            hint = f"; did you mean [{close[len('; did you mean '):-1]}]?" if close else f" (sections: {', '.join(SECTIONS)})"
            problems.append(f"unknown section [{key}]{hint}")
        elif key not in SECTIONS:
            homes = [s for s in SECTIONS if key in (SETTINGS if s == "space" else _KEYS[s])]
            hint = f"; did you mean {homes[0]}.{key} (under [{homes[0]}])?" if homes else ""
            problems.append(f"unknown key {key} at the top of the file{hint}")
    for section, example in (("study", 'name = "harbor-demo"'), ("data", 'file = "data/prices.csv"')):
        if section not in raw:
            problems.append(f"missing section [{section}]; add [{section}] with {example}")
    tables = {s: raw[s] if isinstance(raw.get(s), Mapping) else {} for s in SECTIONS}
    values = {s: _read_section(s, tables[s], problems, present=s in raw) for s in _KEYS}
    space = parse_space(tables["space"], problems)
    _check_across(values, space, problems)
    if problems:
        raise SpecError(problems, path=path)
    data = values["data"]
    resolved = (Path(base_dir) / Path(data["file"]).expanduser()).resolve()
    return StudySpec(
        study=StudySection(**values["study"]),
        data=DataSection(file=resolved, file_as_written=data["file"], columns=data["columns"],
                         bad_rows=data["bad_rows"]),
        target=TargetSection(**values["target"]),
        features=FeatureSection(**values["features"]),
        split=SplitSection(**values["split"]),
        search=SearchSection(**values["search"]),
        space=space,
        training=TrainingSection(**values["training"]),
        baselines=BaselineSection(**values["baselines"]),
        path=None if path is None else Path(path).resolve(),
        text=text,
    )


def load_spec(path: str | Path) -> StudySpec:
    """Read a study file; relative data paths start at the file's folder.

    Raises:
        SpecError: the file is missing or unreadable, is not TOML, or has mistakes (all listed).
    """
    file = Path(path)
    if not file.is_file():
        what = "is a folder, not a study file" if file.is_dir() else "not found"
        raise SpecError([f"{what} (looked for {file.resolve()}); give the path of a .toml study file"], path=path)
    try:
        text = file.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as error:
        raise SpecError([f"cannot be read: {error}; save it as UTF-8 text"], path=path) from None
    return parse_spec(text, base_dir=file.resolve().parent, path=path)


def _plain(value: Any) -> Any:
    if isinstance(value, Mapping):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, (tuple, list)):
        return [_plain(v) for v in value]
    return value


def _canonical_json(value: Any) -> str:
    return json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=True, allow_nan=False)


@dataclass(frozen=True)
class StudySpec:
    """A parsed study file. `text` is the file as read; `path` the file (None for text)."""

    study: StudySection
    data: DataSection
    target: TargetSection
    features: FeatureSection
    split: SplitSection
    search: SearchSection
    space: FrozenMap            # setting name -> Fixed | Choice | IntRange | FloatRange
    training: TrainingSection
    baselines: BaselineSection
    path: Path | None = None
    text: str = ""

    def with_name(self, name: str) -> StudySpec:
        """The same study under another name (the text is kept as read)."""
        problems: list[str] = []
        _name("study.name", name, problems)
        if problems:
            raise SpecError(problems, path=self.path)
        return replace(self, study=replace(self.study, name=name))

    def to_dict(self) -> dict:
        """Every setting, defaults filled in, as JSON-able values; `data.file` as written in the file.

        Space settings take their study-file form: a value, a list, or {low, high[, log][, step]}.
        """
        out: dict = {}
        for section in SECTIONS:
            if section == "space":
                out["space"] = {name: _plain(s.to_plain()) for name, s in self.space.items()}
                continue
            obj = getattr(self, section)
            out[section] = {f.name: _plain(getattr(obj, f.name)) for f in fields(obj)
                            if getattr(obj, f.name) is not None and f.name not in ("file", "file_as_written")}
            if section == "data":
                out["data"] = {"file": self.data.file_as_written, **out["data"]}
        return out

    def search_hash(self) -> str:
        """sha256 of what decides a trial's outcome: space, target, features, split, training, search."""
        d = self.to_dict()
        return hashlib.sha256(_canonical_json({k: d[k] for k in (
            "space", "target", "features", "split", "training", "search")}).encode()).hexdigest()

    def spec_hash(self) -> str:
        """sha256 of every setting (`to_dict`), independent of layout, comments and key order."""
        return hashlib.sha256(_canonical_json(self.to_dict()).encode()).hexdigest()


_ABSENT = object()


def diff_specs(a: Mapping, b: Mapping) -> list[str]:
    """Lines `section.key: old -> new` for every setting that differs between two `to_dict()` forms.

    Example:
        >>> diff_specs({"space": {"dropout": {"low": 0.0, "high": 0.3}}},
        ...            {"space": {"dropout": {"low": 0.0, "high": 0.5}}})
        ['space.dropout: {low=0.0, high=0.3} -> {low=0.0, high=0.5}']
    """
    def show(value):
        return "(not set)" if value is _ABSENT else format_value(value)

    def same(x, y):
        return x is not _ABSENT and y is not _ABSENT and _canonical_json(x) == _canonical_json(y)

    lines = []
    for section in list(a) + [s for s in b if s not in a]:
        sa, sb = a.get(section, _ABSENT), b.get(section, _ABSENT)
        if isinstance(sa, Mapping) or isinstance(sb, Mapping):
            sa = sa if isinstance(sa, Mapping) else {}
            sb = sb if isinstance(sb, Mapping) else {}
            for key in list(sa) + [k for k in sb if k not in sa]:
                va, vb = sa.get(key, _ABSENT), sb.get(key, _ABSENT)
                if not same(va, vb):
                    lines.append(f"{section}.{key}: {show(va)} -> {show(vb)}")
        elif not same(sa, sb):
            lines.append(f"{section}: {show(sa)} -> {show(sb)}")
    return lines
