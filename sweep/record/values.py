"""The record's value objects: what the tracker writes and reads back, with no SQL.

Every record is a frozen dataclass holding plain Python values (``int``, ``float``, ``str``,
``bool``, ``None``, lists and dicts of them); numpy arrays appear only where a field says so
(validation forecasts, network weights, baseline forecasts). ``__post_init__`` turns numpy
scalars into Python numbers (SQLite and JSON cannot take them as they are) and checks the
fields whose values come from a fixed list.

Array fields are left out of ``==`` (``field(compare=False)``): compare them with
``np.testing.assert_array_equal``.

Example:
    >>> row = EpochRow(epoch=1, train_loss=0.5, valid_loss=0.6, valid_score=None, seconds=0.01)
    >>> TrialRecord(study="s", number=0, state="running", params={"hidden": 16}).state
    'running'
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from datetime import datetime, timezone
from typing import Any

import numpy as np

__all__ = [
    "BASELINE_WINDOWS",
    "COMPARISON_WINDOWS",
    "DIRECTIONS",
    "STOP_REASONS",
    "TRIAL_STATES",
    "BaselineRecord",
    "ComparisonRecord",
    "ConfirmRecord",
    "DatasetRecord",
    "EpochRow",
    "HoldoutRecord",
    "NoteRecord",
    "StudyRecord",
    "TrialRecord",
    "check_weights",
    "finite_or_none",
    "format_number",
    "is_finite",
    "plain",
    "utc_now",
]

TRIAL_STATES = ("complete", "pruned", "failed", "running")
STOP_REASONS = ("patience", "max_epochs", "diverged", "stopped", "pruned", "error")
DIRECTIONS = ("minimize", "maximize")
BASELINE_WINDOWS = ("valid", "test")
COMPARISON_WINDOWS = BASELINE_WINDOWS


def utc_now() -> str:
    """The current time as ISO 8601 text in UTC, to the second: ``2026-01-31T09:15:02+00:00``."""
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


def finite_or_none(value: Any) -> float | None:
    """``value`` as a float when it is a finite number (not a bool), else None.

    Example:
        >>> finite_or_none(np.float32(0.5)), finite_or_none(float("nan")), finite_or_none("0.5")
        (0.5, None, None)
    """
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, float, np.integer, np.floating)):
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def is_finite(value: Any) -> bool:
    """True for a finite number that is not a bool (``finite_or_none(value) is not None``)."""
    return finite_or_none(value) is not None


def format_number(value: Any, digits: int = 4, *, missing: str = "-") -> str:
    """A value as tables and the board show it: floats to ``digits`` significant digits, ``missing`` for
    None and non-finite floats, anything else as ``str``.

    Example:
        >>> format_number(0.123456), format_number(float("nan")), format_number(None, missing="–"), format_number(7)
        ('0.1235', '-', '–', '7')
    """
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return missing
    if isinstance(value, float):
        return f"{value:.{digits}g}"
    return str(value)


def plain(value: Any) -> Any:
    """``value`` with numpy scalars and arrays turned into Python numbers and lists.

    Dicts keep their keys (made ``str``); tuples become lists, as JSON would return them.

    Example:
        >>> plain({"lr": np.float32(0.5), "hidden": (np.int64(8), 4)})
        {'lr': 0.5, 'hidden': [8, 4]}
    """
    if isinstance(value, dict):
        return {str(k): plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, np.generic):
        return value.item()
    return value


def _check_choice(record: str, name: str, value: Any, allowed: tuple, *, optional=False) -> None:
    if optional and value is None:
        return
    if value not in allowed:
        listed = ", ".join(repr(a) for a in allowed) + (" or None" if optional else "")
        raise ValueError(f"{record}.{name} must be one of {listed}; got {value!r}")


def _set(obj: Any, name: str, value: Any) -> None:
    object.__setattr__(obj, name, value)


def _as_int(obj: Any, name: str, *, minimum: int | None = None, optional=False) -> None:
    value = getattr(obj, name)
    if optional and value is None:
        return
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, np.integer)):
        raise TypeError(f"{type(obj).__name__}.{name} must be an int; got {value!r} ({type(value).__name__})")
    value = int(value)
    if minimum is not None and value < minimum:
        raise ValueError(f"{type(obj).__name__}.{name} must be at least {minimum}; got {value}")
    _set(obj, name, value)


def _as_float(obj: Any, name: str, *, optional=False) -> None:
    value = getattr(obj, name)
    if optional and value is None:
        return
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise TypeError(f"{type(obj).__name__}.{name} must be a number; got {value!r} ({type(value).__name__})")
    _set(obj, name, float(value))


def _as_plain(obj: Any, *names: str) -> None:
    for name in names:
        _set(obj, name, plain(getattr(obj, name)))


def _as_array2d(obj: Any, name: str, *, optional=False) -> None:
    value = getattr(obj, name)
    if optional and value is None:
        return
    array = np.asarray(value, dtype=np.float64)
    if array.ndim != 2:
        raise ValueError(
            f"{type(obj).__name__}.{name} must be a 2-d array (n_rows, n_outputs); got shape "
            f"{array.shape}; reshape a single output with .reshape(-1, 1)"
        )
    _set(obj, name, array)


@dataclass(frozen=True)
class StudyRecord:
    """One study: the spec it ran from, the code and machine it ran on, and the engine settings."""

    name: str
    spec_text: str
    spec_hash: str
    search_hash: str
    created: str
    code_version: str
    git_commit: str | None
    packages: dict[str, str]
    python: str
    platform: str
    machine: str
    dataset_sha256: str
    objective: str
    direction: str = "minimize"
    task: str = "regression"
    storage: str | None = None
    sampler: str = ""
    pruner: str = ""
    settings: dict = field(default_factory=dict)

    def __post_init__(self):
        if not isinstance(self.name, str) or not self.name.strip():
            raise ValueError(f"StudyRecord.name must be a non-empty string; got {self.name!r}")
        _check_choice("StudyRecord", "direction", self.direction, DIRECTIONS)
        _as_plain(self, "packages", "settings")


@dataclass(frozen=True)
class DatasetRecord:
    """The validated price rows a study used, kept whole (``csv_text``) so a copied file can replay."""

    sha256: str
    source: str
    n_rows: int
    first_date: str
    last_date: str
    columns: list[str]
    csv_text: str
    dropped: list[str] = field(default_factory=list)

    def __post_init__(self):
        _as_int(self, "n_rows", minimum=0)
        _set(self, "columns", [str(c) for c in self.columns])
        _set(self, "dropped", [str(d) for d in self.dropped])


@dataclass(frozen=True)
class EpochRow:
    """One epoch of a trial's learning curve (``epoch`` is 1-based; ``fold`` is the walk-forward
    fold it belongs to, 0 for a study with one split)."""

    epoch: int
    train_loss: float
    valid_loss: float
    valid_score: float | None = None
    seconds: float = 0.0
    fold: int = 0

    def __post_init__(self):
        _as_int(self, "epoch", minimum=1)
        _as_int(self, "fold", minimum=0)
        _as_float(self, "train_loss")
        _as_float(self, "valid_loss")
        _as_float(self, "valid_score", optional=True)
        _as_float(self, "seconds")


@dataclass(frozen=True)
class TrialRecord:
    """Everything about one trial, handed over whole and written in one transaction.

    ``gap`` is ``valid_loss - train_loss`` at the best epoch and ``gap_ratio`` their ratio.
    ``valid_forecasts`` has shape (n_valid, n_outputs), float64; ``weights`` holds the network's
    arrays (finalists only).
    """

    study: str
    number: int
    state: str
    params: dict
    seed: list[int] = field(default_factory=list)
    best_epoch: int = 0
    n_epochs: int = 0
    stop_reason: str | None = None
    objective: float | None = None
    train_loss: float | None = None
    valid_loss: float | None = None
    gap: float | None = None
    gap_ratio: float | None = None
    started: str | None = None
    finished: str | None = None
    seconds: float = 0.0
    error: str | None = None
    epochs: tuple[EpochRow, ...] = ()
    valid_forecasts: np.ndarray | None = field(default=None, compare=False)
    weights: dict[str, np.ndarray] | None = field(default=None, compare=False)
    worker: str = ""

    def __post_init__(self):
        _check_choice("TrialRecord", "state", self.state, TRIAL_STATES)
        _check_choice("TrialRecord", "stop_reason", self.stop_reason, STOP_REASONS, optional=True)
        _as_int(self, "number", minimum=0)
        _as_int(self, "best_epoch", minimum=0)
        _as_int(self, "n_epochs", minimum=0)
        for name in ("objective", "train_loss", "valid_loss", "gap", "gap_ratio"):
            _as_float(self, name, optional=True)
        _as_float(self, "seconds")
        _as_plain(self, "params")
        seed = plain(self.seed)
        seed = [seed] if isinstance(seed, int) else seed
        if not all(isinstance(s, int) and not isinstance(s, bool) for s in seed):
            raise TypeError(f"TrialRecord.seed must be a list of ints such as [study_seed, number]; got {self.seed!r}")
        _set(self, "seed", seed)
        epochs = tuple(self.epochs)
        if not all(isinstance(e, EpochRow) for e in epochs):
            raise TypeError("TrialRecord.epochs must hold EpochRow objects; build them with EpochRow(epoch=..., ...)")
        _set(self, "epochs", epochs)
        _as_array2d(self, "valid_forecasts", optional=True)
        if self.weights is not None:
            _set(self, "weights", check_weights("TrialRecord.weights", self.weights))

    def without_arrays(self) -> TrialRecord:
        """A copy with ``valid_forecasts`` and ``weights`` dropped (for light listings)."""
        return dataclasses.replace(self, valid_forecasts=None, weights=None)


def check_weights(where: str, arrays: Any) -> dict[str, np.ndarray]:
    if not isinstance(arrays, dict):
        raise TypeError(f"{where} must be a dict of name -> numpy array; got {type(arrays).__name__}")
    checked = {}
    for key, value in arrays.items():
        array = np.asarray(value)
        if not isinstance(key, str) or not key:
            raise TypeError(f"{where} keys must be non-empty strings; got {key!r}")
        if array.dtype.hasobject:
            raise TypeError(
                f"{where}[{key!r}] has dtype object, which cannot be stored without pickle; "
                "store numbers or fixed-width strings (e.g. Network.to_arrays())"
            )
        checked[key] = array
    return checked


@dataclass(frozen=True)
class BaselineRecord:
    """One baseline's forecasts and losses on one window ("valid" or "test")."""

    study: str
    name: str
    window: str
    objective: float | None
    losses: dict[str, float]
    params: dict
    forecasts: np.ndarray = field(compare=False)

    def __post_init__(self):
        _check_choice("BaselineRecord", "window", self.window, BASELINE_WINDOWS)
        _as_float(self, "objective", optional=True)
        _as_plain(self, "losses", "params")
        _as_array2d(self, "forecasts")


