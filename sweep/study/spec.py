"""A study file's settings: its sections as frozen dataclasses, `StudySpec`, and the lists of allowed names.

`sweep.study.reader` reads a file into these after the checks of `sweep.study.checks` pass.
"""

from __future__ import annotations

import hashlib
import json
import re
from collections.abc import Mapping
from dataclasses import dataclass, field, fields, replace
from pathlib import Path
from typing import Any

from sweep.errors import SpecError
from sweep.study.space import FrozenMap, format_value
from trainers.baselines import BASELINES, HAR_MIN_ROWS

OBJECTIVES = {"regression": ("qlike", "mse_log", "mse"), "classification": ("deviance",)}
SAMPLERS = ("tpe", "random", "qmc", "grid")
PRUNERS = ("median", "halving", "hyperband", "none")
PRICE_COLUMNS = ("date", "open", "high", "low", "close")
SECTIONS = ("study", "data", "target", "features", "split", "search", "space", "training", "baselines")
NAME_PATTERN = re.compile(r"[A-Za-z0-9_.-]{1,100}")

__all__ = [
    "HAR_MIN_ROWS", "NAME_PATTERN", "OBJECTIVES", "PRICE_COLUMNS", "PRUNERS", "SAMPLERS", "SECTIONS", "SECTION_TYPES",
    "BaselineSection", "DataSection", "FeatureSection", "SearchSection", "SplitSection", "StudySection",
    "StudySpec", "TargetSection", "TrainingSection", "canonical_json", "check_name",
]


def check_name(path: str, value, problems: list[str]):
    """The study name if it is 1-100 letters, digits, '-', '_' or '.'; else None after recording a problem."""
    if isinstance(value, str) and NAME_PATTERN.fullmatch(value) and value.strip("."):
        return value
    problems.append(f"{path}: must be 1-100 letters, digits, '-', '_' or '.', got {format_value(value)}; "
                    'e.g. name = "harbor-demo"')
    return None


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


SECTION_TYPES = {"study": StudySection, "data": DataSection, "target": TargetSection,
                  "features": FeatureSection, "split": SplitSection, "search": SearchSection,
                  "training": TrainingSection, "baselines": BaselineSection}


def canonical_json(value: Any) -> str:
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
        check_name("study.name", name, problems)
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
        return hashlib.sha256(canonical_json({k: d[k] for k in keep}).encode()).hexdigest()

    def spec_hash(self) -> str:
        """sha256 of every setting (`to_dict`): comments, layout and key order do not count."""
        return hashlib.sha256(canonical_json(self.to_dict()).encode()).hexdigest()
