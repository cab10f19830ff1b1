"""A study file (TOML) -> a frozen `StudySpec`; every mistake is named with its key and a fix.

`load_spec(path)` reads a file, `parse_spec(text, base_dir=...)` reads text. All problems of a file are
collected and raised together as one `SpecError`, one problem a line, before anything runs. The keys,
their meaning and their defaults are documented in `studies/demo.toml`.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import re
import tomllib
from collections.abc import Callable, Mapping
from dataclasses import MISSING, dataclass, field, fields, replace
from pathlib import Path
from typing import Any

from sweep.errors import VolsweepError
from sweep.space import (
    ACTIVATIONS,
    SETTINGS,
    Choice,
    Fixed,
    FloatRange,
    FrozenMap,
    IntRange,
    Setting,
    SettingRule,
    check_value,
    did_you_mean,
    format_value,
    grid_problems,
    parse_space,
)
from trainers.baselines import BASELINES
from trainers.volatility import ESTIMATORS

__all__ = [
    "ACTIVATIONS", "BASELINES", "ESTIMATORS", "HAR_MIN_ROWS", "OBJECTIVES", "PRUNERS", "SAMPLERS",
    "SECTIONS", "BaselineSection", "Choice", "DataSection", "FeatureSection", "Fixed", "FloatRange",
    "IntRange", "SearchSection", "SpecError", "SplitSection", "StudySection", "StudySpec", "TargetSection",
    "TrainingSection", "diff_specs", "load_spec", "parse_spec",
]

OBJECTIVES = {"regression": ("qlike", "mse_log", "mse"), "classification": ("deviance",)}
SAMPLERS = ("tpe", "random", "qmc", "grid")
PRUNERS = ("median", "halving", "hyperband", "none")
PRICE_COLUMNS = ("date", "open", "high", "low", "close")
SECTIONS = ("study", "data", "target", "features", "split", "search", "space", "training", "baselines")
NAME_PATTERN = re.compile(r"[A-Za-z0-9_.-]{1,100}")
# The fewest rows of a rolling HAR fit: forecast_baselines' default har_min_rows (checked in the tests).
HAR_MIN_ROWS = 250


class SpecError(VolsweepError):
    """A study file that cannot be used; `problems` holds one line per mistake."""

    def __init__(self, problems, *, path: str | Path | None = None):
        self.problems = tuple(problems)
        self.path = path
        where = f"study file {path}" if path is not None else "study spec"
        if len(self.problems) == 1:
            message = f"{where}: {self.problems[0]}"
        else:
            lines = "\n".join(f"  {p}" for p in self.problems)
            message = f"{where} has {len(self.problems)} problems:\n{lines}"
        super().__init__(message)


@dataclass(frozen=True)
class StudySection:
    name: str
    seed: int = 0
    trials: int = 20            # trials for the whole study, over all workers
    workers: int = 1
    objective: str = "qlike"    # one of OBJECTIVES[task]; the first one when not given


@dataclass(frozen=True)
class DataSection:
    file: Path                  # the price file, resolved against the study file's folder
    file_as_written: str        # the same as written in the file (what to_dict and the hashes keep)
    columns: FrozenMap = field(default_factory=FrozenMap)   # our name -> the file's header
    bad_rows: str = "error"     # "error" | "drop"


@dataclass(frozen=True)
class TargetSection:
    estimator: str = "garman_klass"
    yang_zhang_window: int = 22     # used with estimator "yang_zhang" only
    horizons: tuple[int, ...] = (1, 5, 22)
    scale: str = "log"          # "log" | "level"
    task: str = "regression"    # "regression" | "classification"
    classes: int = 3            # used with task "classification" only


@dataclass(frozen=True)
class FeatureSection:
    har_windows: tuple[int, ...] = (1, 5, 22)
    extra_lags: tuple[int, ...] = ()
    returns: bool = False
    abs_returns: bool = False
    exogenous: tuple[str, ...] = ()


@dataclass(frozen=True)
class SplitSection:
    """Fractions (`valid`, `test`) or first dates (`valid_start`, `test_start`, ISO text); the other pair is None."""

    valid: float | None = 0.2
    test: float | None = 0.2
    valid_start: str | None = None
    test_start: str | None = None
    embargo: int = 22           # the longest horizon when not given
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


_SECTION_TYPES = {"study": StudySection, "data": DataSection, "target": TargetSection,
                  "features": FeatureSection, "split": SplitSection, "search": SearchSection,
                  "training": TrainingSection, "baselines": BaselineSection}


def _canonical_json(value: Any) -> str:
    return json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=True, allow_nan=False)


def _plain(value: Any) -> Any:
    if isinstance(value, Mapping):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, (tuple, list)):
        return [_plain(v) for v in value]
    return value


@dataclass(frozen=True)
class StudySpec:
    """A parsed study file. `text` is the file as read; `path` the file (None when parsed from text)."""

    study: StudySection
    data: DataSection
    target: TargetSection
    features: FeatureSection
    split: SplitSection
    search: SearchSection
    space: FrozenMap            # setting name -> Fixed | Choice | IntRange | FloatRange, in SETTINGS order
    training: TrainingSection
    baselines: BaselineSection
    path: Path | None = None
    text: str = ""

    def with_name(self, name: str) -> StudySpec:
        """The same study under another name (`text` stays the file as read)."""
        problems: list[str] = []
        _name("study.name", name, problems)
        if problems:
            raise SpecError(problems, path=self.path)
        return replace(self, study=replace(self.study, name=name))

    def to_dict(self) -> dict:
        """Every setting with defaults filled in, as JSON-able values, sections in file order.

        `data.file` is kept as written (the resolved path depends on the machine); unused split keys
        (dates or fractions) are left out; space settings take their study-file form: a value, a list,
        or {low, high[, log][, step]}.
        """
        out: dict = {}
        for section in SECTIONS:
            if section == "space":
                out["space"] = {name: _plain(s.to_plain()) for name, s in self.space.items()}
                continue
            obj = getattr(self, section)
            out[section] = {f.name: _plain(getattr(obj, f.name)) for f in fields(obj)
                            if getattr(obj, f.name) is not None and f.name not in ("file", "file_as_written")}
        out["data"] = {"file": self.data.file_as_written, **out["data"]}
        return out

    def search_hash(self) -> str:
        """sha256 of what decides the trials: the space, target, features, split, training and search sections."""
        d = self.to_dict()
        keep = ("space", "target", "features", "split", "training", "search")
        return hashlib.sha256(_canonical_json({k: d[k] for k in keep}).encode()).hexdigest()

    def spec_hash(self) -> str:
        """sha256 of every setting (`to_dict`): comments, layout and key order do not count."""
        return hashlib.sha256(_canonical_json(self.to_dict()).encode()).hexdigest()


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
    if isinstance(value, str) and NAME_PATTERN.fullmatch(value) and value.strip("."):
        return value
    problems.append(f"{path}: must be 1-100 letters, digits, '-', '_' or '.', got {format_value(value)}; "
                    'e.g. name = "harbor-demo"')
    return _BAD


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


_CHECKS: dict[str, dict[str, Check]] = {
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


class _Values:
    """The checked values of every section: given ones (possibly _BAD), else the dataclass default."""

    def __init__(self):
        self.given: dict[str, dict[str, Any]] = {s: {} for s in _CHECKS}

    def __call__(self, section: str, key: str) -> Any:
        if key in self.given[section]:
            return self.given[section][key]
        (f,) = [f for f in fields(_SECTION_TYPES[section]) if f.name == key]
        return f.default_factory() if f.default is MISSING else f.default

    def ok(self, *keys: str) -> bool:
        """True when none of the "section.key" values is _BAD."""
        return all(self(*k.split(".")) is not _BAD for k in keys)


def _read_section(section: str, raw: Mapping, present: bool, values: _Values, problems: list[str]) -> None:
    checks = _CHECKS[section]
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


def _check_target(v: _Values, problems: list[str]) -> None:
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


def _check_split(v: _Values, problems: list[str]) -> None:
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


def _check_inputs(v: _Values, problems: list[str]) -> None:
    keys = [f"features.{k}" for k in _CHECKS["features"]]
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


def _check_search(v: _Values, space: Mapping[str, Setting], problems: list[str]) -> None:
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


def _check_top_level(raw: Mapping, problems: list[str]) -> None:
    for key, value in raw.items():
        if key in SECTIONS:
            if not isinstance(value, Mapping):
                problems.append(f"{key}: must be a section [{key}], got {format_value(value)}")
        elif isinstance(value, Mapping):
            close = did_you_mean(key, SECTIONS, "[").replace("?", "]?")
            problems.append(f"unknown section [{key}]{close or ' (sections: ' + ', '.join(SECTIONS) + ')'}")
        else:
            homes = [s for s in SECTIONS if key in (SETTINGS if s == "space" else _CHECKS[s])]
            hint = f"; did you mean {homes[0]}.{key} (under [{homes[0]}])?" if homes else ""
            problems.append(f"unknown key {key} at the top of the file{hint}")
    for path, example in _REQUIRED.items():
        section = path.split(".")[0]
        if section not in raw:
            problems.append(f"missing section [{section}]; add [{section}] with {example}")


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
    _check_top_level(raw, problems)
    tables = {s: raw[s] if isinstance(raw.get(s), Mapping) else {} for s in SECTIONS}
    values = _Values()
    for section in _CHECKS:
        _read_section(section, tables[section], isinstance(raw.get(section), Mapping), values, problems)
    space = parse_space(tables["space"], problems)
    _check_target(values, problems)
    _check_split(values, problems)
    _check_inputs(values, problems)
    _check_search(values, space, problems)
    if problems:
        raise SpecError(problems, path=path)
    given = values.given
    file = given["data"].pop("file")
    data = DataSection(file=(Path(base_dir) / Path(file).expanduser()).resolve(), file_as_written=file,
                       **given["data"])
    sections = {s: cls(**given[s]) for s, cls in _SECTION_TYPES.items() if s != "data"}
    return StudySpec(data=data, space=space, path=None if path is None else Path(path).resolve(), text=text,
                     **sections)


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


_ABSENT = object()


def diff_specs(a: Mapping, b: Mapping) -> list[str]:
    """Lines `section.key: old -> new` for every setting that differs between two `to_dict()` forms.

    Values compare by their JSON text, so 0 and 0.0 differ; a key on one side only shows as "(not set)".

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