@dataclass(frozen=True)
class HoldoutRecord:
    """A look at the test window. ``sequence`` is 1 for the first; None lets the tracker number it."""

    study: str
    trial: int
    created: str
    command: str
    again: bool
    results: dict[str, dict]
    sequence: int | None = None

    def __post_init__(self):
        _as_int(self, "trial", minimum=0)
        _as_int(self, "sequence", minimum=1, optional=True)
        _set(self, "again", bool(self.again))
        _as_plain(self, "results")


@dataclass(frozen=True)
class ConfirmRecord:
    """A trial retrained on fresh seeds: one objective and gap per seed, and their summary."""

    study: str
    trial: int
    created: str
    seeds: list
    objectives: list[float]
    gaps: list[float]
    summary: dict
    extra: dict = field(default_factory=dict)

    def __post_init__(self):
        _as_int(self, "trial", minimum=0)
        _as_plain(self, "seeds", "objectives", "gaps", "summary", "extra")
        if not len(self.seeds) == len(self.objectives) == len(self.gaps):
            raise ValueError(
                "ConfirmRecord.seeds, objectives and gaps must have one entry per seed; got lengths "
                f"{len(self.seeds)}, {len(self.objectives)}, {len(self.gaps)}"
            )


@dataclass(frozen=True)
class NoteRecord:
    """A decision note; ``trial`` None means a note on the whole study. Notes are never overwritten."""

    study: str
    trial: int | None
    created: str
    text: str
    author: str | None = None

    def __post_init__(self):
        _as_int(self, "trial", minimum=0, optional=True)
        if not isinstance(self.text, str) or not self.text.strip():
            raise ValueError(f"NoteRecord.text must be non-empty text; got {self.text!r}")



@dataclass(frozen=True)
class ComparisonRecord:
    """Forecast comparison tests on one window (Diebold-Mariano, confidence set, SPA); never overwritten.

    ``results`` is the JSON-able summary of ``sweep.review.compare_forecasts``
    (``ComparisonReport.results_dict()``); ``sequence`` is 1 for the study's first comparison, None lets the
    tracker number it.
    """

    study: str
    created: str
    window: str
    command: str
    results: dict
    sequence: int | None = None

    def __post_init__(self):
        _check_choice("ComparisonRecord", "window", self.window, COMPARISON_WINDOWS)
        _as_int(self, "sequence", minimum=1, optional=True)
        _as_plain(self, "results")
