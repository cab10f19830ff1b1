"""optuna plumbing of a study: the engine's storage, and the sampler and pruner the study file names.

By default the engine's state is optuna's journal kept as a table of the record itself (`RecordJournal`,
through optuna's public `BaseJournalBackend`), so a study resumes from its record alone. A database URL
(`sqlite:///...`, `postgresql://...`) uses optuna's RDB storage instead, and a file path a journal file.
"""

from __future__ import annotations

import contextlib
import json
import threading
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import optuna
from optuna.storages import JournalStorage
from optuna.storages.journal import BaseJournalBackend, JournalFileBackend, JournalFileOpenLock

from sweep.errors import InputError
from sweep.record import Tracker
from sweep.search.pruning import PercentileRule
from sweep.study import StudySpec, grid_values

__all__ = ["RECORD_STORAGE", "RecordJournal", "RecordStorage", "close_storage", "default_storage_path", "make_pruner",
           "make_sampler", "open_storage", "percentile_rule"]

RECORD_STORAGE = "record"  # the engine's state kept in the record itself (the default)


def default_storage_path(record_path: Path) -> Path:
    """Where release 0.1 kept optuna's journal, beside the record: `studies/x.sqlite` -> `studies/x.optuna.log`."""
    return record_path.with_suffix(".optuna.log")


class RecordJournal(BaseJournalBackend):
    """optuna's journal kept in the record's engine log (`Tracker.append_engine_log`).

    Process-safe as optuna asks: each append is one write transaction of the record, and entries are
    numbered in commit order. One connection serves every thread of a process, one call at a time.
    """

    def __init__(self, record_path: str | Path):
        self.record_path = Path(record_path)
        self._lock = threading.Lock()
        self._tracker: Tracker | None = None

    def _open(self) -> Tracker:
        if self._tracker is None:
            self._tracker = Tracker.open(self.record_path, create=False, shared=True)
        return self._tracker

    def read_logs(self, log_number_from: int) -> list[dict]:
        with self._lock:
            entries = self._open().read_engine_log(log_number_from)
        return [json.loads(entry) for entry in entries]

    def append_logs(self, logs: list[dict]) -> None:
        entries = [json.dumps(log, separators=(",", ":")) for log in logs]
        with self._lock:
            self._open().append_engine_log(entries)

    @contextlib.contextmanager
    def exclusive(self) -> Iterator[None]:
        """Hold the record's write lock for a block: no other process appends until it ends."""
        with self._lock:
            tracker = self._open()
        with tracker.transaction():
            yield

    def close(self) -> None:
        """Close the connection (folding the record's WAL back into the file when it is the last one)."""
        with self._lock:
            if self._tracker is not None:
                self._tracker.close()
                self._tracker = None


class RecordStorage(JournalStorage):
    """optuna's journal storage on a record's engine log; `close()` closes its connection."""

    def __init__(self, record_path: str | Path):
        self.journal = RecordJournal(record_path)
        super().__init__(self.journal)

    def close(self) -> None:
        self.journal.close()

    def exclusive(self) -> contextlib.AbstractContextManager[None]:
        """Hold the record's write lock for a block (reading the study and asking a trial as one step)."""
        return self.journal.exclusive()


def close_storage(storage) -> None:
    """Close what a storage from `open_storage` holds open (the record's connection of a `RecordStorage`)."""
    if isinstance(storage, RecordStorage):
        storage.close()


