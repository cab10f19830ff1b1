"""The optuna study of a volsweep study: storage, sampler and pruner from the spec, worker processes, resume.

A run goes: spec -> price file (validated, fingerprinted) -> record (study, dataset copy, baselines, once)
-> optuna study -> workers. Each worker is a process with one BLAS thread; it rebuilds the study's arrays
from the copy of the rows kept in the record, so every worker trains on exactly what was recorded.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import optuna
from optuna.trial import TrialState

from sweep.errors import RecordError, RecordNotFound, StudyChanged, StudyNotFound
from sweep.record import BaselineRecord, DatasetRecord, StudyRecord, Tracker, TrialRecord, collect_provenance
from sweep.search.objective import trial_seed
from sweep.search.storage import RECORD_STORAGE, close_storage, default_storage_path, open_storage
from sweep.search.workers import WorkerPlan, count_states, run_inline, run_processes
from sweep.study import (
    WINDOW_NAMES, StudyInputs, StudySpec, compute_baselines, diff_specs, load_study_prices, prepare_folds,
    spec_from_text,
)
from trainers.data import PriceData, frame_to_csv_text

__all__ = ["RunSummary", "default_record_path", "run_study"]


@dataclass(frozen=True)
class RunSummary:
    """What a run did, for the CLI to print: finished trials by state (``counts``), the best objective, and
    the trials recovered from stopped workers."""

    study: str
    record_path: Path
    storage: str
    n_target: int
    counts: dict[str, int] = field(default_factory=dict)
    best: float | None = None
    interrupted: bool = False
    resumed: bool = False
    recovered: tuple[int, ...] = ()
    seconds: float = 0.0
    ran: dict[str, int] = field(default_factory=dict)  # trials this run finished, by state

    @property
    def all_failed(self) -> bool:
        """True when this run finished trials and every one of them failed."""
        return sum(self.ran.values()) > 0 and self.ran.get("complete", 0) + self.ran.get("pruned", 0) == 0


def default_record_path(spec_path: Path) -> Path:
    """`studies/x.toml` -> `studies/x.sqlite`."""
    return spec_path.with_suffix(".sqlite")


@dataclass(frozen=True)
class _NewStudy:
    """What a new study writes to the record, all computed before anything is written."""

    study: StudyRecord
    dataset: DatasetRecord
    baselines: list


def _new_study(spec: StudySpec, price_data: PriceData, storage_url: str) -> _NewStudy:
    folds = prepare_folds(spec, price_data.frame)
    frame = price_data.frame
    dataset = DatasetRecord(
        sha256=price_data.sha256,
        source=str(price_data.source),
        n_rows=len(frame),
        first_date=frame.index[0].date().isoformat(),
        last_date=frame.index[-1].date().isoformat(),
        columns=list(frame.columns),
        csv_text=frame_to_csv_text(frame),
        dropped=[str(p) for p in price_data.dropped],
    )
    prov = collect_provenance()
    study = StudyRecord(
        name=spec.study.name,
        spec_text=spec.text,
        spec_hash=spec.spec_hash(),
        search_hash=spec.search_hash(),
        dataset_sha256=price_data.sha256,
        objective=spec.study.objective,
        direction="minimize",
        task=spec.target.task,
        storage=storage_url,
        sampler=spec.search.sampler,
        pruner=spec.search.pruner,
        settings=_window_settings(folds),
        **prov,
    )
    baselines = [
        BaselineRecord(
            study=spec.study.name,
            name=b.name,
            window=b.window,
            objective=b.objective,
            losses=b.losses,
            params=b.params,
            forecasts=b.forecasts,
        )
        for b in compute_baselines(spec, folds)
    ]
    return _NewStudy(study, dataset, baselines)


def _window_settings(folds: list[StudyInputs]) -> dict:
    """Rows per window, as the board's header shows them; with folds, every fold's too."""
    sizes = [{w: len(getattr(f.windows, w)) for w in WINDOW_NAMES} for f in folds]
    if len(sizes) == 1:
        return {"windows": sizes[0]}
    return {"windows": {"train": sizes[-1]["train"], "valid": sum(s["valid"] for s in sizes),
                        "test": sizes[-1]["test"]}, "folds": sizes}


def _check_unchanged(old: StudyRecord, spec: StudySpec, sha256: str) -> None:
    problems = []
    if old.dataset_sha256 != sha256:
        problems.append(f"data: the price file's SHA-256 changed ({old.dataset_sha256[:12]} -> {sha256[:12]})")
    if old.search_hash != spec.search_hash():
        old_spec = spec_from_text(old.spec_text).to_dict()
        problems.extend(diff_specs(old_spec, spec.to_dict()) or ["search settings changed"])
    if problems:
        lines = "\n  ".join(problems)
        raise StudyChanged(
            f"study {spec.study.name!r} was recorded with different settings:\n  {lines}\n"
            "restore the study file, or start a new study with --name NEW_NAME"
        )


def _recover_orphans(study: optuna.Study, storage, tracker: Tracker, spec: StudySpec, reason: str) -> list[int]:
    """Trials left RUNNING by a worker that died: fail them, record why, and queue their settings again.

    A trial is taken from its worker only when that worker is known dead (`Tracker.worker_is_dead`: it
    ended, its process is gone from this host, or its heartbeat is older than the grace period); a trial
    with no worker mark was not asked by a volsweep worker of this release and counts as left behind.
    A worker that died after writing a trial's record but before telling optuna left a finished trial:
    optuna is then told what the record says, and nothing is run again.
    """
    numbers = []
    recorded = {r.number: r for r in tracker.load_trials(spec.study.name, states=("complete", "pruned"))}
    for t in study.get_trials(deepcopy=False, states=(TrialState.RUNNING,)):
        worker = t.user_attrs.get("worker")
        if worker is not None and not tracker.worker_is_dead(worker):
            continue  # another live process is training it
        done = recorded.get(t.number)
        if done is not None:
            if done.state == "complete" and done.objective is not None:
                study.tell(t.number, done.objective)
            else:
                study.tell(t.number, state=TrialState.PRUNED)
            continue
        # marked like an interrupted trial: it does not use up the budget, its retry does
        study_id = storage.get_study_id_from_name(study.study_name)
        storage.set_trial_user_attr(storage.get_trial_id_from_study_id_trial_number(study_id, t.number),
                                    "interrupted", True)
        study.tell(t.number, state=TrialState.FAIL)
        numbers.append(t.number)
        tracker.record_trial(
            TrialRecord(
                study=spec.study.name,
                number=t.number,
                state="failed",
                params=dict(t.params),
                seed=trial_seed(spec.study.seed, t.number),
                best_epoch=0,
                n_epochs=len(t.intermediate_values),
                stop_reason="error",
                started=t.datetime_start.isoformat() if t.datetime_start else None,
                error=f"{reason}; its settings were queued again and run next",
            )
        )
        if t.params:
            study.enqueue_trial(dict(t.params), user_attrs={"retry_of": t.number}, skip_if_exists=False)
    return numbers


def _adopt_journal_file(storage, old: StudyRecord, record_path: Path, tracker: Tracker) -> None:
    """Copy a release-0.1 study's engine state from its journal file into the record, once.

    Release 0.1 kept optuna's journal in a file beside the record (`x.optuna.log`). Only that file, beside
    the record, is read: a path recorded elsewhere may be another copy's journal that has moved on. Its
    study is copied whole (`optuna.copy_study`: the same trials in the same order, states and values).

    Raises:
        RecordError: the record holds trials of the study but neither the record nor the journal file beside
            it holds the engine's state of them (resuming would start the study again and overwrite them).
    """
    name = old.name
    if name in optuna.get_all_study_names(storage):
        return
    beside = default_storage_path(record_path)
    if beside.is_file():
        journal = open_storage(str(beside))
        if name in optuna.get_all_study_names(journal):
            optuna.copy_study(from_study_name=name, from_storage=journal, to_storage=storage)
            return
    if tracker.load_trials(name):
        recorded = f" (the record names {old.storage})" if old.storage and Path(old.storage) != beside else ""
        raise RecordError(
            f"the engine's state of study {name!r} is not in {record_path}, and the journal file that held it, "
            f"{beside}, is not there{recorded}; put that file back beside the record and run again, or run the "
            "study file as a new study with --name NEW_NAME (the recorded trials are kept either way)"
        )


def _find_study(tracker: Tracker | None, name: str) -> StudyRecord | None:
    if tracker is None:
        return None
    try:
        return tracker.find_study(name)
    except StudyNotFound:
        return None


def run_study(
    spec: StudySpec,
    *,
    record_path: Path,
    storage: str | None = None,
    n_trials: int | None = None,
    n_workers: int | None = None,
    on_event: Callable[[object, dict], None] | None = None,
) -> RunSummary:
    """Create or resume a study and run its trials.

    Args:
        spec: the parsed study file.
        record_path: the SQLite record (created if missing).
        storage: optuna storage URL or journal file; default the record itself (`RECORD_STORAGE`). A study
            of release 0.1 kept its state in a journal file beside the record; it is copied into the
            record on its first resume (the file is left as it was).
        n_trials: total trials the study should reach (default the spec's).
        n_workers: worker processes (default the spec's); 1 runs in this process.
        on_event: called with ("start", finished trials) before the first trial, then with each
            TrialOutcome (or a ("crash", worker, text) tuple), each time with the current counts.

    Returns:
        A RunSummary.

    Raises:
        DataError, SpecError, StudyChanged, InputError (a storage that cannot be opened), RecordError,
        RecordNotFound: nothing is run or written in those cases (a new record file is not created).
    """
    t0 = time.perf_counter()
    record_path = Path(record_path)
    storage_url = storage or RECORD_STORAGE
    n_target = int(n_trials if n_trials is not None else spec.study.trials)
    n_workers = int(n_workers if n_workers is not None else spec.study.workers)
    if not record_path.parent.is_dir():
        raise RecordNotFound(f"cannot create {record_path}: folder {record_path.parent} does not exist; "
                             "create it first")
    price_data = load_study_prices(spec)

    # Everything that can fail on the study's settings or data runs before the record is written.
    tracker = Tracker.open(record_path) if record_path.exists() else None
    storage_object = None
    try:
        old = _find_study(tracker, spec.study.name)
        new = None
        if old is not None:
            _check_unchanged(old, spec, price_data.sha256)
            storage_url = storage or (old.storage if old.storage and "://" in old.storage else RECORD_STORAGE)
        else:
            new = _new_study(spec, price_data, storage_url)
        optuna.logging.set_verbosity(optuna.logging.WARNING)
        if storage_url != RECORD_STORAGE:
            storage_object = open_storage(storage_url)  # a URL or file that cannot be opened fails here
        if tracker is None:
            tracker = Tracker.open(record_path)
        if new is not None:  # the study, its data rows and its baselines: one transaction, all or nothing
            with tracker.transaction():
                tracker.save_study(new.study, new.dataset)
                tracker.record_baselines(new.baselines)
        if storage_url == RECORD_STORAGE:
            storage_object = open_storage(RECORD_STORAGE, record_path=record_path)
            if old is not None:
                _adopt_journal_file(storage_object, old, record_path, tracker)
        return _run(spec, tracker, storage_object, storage_url, record_path, n_target, n_workers, on_event,
                    resumed=old is not None, t0=t0)
    finally:
        close_storage(storage_object)
        if tracker is not None:
            tracker.close()  # folds the WAL back into the file: the .sqlite alone is the whole record


def _run(spec: StudySpec, tracker: Tracker, storage_object, storage_url: str, record_path: Path, n_target: int,
         n_workers: int, on_event, *, resumed: bool, t0: float) -> RunSummary:
    """Run the study's remaining trials and sum up (the record and the engine's storage are open)."""
    study = optuna.create_study(study_name=spec.study.name, storage=storage_object, direction="minimize",
                                load_if_exists=True)
    reason = "the worker running this trial stopped before it finished"
    recovered = _recover_orphans(study, storage_object, tracker, spec, reason)
    before = count_states(study)
    if on_event:
        on_event(("start", sum(before.values())), before)
    interrupted = False
    remaining = max(0, n_target - sum(before.values()))
    if remaining:
        plan = WorkerPlan(str(record_path), storage_url, spec.study.name, 0, n_target)
        try:
            if n_workers <= 1:
                run_inline(plan, remaining, study, on_event)
            else:
                run_processes(plan, remaining, n_workers, study, on_event)
        except KeyboardInterrupt:
            interrupted = True
        recovered += _recover_orphans(study, storage_object, tracker, spec, reason)
    completed = study.get_trials(deepcopy=False, states=(TrialState.COMPLETE,))
    counts = count_states(study)
    return RunSummary(spec.study.name, record_path, storage_url, n_target, counts=counts,
                      ran={state: counts[state] - before[state] for state in counts},
                      best=min((t.value for t in completed), default=None), interrupted=interrupted,
                      resumed=resumed, recovered=tuple(recovered), seconds=time.perf_counter() - t0)


