"""Worker processes of a run: each trains trials of one study until the study's budget is used.

`run_inline` trains in this process; `run_processes` trains here and in spawned processes, each with
one BLAS thread (threadpoolctl). Every worker rebuilds the study's arrays from the copy of the rows
kept in the record (`folds_from_record`), so every worker trains on exactly what was recorded.
"""

from __future__ import annotations

import multiprocessing as mp
import queue
import signal
import threading
from dataclasses import dataclass
from typing import Callable

import optuna
from optuna.trial import TrialState
from threadpoolctl import threadpool_limits

from sweep.errors import RecordError
from sweep.record import HEARTBEAT_SECONDS, StudyRecord, Tracker
from sweep.search.objective import run_trial
from sweep.search.pruning import PruningView
from sweep.search.storage import RecordStorage, close_storage, make_pruner, make_sampler, open_storage, percentile_rule
from sweep.study import StudyInputs, StudySpec, prepare_folds, spec_from_text
from trainers.data import read_prices_csv_text

__all__ = ["FINISHED_STATES", "POLL_SECONDS", "WorkerPlan", "claim_trial", "count_states", "folds_from_record",
           "inputs_from_record", "run_inline", "run_processes"]

POLL_SECONDS = 0.2
FINISHED_STATES = (TrialState.COMPLETE, TrialState.PRUNED, TrialState.FAIL)


def folds_from_record(tracker: Tracker, study: StudyRecord) -> tuple[StudySpec, list[StudyInputs]]:
    """Rebuild a study's spec and the arrays of every fold from the record alone (no price file needed)."""
    spec = spec_from_text(study.spec_text, name=study.name)
    dataset = tracker.load_dataset(study.dataset_sha256)
    frame = read_prices_csv_text(dataset.csv_text)
    return spec, prepare_folds(spec, frame)


def inputs_from_record(tracker: Tracker, study: StudyRecord) -> tuple[StudySpec, StudyInputs]:
    """The spec and the final model's arrays (the single split, or the latest fold) from the record."""
    spec, folds = folds_from_record(tracker, study)
    return spec, folds[-1]


def count_states(study: optuna.Study) -> dict:
    """Finished trials of the optuna study by state: complete, pruned, failed.

    Trials stopped by an interruption (Ctrl-C, a dead worker) are left out: their settings were queued
    again and run as new trials, so the counts add up to the trials that use the study's budget.
    """
    counts = {"complete": 0, "pruned": 0, "failed": 0}
    for t in study.get_trials(deepcopy=False, states=FINISHED_STATES):
        if t.user_attrs.get("interrupted"):
            continue
        key = {TrialState.COMPLETE: "complete", TrialState.PRUNED: "pruned"}.get(t.state, "failed")
        counts[key] += 1
    return counts


@dataclass(frozen=True)
class WorkerPlan:
    record_path: str
    storage_url: str
    study_name: str
    worker: int
    n_target: int = 0  # the study's budget for this run: finished trials (interrupted ones left out) + running


def _limit_threads():
    return threadpool_limits(limits=1)


class _Heartbeat(threading.Thread):
    """Says every `HEARTBEAT_SECONDS` that a worker is alive, on a connection of its own."""

    def __init__(self, record_path: str, worker: int):
        super().__init__(name="volsweep-heartbeat", daemon=True)
        self.record_path, self.worker = record_path, worker
        self.done = threading.Event()

    def run(self) -> None:
        tracker = Tracker.open(self.record_path, create=False)
        try:
            while not self.done.wait(HEARTBEAT_SECONDS):
                try:
                    tracker.beat_worker(self.worker)
                except RecordError:  # a busy or full record: the next beat tries again
                    continue
        finally:
            tracker.close()

    def stop(self) -> None:
        self.done.set()
        self.join(timeout=5)


def claim_trial(study: optuna.Study, storage, n_target: int, worker: int, claim: Callable[[], bool]):
    """Ask the study for a trial if its budget allows one more, marked with the worker that runs it.

    With the engine's state in the record, reading the study and asking happen under the record's write
    lock, so that processes on one study never overrun its budget: a trial is given while the finished
    trials (interrupted ones left out) and the running ones number fewer than ``n_target``. With another
    storage, ``claim`` (this run's own counter) decides.

    Returns:
        The optuna trial, or None when the budget is used.
    """
    if not isinstance(storage, RecordStorage):
        return _ask(study, worker) if claim() else None
    with storage.exclusive():
        running = study.get_trials(deepcopy=False, states=(TrialState.RUNNING,))
        if sum(count_states(study).values()) + len(running) >= n_target:
            return None
        return _ask(study, worker)


def _ask(study: optuna.Study, worker: int) -> optuna.trial.Trial:
    trial = study.ask()
    trial.set_user_attr("worker", worker)
    return trial


def _worker_loop(plan: WorkerPlan, claim: Callable[[], bool], stop, report) -> None:
    tracker = Tracker.open(plan.record_path, create=False)
    storage = open_storage(plan.storage_url, record_path=plan.record_path)
    worker = tracker.register_worker(plan.study_name)
    heartbeat = _Heartbeat(plan.record_path, worker)
    heartbeat.start()
    try:
        study_record = tracker.find_study(plan.study_name)
        spec, folds = folds_from_record(tracker, study_record)
        optuna.logging.set_verbosity(optuna.logging.WARNING)
        study = optuna.load_study(study_name=plan.study_name, storage=storage, sampler=make_sampler(spec, worker))
        view = PruningView(make_pruner(spec), rule=percentile_rule(spec), epochs_per_fold=spec.training.max_epochs)
        while not stop.is_set():
            trial = claim_trial(study, storage, plan.n_target, worker, claim)
            if trial is None:
                break
            outcome = run_trial(study, spec, folds, tracker, view, stop=stop, trial=trial)
            report(outcome)
            if outcome.state == "interrupted":
                raise KeyboardInterrupt
    finally:
        heartbeat.stop()
        tracker.beat_worker(worker, ended=True)
        close_storage(storage)
        tracker.close()


def _claim_slot(slots) -> bool:
    """Take one trial from the shared budget; False when none is left."""
    with slots.get_lock():
        if slots.value <= 0:
            return False
        slots.value -= 1
        return True


def _worker_main(plan: WorkerPlan, slots, stop, events) -> None:
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


class _Flag:
    def __init__(self):
        self.value = False

    def is_set(self) -> bool:
        return self.value

    def set(self) -> None:
        self.value = True


def run_inline(plan: WorkerPlan, remaining: int, study: optuna.Study, on_event) -> None:
    """Train `remaining` trials in this process, one BLAS thread."""
    left = [remaining]
    stop = _Flag()

    def claim() -> bool:
        if left[0] <= 0:
            return False
        left[0] -= 1
        return True

    def report(outcome):
        if on_event:
            on_event(outcome, count_states(study))

    with _limit_threads():
        _worker_loop(plan, claim, stop, report)


def run_processes(plan: WorkerPlan, remaining: int, n_workers: int, study: optuna.Study, on_event) -> None:
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
            args=(WorkerPlan(plan.record_path, plan.storage_url, plan.study_name, w, plan.n_target),
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
                on_event(event, count_states(study))

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
