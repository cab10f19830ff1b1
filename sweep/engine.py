"""The optuna study of a volsweep study: storage, sampler and pruner from the spec, worker processes, resume.

A run goes: spec -> price file (validated, fingerprinted) -> record (study, dataset copy, baselines, once)
-> optuna study -> workers. Each worker is a process with one BLAS thread; it rebuilds the study's arrays
from the copy of the rows kept in the record, so every worker trains on exactly what was recorded.
"""

from __future__ import annotations

import multiprocessing as mp
import queue
import signal
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import optuna
from optuna.trial import TrialState

from sweep.errors import VolsweepError
from sweep.inputs import StudyInputs, compute_baselines, prepare_folds
from sweep.objective import run_trial, trial_seed
from sweep.provenance import collect_provenance
from sweep.pruning import PruningView
from sweep.records import BaselineRecord, DatasetRecord, StudyRecord, TrialRecord
from sweep.spec import StudySpec, diff_specs, parse_spec
from sweep.storage import default_storage_path, make_pruner, make_sampler, open_storage
from sweep.tracker import StudyNotFound, Tracker
from trainers.data import PriceFileError, frame_to_csv_text, load_prices, read_prices_csv_text

__all__ = [
    "StudyChanged",
    "RunSummary",
    "default_record_path",
    "default_storage_path",
    "open_storage",
    "make_sampler",
    "make_pruner",
    "run_study",
    "inputs_from_record",
    "folds_from_record",
    "spec_from_record",
]

FINISHED_STATES = (TrialState.COMPLETE, TrialState.PRUNED, TrialState.FAIL)
POLL_SECONDS = 0.2


class StudyChanged(VolsweepError):
    """The study file changed (data or search) since the study was created."""


class DataError(VolsweepError):
    """The price file of a study has problems."""


@dataclass
class RunSummary:
    """What a run did, for the CLI to print."""

    study: str
    record_path: Path
    storage: str
    n_target: int
    counts: dict = field(default_factory=dict)
    best: float | None = None
    interrupted: bool = False
    resumed: bool = False
    recovered: list = field(default_factory=list)
    seconds: float = 0.0


def default_record_path(spec_path: Path) -> Path:
    """`studies/x.toml` -> `studies/x.sqlite`."""
    return spec_path.with_suffix(".sqlite")


def spec_from_record(study: StudyRecord) -> StudySpec:
    """The spec a recorded study ran with, under the recorded name."""
    spec = parse_spec(study.spec_text, base_dir=Path("."))
    return spec.with_name(study.name) if spec.study.name != study.name else spec


def folds_from_record(tracker: Tracker, study: StudyRecord) -> tuple[StudySpec, list[StudyInputs]]:
    """Rebuild a study's spec and the arrays of every fold from the record alone (no price file needed)."""
    spec = spec_from_record(study)
    dataset = tracker.load_dataset(study.dataset_sha256)
    frame = read_prices_csv_text(dataset.csv_text)
    return spec, prepare_folds(spec, frame)


def inputs_from_record(tracker: Tracker, study: StudyRecord) -> tuple[StudySpec, StudyInputs]:
    """The spec and the final model's arrays (the single split, or the latest fold) from the record."""
    spec, folds = folds_from_record(tracker, study)
    return spec, folds[-1]


def _min_rows(spec: StudySpec) -> int:
    """Fewest price rows a study can use: warm-up of its longest look-back, its longest horizon and
    room for three windows with their embargo gaps."""
    look_back = max((*spec.features.har_windows, *spec.features.extra_lags, 22), default=22)
    if spec.target.estimator == "yang_zhang":
        look_back += spec.target.yang_zhang_window
    return look_back + max(spec.target.horizons) + 3 * spec.split.embargo + 30




def _load_price_data(spec: StudySpec):
    try:
        return load_prices(
            spec.data.file,
            columns=dict(spec.data.columns),
            bad_rows=spec.data.bad_rows,
            min_rows=_min_rows(spec),
        )
    except PriceFileError as exc:
        raise DataError(f"{exc}\nfix the file, or set data.bad_rows = \"drop\" to drop bad rows") from exc


def _create_study(tracker: Tracker, spec: StudySpec, price_data, storage_url: str) -> None:
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
    tracker.save_study(study, dataset)
    tracker.record_baselines(baselines)


