"""optuna plumbing of a study: the storage behind a URL or journal path, and the sampler and pruner
the study file names."""

from __future__ import annotations

import json
from pathlib import Path

import optuna
from optuna.storages import JournalStorage
from optuna.storages.journal import JournalFileBackend, JournalFileOpenLock

from sweep.errors import InputError
from sweep.search.pruning import PercentileRule
from sweep.study import StudySpec, grid_values

__all__ = ["default_storage_path", "make_pruner", "make_sampler", "open_storage", "percentile_rule"]


def default_storage_path(record_path: Path) -> Path:
    """The optuna journal beside the record: `studies/x.sqlite` -> `studies/x.optuna.log`."""
    return record_path.with_suffix(".optuna.log")


def open_storage(url: str):
    """An optuna storage from a URL (`sqlite:///...`, `postgresql://...`) or a journal file path.

    SQLite gets a 30 s busy timeout so several workers never see `database is locked`.

    Raises:
        InputError: a URL that cannot be parsed or reached, a database without its driver, or a
            journal path that is a folder or lies in a folder that does not exist.
    """
    if "://" in url:
        import sqlalchemy.exc  # optuna's own dependency, behind its RDBStorage

        kwargs = {}
        if url.startswith("sqlite"):
            kwargs["engine_kwargs"] = {"connect_args": {"timeout": 30}}
        try:
            return optuna.storages.RDBStorage(url, **kwargs)
        except ImportError as exc:  # optuna: no driver installed for this kind of database
            raise InputError(f"optuna storage {url}: {str(exc).rstrip('.')}; install the database's driver, or "
                             "leave --storage out to use a journal file beside the record") from exc
        except (sqlalchemy.exc.ArgumentError, sqlalchemy.exc.OperationalError) as exc:  # bad URL, or unreachable
            reason = str(exc).splitlines()[0]
            raise InputError(f"optuna storage {url} cannot be opened: {reason}; check the URL, or leave "
                             "--storage out to use a journal file beside the record") from exc
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
    """The spec's sampler; each worker gets its own seed derived from the study seed."""
    search = spec.search
    seed = int(spec.study.seed) * 1000 + worker
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