def open_storage(url: str, *, record_path: str | Path | None = None):
    """An optuna storage: `RECORD_STORAGE` (the record at `record_path`), a URL (`sqlite:///...`,
    `postgresql://...`) or a journal file path.

    SQLite URLs get a 30 s busy timeout so several workers never see `database is locked`.

    Raises:
        InputError: a URL that cannot be parsed or reached, a database without its driver, or a
            journal path that is a folder or lies in a folder that does not exist.
    """
    if url == RECORD_STORAGE:
        if record_path is None:
            raise ValueError("open_storage(RECORD_STORAGE) needs record_path, the record file that holds the log")
        return RecordStorage(record_path)
    if "://" in url:
        import sqlalchemy.exc  # optuna's own dependency, behind its RDBStorage

        kwargs = {}
        if url.startswith("sqlite"):
            kwargs["engine_kwargs"] = {"connect_args": {"timeout": 30}}
        try:
            return optuna.storages.RDBStorage(url, **kwargs)
        except ImportError as exc:  # optuna: no driver installed for this kind of database
            raise InputError(f"optuna storage {url}: {str(exc).rstrip('.')}; install the database's driver, or "
                             "leave --storage out to keep the engine's state in the record") from exc
        except (sqlalchemy.exc.ArgumentError, sqlalchemy.exc.OperationalError) as exc:  # bad URL, or unreachable
            reason = str(exc).splitlines()[0]
            raise InputError(f"optuna storage {url} cannot be opened: {reason}; check the URL, or leave "
                             "--storage out to keep the engine's state in the record") from exc
    folder = Path(url).parent
    if Path(url).is_dir() or not folder.is_dir():
        what = "is a folder" if Path(url).is_dir() else f"folder {folder} does not exist"
        raise InputError(f"optuna journal {url}: {what}; give --storage a file in an existing folder "
                         "(or a database URL)")
    return JournalStorage(_JournalFile(url, JournalFileOpenLock(url)))


class _JournalFile(JournalFileBackend):
    """optuna's journal file, appended under its lock but without an fsync per line.

    A finished write is in the operating system's cache, so a killed worker loses nothing; only a
    crash of the machine itself can lose the last lines, the same promise the record's SQLite file
    makes (WAL with synchronous=NORMAL). The fsync was most of the engine's cost per trial.
    """

    def __init__(self, path: str, lock: JournalFileOpenLock):
        super().__init__(path, lock_obj=lock)
        self.path, self.lock = path, lock  # our own references: optuna's attributes are private

    def append_logs(self, logs) -> None:
        text = "\n".join(json.dumps(log, separators=(",", ":")) for log in logs) + "\n"
        self.lock.acquire()
        try:
            with open(self.path, "ab") as f:
                f.write(text.encode("utf-8"))
        finally:
            self.lock.release()


def make_sampler(spec: StudySpec, worker: int = 0):
    """The spec's sampler; each worker (an id unique in the record, from 1) gets its own seed.

    The seed is ``study seed x 1000 + worker - 1`` (release 0.1's rule, so a one-worker study draws the
    same settings); where that passes optuna's limit of 2**32 - 1, it is drawn from numpy's SeedSequence
    of (study seed, worker) instead, so every study seed >= 0 works.
    """
    search = spec.search
    seed = int(spec.study.seed) * 1000 + max(int(worker) - 1, 0)
    if seed > 2**32 - 1:
        seed = int(np.random.SeedSequence([int(spec.study.seed), int(worker)]).generate_state(1)[0])
    if search.sampler == "tpe":
        return optuna.samplers.TPESampler(seed=seed, n_startup_trials=search.startup_trials)
    if search.sampler == "random":
        return optuna.samplers.RandomSampler(seed=seed)
    if search.sampler == "qmc":
        return optuna.samplers.QMCSampler(seed=int(spec.study.seed), scramble=True)
    if search.sampler == "grid":
        return optuna.samplers.GridSampler(grid_values(spec.space), seed=seed)
    raise ValueError(f"unknown sampler {search.sampler!r}")


def make_pruner(spec: StudySpec):
    """The spec's pruner, deciding on the validation score reported after each epoch."""
    search = spec.search
    if search.pruner == "median":
        return optuna.pruners.MedianPruner(
            n_startup_trials=search.startup_trials, n_warmup_steps=search.warmup_epochs
        )
    if search.pruner == "halving":
        return optuna.pruners.SuccessiveHalvingPruner(
            min_resource=search.min_epochs, reduction_factor=search.reduction_factor
        )
    if search.pruner == "hyperband":
        return optuna.pruners.HyperbandPruner(
            min_resource=search.min_epochs,
            max_resource=spec.training.max_epochs,
            reduction_factor=search.reduction_factor,
        )
    if search.pruner == "none":
        return optuna.pruners.NopPruner()
    raise ValueError(f"unknown pruner {search.pruner!r}")


def percentile_rule(spec: StudySpec) -> PercentileRule | None:
    """The settings of the spec's pruner when it is a percentile rule (the median pruner), else None.

    `PruningView` applies such a rule itself, in constant time per epoch; `make_pruner` gives the same
    pruner as an optuna object.
    """
    if spec.search.pruner == "median":
        return PercentileRule(50.0, spec.search.startup_trials, spec.search.warmup_epochs)
    return None