def _window_settings(folds: list[StudyInputs]) -> dict:
    """Rows per window, as the board's header shows them; with folds, every fold's too."""
    sizes = [{w: len(getattr(f.windows, w)) for w in ("train", "valid", "test")} for f in folds]
    if len(sizes) == 1:
        return {"windows": sizes[0]}
    return {"windows": {"train": sizes[-1]["train"], "valid": sum(s["valid"] for s in sizes),
                        "test": sizes[-1]["test"]}, "folds": sizes}


def _check_unchanged(old: StudyRecord, spec: StudySpec, sha256: str) -> None:
    problems = []
    if old.dataset_sha256 != sha256:
        problems.append(f"data: the price file's SHA-256 changed ({old.dataset_sha256[:12]} -> {sha256[:12]})")
    if old.search_hash != spec.search_hash():
        old_spec = parse_spec(old.spec_text, base_dir=Path(".")).to_dict()
        problems.extend(diff_specs(old_spec, spec.to_dict()) or ["search settings changed"])
    if problems:
        lines = "\n  ".join(problems)
        raise StudyChanged(
            f"study {spec.study.name!r} was recorded with different settings:\n  {lines}\n"
            "restore the study file, or start a new study with --name NEW_NAME"
        )


def _recover_orphans(study: optuna.Study, tracker: Tracker, spec: StudySpec, reason: str) -> list[int]:
    """Trials left RUNNING by a worker that died: fail them, record why, and queue their settings again.

    A worker that died after writing a trial's record but before telling optuna left a finished trial:
    optuna is then told what the record says, and nothing is run again.
    """
    numbers = []
    recorded = {r.number: r for r in tracker.load_trials(spec.study.name, states=("complete", "pruned"))}
    for t in study.get_trials(deepcopy=False, states=(TrialState.RUNNING,)):
        done = recorded.get(t.number)
        if done is not None:
            if done.state == "complete" and done.objective is not None:
                study.tell(t.number, done.objective)
            else:
                study.tell(t.number, state=TrialState.PRUNED)
            continue
        # marked like an interrupted trial: it does not use up the budget, its retry does
        study._storage.set_trial_user_attr(t._trial_id, "interrupted", True)
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


def _n_finished(study: optuna.Study) -> int:
    return sum(
        1
        for t in study.get_trials(deepcopy=False, states=FINISHED_STATES)
        if not t.user_attrs.get("interrupted")
    )


def _counts(study: optuna.Study) -> dict:
    counts = {"complete": 0, "pruned": 0, "failed": 0}
    for t in study.get_trials(deepcopy=False, states=FINISHED_STATES):
        key = {TrialState.COMPLETE: "complete", TrialState.PRUNED: "pruned"}.get(t.state, "failed")
        counts[key] += 1
    return counts


@dataclass(frozen=True)
class _WorkerPlan:
    record_path: str
    storage_url: str
    study_name: str
    worker: int


def _limit_threads():
    from threadpoolctl import threadpool_limits

    return threadpool_limits(limits=1)


def _worker_loop(plan: _WorkerPlan, claim: Callable[[], bool], stop, report) -> None:
    tracker = Tracker.open(plan.record_path, create=False)
    study_record = tracker.find_study(plan.study_name)
    spec, folds = folds_from_record(tracker, study_record)
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    study = optuna.load_study(
        study_name=plan.study_name,
        storage=open_storage(plan.storage_url),
        sampler=make_sampler(spec, plan.worker),
    )
    view = PruningView(make_pruner(spec), epochs_per_fold=spec.training.max_epochs)
    while not stop.is_set() and claim():
        outcome = run_trial(study, spec, folds, tracker, view, stop=stop)
        report(outcome)
        if outcome.state == "interrupted":
            raise KeyboardInterrupt


def _claim_slot(slots) -> bool:
    """Take one trial from the shared budget; False when none is left."""
    with slots.get_lock():
        if slots.value <= 0:
            return False
        slots.value -= 1
        return True


def _worker_main(plan: _WorkerPlan, slots, stop, events) -> None:
    """Entry point of one worker process."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the main process decides when to stop
    _limits = _limit_threads()  # noqa: F841  (kept alive for the life of the process)
    try:
        _worker_loop(plan, lambda: _claim_slot(slots), stop, events.put)
    except KeyboardInterrupt:
        return
    except Exception as exc:  # a crash outside a trial: tell the main process, then end
        events.put(("crash", plan.worker, f"{type(exc).__name__}: {exc}"))
        raise


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
        storage: optuna storage URL or journal path; default a journal beside the record.
        n_trials: total trials the study should reach (default the spec's).
        n_workers: worker processes (default the spec's); 1 runs in this process.
        on_event: called with each TrialOutcome (or a crash tuple) and the current counts.

    Returns:
        A RunSummary.

    Raises:
        DataError, StudyChanged: nothing is run or written in those cases.
    """
    t0 = time.perf_counter()
    record_path = Path(record_path)
    storage_url = storage or str(default_storage_path(record_path))
    n_target = int(n_trials if n_trials is not None else spec.study.trials)
    n_workers = int(n_workers if n_workers is not None else spec.study.workers)
    price_data = _load_price_data(spec)

    tracker = Tracker.open(record_path)
    try:
        old = tracker.find_study(spec.study.name)
    except StudyNotFound:
        old = None
    if old is not None:
        _check_unchanged(old, spec, price_data.sha256)
        storage_url = storage or old.storage or storage_url
    else:
        _create_study(tracker, spec, price_data, storage_url)

    optuna.logging.set_verbosity(optuna.logging.WARNING)
    study = optuna.create_study(
        study_name=spec.study.name,
        storage=open_storage(storage_url),
        direction="minimize",
        load_if_exists=True,
    )
    summary = RunSummary(spec.study.name, record_path, storage_url, n_target, resumed=old is not None)
    summary.recovered = _recover_orphans(
        study, tracker, spec, "the worker running this trial stopped before it finished"
    )
    remaining = max(0, n_target - _n_finished(study))
    if remaining:
        plan = _WorkerPlan(str(record_path), storage_url, spec.study.name, 0)
        try:
            if n_workers <= 1:
                _run_inline(plan, remaining, study, on_event)
            else:
                _run_processes(plan, remaining, n_workers, study, on_event)
        except KeyboardInterrupt:
            summary.interrupted = True
        summary.recovered += _recover_orphans(
            study, tracker, spec, "the worker running this trial stopped before it finished"
        )
    summary.counts = _counts(study)
    completed = study.get_trials(deepcopy=False, states=(TrialState.COMPLETE,))
    summary.best = min((t.value for t in completed), default=None)
    summary.seconds = time.perf_counter() - t0
    return summary


class _Flag:
    def __init__(self):
        self.value = False

    def is_set(self) -> bool:
        return self.value

    def set(self) -> None:
        self.value = True


def _run_inline(plan: _WorkerPlan, remaining: int, study: optuna.Study, on_event) -> None:
    left = [remaining]
    stop = _Flag()

    def claim() -> bool:
        if left[0] <= 0:
            return False
        left[0] -= 1
        return True

    def report(outcome):
        if on_event:
            on_event(outcome, _counts(study))

    with _limit_threads():
        _worker_loop(plan, claim, stop, report)


def _run_processes(plan, remaining, n_workers, study, on_event) -> None:
    """Run trials in `n_workers` processes: this one and `n_workers - 1` spawned workers.

    The main process trains too, so the workers' start-up (imports, rebuilding the arrays) overlaps
    with useful work; a listener thread passes the workers' outcomes to `on_event` meanwhile.
    """
    ctx = mp.get_context("spawn")
    slots = ctx.Value("i", remaining)
    stop = ctx.Event()
    events = ctx.Queue()
    procs = []
    for w in range(1, min(n_workers, remaining)):
        p = ctx.Process(
            target=_worker_main,
            args=(_WorkerPlan(plan.record_path, plan.storage_url, plan.study_name, w),
                  slots, stop, events),
            name=f"volsweep-worker-{w}",
            daemon=True,
        )
        p.start()
        procs.append(p)
    lock = threading.Lock()
    listening = threading.Event()
    listening.set()

    def deliver(event) -> None:
        if on_event:
            with lock:
                on_event(event, _counts(study))

    def listen() -> None:
        while listening.is_set() or not events.empty():
            try:
                deliver(events.get(timeout=POLL_SECONDS))
            except queue.Empty:
                continue

    listener = threading.Thread(target=listen, name="volsweep-events", daemon=True)
    listener.start()
    try:
        with _limit_threads():
            _worker_loop(plan, lambda: _claim_slot(slots), stop, deliver)
        while any(p.is_alive() for p in procs):
            for p in procs:
                p.join(timeout=POLL_SECONDS)
    except KeyboardInterrupt:
        stop.set()
        for p in procs:
            p.join(timeout=60)
        raise
    finally:
        for p in procs:
            p.join(timeout=5)
            if p.is_alive():
                p.terminate()
        listening.clear()
        listener.join(timeout=5)
        for w, p in enumerate(procs, start=1):
            if p.exitcode not in (0, None) and not stop.is_set():
                deliver(("crash", w, f"the worker process ended with exit code {p.exitcode}"))
