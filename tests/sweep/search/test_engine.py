"""The sweep end to end on a short study of the invented demo market: 1 and 2 workers, pruning, a
failing trial, a stopped worker, a changed study file, and the record against optuna's own view."""

from __future__ import annotations

import dataclasses
import hashlib

import numpy as np
import optuna
import pytest

from sweep.search import objective as objective_module
from sweep.study.demo import demo_study_text
from sweep.errors import StudyChanged
from sweep.search import inputs_from_record, open_storage, run_study
from sweep.study import load_spec
from sweep.study import set_keys
from sweep.record import Tracker
from trainers.scenario import write_market_csv

N_DAYS = 900  # about 3.5 years of trading days: enough for 22-day targets, HAR windows and three windows

GOOD = {"batch_size": 64, "hidden_units": 8, "layers": 1, "dropout": 0.0, "patience": 8,
        "learning_rate": 0.01, "weight_decay": 1e-5, "activation": "relu"}
SLOW = {**GOOD, "learning_rate": 1e-4}  # learns so slowly that the median pruner stops it


def _write_study(folder, name="short", **keys):
    text = set_keys(
        demo_study_text(),
        name=f'"{name}"', trials="4", workers="1", max_epochs="12", startup_trials="2", warmup_epochs="2",
        patience="[8, 15]", har_window="250",
    )
    if keys:
        text = set_keys(text, **keys)
    path = folder / f"{name}.toml"
    path.write_text(text)
    return path


@pytest.fixture(scope="module")
def market(tmp_path_factory):
    folder = tmp_path_factory.mktemp("market")
    (folder / "data").mkdir()
    write_market_csv(folder / "data", seed=3, n_days=N_DAYS)
    return folder


@pytest.fixture(scope="module")
def one_worker_study(market):
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    spec = load_spec(_write_study(market, "one"))
    summary = run_study(spec, record_path=market / "one.sqlite", n_workers=1)
    return spec, summary


def _optuna_study(summary):
    storage = open_storage(summary.storage, record_path=summary.record_path)
    return optuna.load_study(study_name=summary.study, storage=storage)


def test_run_study_one_worker_records_every_trial_in_full(one_worker_study, market):
    spec, summary = one_worker_study
    # the budget is the study file's
    assert sum(summary.counts.values()) == 4
    tracker = Tracker.open(summary.record_path, create=False)
    trials = tracker.load_trials("one", with_epochs=True, with_forecasts=True)
    assert [t.number for t in trials] == [0, 1, 2, 3]
    inputs = inputs_from_record(tracker, tracker.find_study("one"))[1]
    for t in trials:
        # a trial's seed comes from the study seed and its number
        assert t.seed == [spec.study.seed, t.number]
        assert set(t.params) == set(spec.space)
        assert t.n_epochs == len(t.epochs) > 0
        assert 1 <= t.best_epoch <= t.n_epochs
        if t.state == "complete":
            # the overfit gap is validation minus training loss at the best epoch, and their ratio
            best = t.epochs[t.best_epoch - 1]
            assert t.gap == pytest.approx(best.valid_loss - best.train_loss)
            assert t.gap_ratio == pytest.approx(best.valid_loss / best.train_loss)
            assert t.objective == pytest.approx(best.valid_score)
            assert t.valid_forecasts.shape == (len(inputs.windows.valid), len(spec.target.horizons))
            assert tracker.load_weights("one", t.number) is not None


def test_run_study_keeps_a_copy_of_the_price_rows(one_worker_study, market):
    _, summary = one_worker_study
    tracker = Tracker.open(summary.record_path, create=False)
    study = tracker.find_study("one")
    raw = (market / "data" / "harbor_index.csv").read_bytes()
    # the fingerprint is the SHA-256 of the file's bytes (hashlib, outside the project)
    assert study.dataset_sha256 == hashlib.sha256(raw).hexdigest()
    dataset = tracker.load_dataset(study.dataset_sha256)
    assert dataset.n_rows == N_DAYS
    # every baseline is recorded once per window, on the same windows as the trials
    baselines = tracker.load_baselines("one")
    assert {(b.name, b.window) for b in baselines} == {
        (name, window) for name in spec_baselines(study) for window in ("valid", "test")
    }


def spec_baselines(study):
    from sweep.study import spec_from_text

    return spec_from_text(study.spec_text, name=study.name).baselines.include


def test_run_study_record_agrees_with_optuna_trial_by_trial(one_worker_study):
    _, summary = one_worker_study
    tracker = Tracker.open(summary.record_path, create=False)
    recorded = {t.number: t for t in tracker.load_trials("one")}
    states = {"COMPLETE": "complete", "PRUNED": "pruned", "FAIL": "failed"}
    engine_trials = _optuna_study(summary).get_trials()
    assert len(engine_trials) == len(recorded)
    for t in engine_trials:
        r = recorded[t.number]
        assert states[t.state.name] == r.state
        # optuna holds the searched settings; the record adds the fixed ones
        assert t.params == {k: r.params[k] for k in t.params}
        if r.state in ("complete", "pruned"):
            assert t.value == pytest.approx(r.objective, rel=1e-12)


def test_run_study_resumes_to_a_larger_budget(one_worker_study, market):
    spec, summary = one_worker_study
    again = run_study(spec, record_path=summary.record_path, n_trials=6, n_workers=1)
    # the study resumes: the earlier trials stay, two more are added
    assert again.resumed
    assert sum(again.counts.values()) == 6
    assert [t.number for t in Tracker.open(summary.record_path).load_trials("one")] == list(range(6))


@pytest.mark.slow
def test_run_study_two_workers_records_the_same_shape(market):
    # trials long enough (all 60 epochs, no pruning) that the spawned worker is up before they run out
    spec = load_spec(_write_study(market, "two", trials="16", workers="2", max_epochs="100", batch_size="16",
                                  patience="[1000, 1001]", pruner='"none"'))
    summary = run_study(spec, record_path=market / "two.sqlite")
    assert sum(summary.counts.values()) == 16
    trials = Tracker.open(summary.record_path).load_trials("two", with_epochs=True)
    assert sorted(t.number for t in trials) == list(range(16))
    # both processes trained trials (the main process and one spawned worker)
    assert len({t.worker for t in trials}) == 2
    assert all(len(t.epochs) == t.n_epochs > 0 for t in trials)


def test_run_study_median_pruner_prunes_slow_trials(market):
    spec = load_spec(_write_study(market, "prune", trials="5", max_epochs="20"))
    storage = str(market / "prune.optuna.log")
    record = market / "prune.sqlite"
    run_study(spec, record_path=record, storage=storage, n_trials=0)
    study = optuna.load_study(study_name="prune", storage=open_storage(storage))
    for params in (GOOD, GOOD, GOOD, SLOW, SLOW):
        study.enqueue_trial(params)
    summary = run_study(spec, record_path=record, storage=storage)
    trials = Tracker.open(record).load_trials("prune", with_epochs=True)
    states = [t.state for t in trials]
    # the two slow trials are worse than the median of the three good ones after warm-up
    assert states[3:] == ["pruned", "pruned"], states
    for t in trials[3:]:
        # pruned trials keep their partial curves and the epoch where they were stopped
        assert t.stop_reason == "pruned"
        assert spec.search.warmup_epochs <= t.n_epochs < spec.training.max_epochs
        assert len(t.epochs) == t.n_epochs
    assert summary.counts["pruned"] == 2


def test_run_study_records_a_failing_trial_and_goes_on(market, monkeypatch):
    spec = load_spec(_write_study(market, "fail", trials="3"))
    real = objective_module.train_params

    def flaky(spec_, inputs, params, seed):
        if seed[1] == 1:
            raise RuntimeError("simulated failure in trial 1")
        return real(spec_, inputs, params, seed)

    monkeypatch.setattr(objective_module, "train_params", flaky)
    summary = run_study(spec, record_path=market / "fail.sqlite", n_workers=1)
    trials = Tracker.open(summary.record_path).load_trials("fail")
    assert [t.state for t in trials] == ["complete", "failed", "complete"]
    assert "simulated failure in trial 1" in trials[1].error
    assert trials[1].stop_reason == "error"


def test_run_study_recovers_a_trial_left_by_a_stopped_worker(market):
    spec = load_spec(_write_study(market, "orphan", trials="2"))
    storage = str(market / "orphan.optuna.log")
    record = market / "orphan.sqlite"
    run_study(spec, record_path=record, storage=storage, n_trials=1)
    # a worker that dies mid-trial leaves a RUNNING trial in optuna and nothing finished in the record
    study = optuna.load_study(study_name="orphan", storage=open_storage(storage))
    left = study.ask()
    batch_size = left.suggest_categorical("batch_size", [32, 64, 128])
    summary = run_study(spec, record_path=record, storage=storage, n_trials=2)
    assert list(summary.recovered) == [left.number]
    trials = {t.number: t for t in Tracker.open(record).load_trials("orphan")}
    assert trials[left.number].state == "failed"
    assert "stopped before it finished" in trials[left.number].error
    # its settings were queued again and run as the next trial
    assert trials[left.number + 1].params["batch_size"] == batch_size
    assert trials[left.number + 1].state in ("complete", "pruned")


def test_run_study_refuses_a_changed_search_space(one_worker_study, market):
    spec, summary = one_worker_study
    changed = load_spec(_write_study(market, "one", dropout="{ low = 0.0, high = 0.5 }"))
    with pytest.raises(StudyChanged, match=r"space\.dropout") as err:
        run_study(changed, record_path=summary.record_path, n_workers=1)
    assert "--name" in str(err.value)
    n_before = len(Tracker.open(summary.record_path).load_trials("one"))
    # under a new name the same file runs as a new study in the same record
    renamed = run_study(changed.with_name("one-wider"), record_path=summary.record_path, n_trials=1,
                        n_workers=1)
    assert sum(renamed.counts.values()) == 1
    assert len(Tracker.open(summary.record_path).load_trials("one")) == n_before


def test_run_study_refuses_changed_price_data(market, tmp_path):
    folder = tmp_path
    (folder / "data").mkdir()
    write_market_csv(folder / "data", seed=3, n_days=N_DAYS)
    spec = load_spec(_write_study(folder, "data-change", trials="1"))
    run_study(spec, record_path=folder / "d.sqlite", n_workers=1)
    csv = folder / "data" / "harbor_index.csv"
    lines = csv.read_text().splitlines()
    csv.write_text("\n".join(lines[:-1]) + "\n")  # drop the last day
    with pytest.raises(StudyChanged, match="SHA-256 changed"):
        run_study(spec, record_path=folder / "d.sqlite", n_workers=1)


def test_run_study_trials_are_reproducible_from_the_record(one_worker_study):
    # the same settings and seed give the same curve when retrained from the stored rows
    _, summary = one_worker_study
    tracker = Tracker.open(summary.record_path, create=False)
    spec, inputs = inputs_from_record(tracker, tracker.find_study("one"))
    t = tracker.load_trial("one", 0)
    run = objective_module.train_params(spec, inputs, t.params, t.seed)
    curve = [e.valid_loss for _, e in zip(range(t.n_epochs), run)]
    np.testing.assert_array_equal(curve, [e.valid_loss for e in t.epochs])


@pytest.mark.slow
def test_ctrl_c_stops_cleanly_and_the_next_run_resumes(market):
    import signal
    import subprocess
    import sys
    import time

    path = _write_study(market, "stopped", trials="40", workers="2", max_epochs="100", batch_size="16",
                        patience="[1000, 1001]", pruner='"none"')
    record = market / "stopped.sqlite"
    proc = subprocess.Popen([sys.executable, "-m", "sweep.cli", "run", str(path), "--no-board"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline:
        time.sleep(0.5)
        try:
            if len(Tracker.open(record, create=False).load_trials("stopped", states=("complete",))) >= 2:
                break
        except Exception:  # the record is not there yet
            continue
    proc.send_signal(signal.SIGINT)
    out, err = proc.communicate(timeout=120)
    # a user's stop is not an error: exit code 130 (common practice for SIGINT) and a plain message
    assert proc.returncode == 130, err
    assert "Traceback" not in err
    assert "run the same command again to resume" in out
    trials = Tracker.open(record).load_trials("stopped")
    assert all(t.state != "running" for t in trials)
    n_done = sum(t.state == "complete" for t in trials)
    assert 2 <= n_done < 40
    # the next run resumes and reaches the budget; interrupted trials do not use it up
    summary = run_study(load_spec(path), record_path=record, n_trials=n_done + 2, n_workers=1)
    assert summary.counts["complete"] == n_done + 2


def test_run_study_with_an_optuna_sqlite_storage_in_the_record_file(market):
    # optuna's tables and the record's share one SQLite file when asked (`--storage sqlite:///...`)
    spec = load_spec(_write_study(market, "rdb", trials="2"))
    record = market / "rdb.sqlite"
    summary = run_study(spec, record_path=record, storage=f"sqlite:///{record}", n_workers=1)
    assert sum(summary.counts.values()) == 2
    engine = optuna.load_study(study_name="rdb", storage=open_storage(f"sqlite:///{record}"))
    assert len(engine.trials) == len(Tracker.open(record).load_trials("rdb")) == 2


@pytest.fixture(scope="module")
def folds_study(market):
    # three expanding walk-forward folds; no pruning so that every trial trains every fold
    spec = load_spec(_write_study(market, "folds", folds="3", trials="3", pruner='"none"'))
    summary = run_study(spec, record_path=market / "folds.sqlite", n_workers=1)
    return spec, summary


def test_run_study_walk_forward_trains_one_network_per_fold(folds_study):
    from sweep.search import folds_from_record
    from sweep.study import valid_truth

    spec, summary = folds_study
    tracker = Tracker.open(summary.record_path, create=False)
    _, folds = folds_from_record(tracker, tracker.find_study("folds"))
    assert len(folds) == 3
    # the validation blocks sit back to back, oldest first, and share the final test window
    starts = [f.windows.valid[0] for f in folds]
    assert starts == sorted(starts)
    assert all(np.array_equal(f.windows.test, folds[-1].windows.test) for f in folds)
    for t in tracker.load_trials("folds", with_epochs=True, with_forecasts=True):
        assert t.state == "complete"
        assert sorted({e.fold for e in t.epochs}) == [0, 1, 2]
        # the objective is the mean over folds of each fold's score at its best epoch
        best = []
        for k in range(3):
            curve = [e for e in t.epochs if e.fold == k]
            best.append(min(e.valid_score for e in curve))
        assert t.objective == pytest.approx(np.mean(best), rel=1e-12)
        # the validation forecasts cover every fold's block, like the baselines' forecasts
        assert t.valid_forecasts.shape == valid_truth(folds).shape
    for b in tracker.load_baselines("folds", "valid"):
        assert b.forecasts.shape == valid_truth(folds).shape


def test_walk_forward_trials_replay_fold_by_fold(folds_study):
    from sweep import review

    _, summary = folds_study
    tracker = Tracker.open(summary.record_path, create=False)
    report = review.replay_trial(tracker, 0, study="folds")
    assert report.identical, report.message
    assert report.n_epochs_replayed == report.n_epochs_recorded
    assert report.objective_replayed == report.objective_recorded


def test_walk_forward_optuna_values_equal_the_record(folds_study):
    _, summary = folds_study
    recorded = {t.number: t.objective for t in Tracker.open(summary.record_path).load_trials("folds")}
    for t in _optuna_study(summary).get_trials():
        assert t.value == pytest.approx(recorded[t.number], rel=1e-12)


def test_run_study_drops_bad_rows_when_asked_and_records_which(tmp_path):
    (tmp_path / "data").mkdir()
    write_market_csv(tmp_path / "data", seed=3, n_days=N_DAYS)
    csv = tmp_path / "data" / "harbor_index.csv"
    lines = csv.read_text().splitlines()
    header = lines[0].split(",")
    row = lines[100].split(",")
    row[header.index("high")] = "0.5"  # high below open and close: a bad row on file line 101
    lines[100] = ",".join(row)
    csv.write_text("\n".join(lines) + "\n")
    refused = load_spec(_write_study(tmp_path, "strict", trials="1"))
    with pytest.raises(Exception, match="line 101"):
        run_study(refused, record_path=tmp_path / "strict.sqlite", n_workers=1)
    assert not (tmp_path / "strict.sqlite").exists()  # nothing written
    spec = load_spec(_write_study(tmp_path, "lenient", trials="1", bad_rows='"drop"'))
    summary = run_study(spec, record_path=tmp_path / "lenient.sqlite", n_workers=1)
    tracker = Tracker.open(summary.record_path, create=False)
    dataset = tracker.load_dataset(tracker.find_study("lenient").dataset_sha256)
    # the dropped row is named in the record, and the kept copy of the rows lacks it
    assert dataset.n_rows == N_DAYS - 1
    assert any("line 101" in p for p in dataset.dropped)


def test_recover_keeps_a_trial_recorded_before_its_worker_died(market):
    from sweep.search.engine import _recover_orphans

    spec = load_spec(_write_study(market, "late", trials="1"))
    storage = str(market / "late.optuna.log")
    record = market / "late.sqlite"
    run_study(spec, record_path=record, storage=storage, n_trials=1)
    storage_object = open_storage(storage)
    study = optuna.load_study(study_name="late", storage=storage_object)
    tracker = Tracker.open(record)
    done = tracker.load_trial("late", 0)
    # a second trial whose record was written, but optuna was never told (the worker died in between)
    left = study.ask()
    tracker.record_trial(dataclasses.replace(done, number=left.number))
    assert _recover_orphans(study, storage_object, tracker, spec, "stopped") == []
    assert study.trials[left.number].state == optuna.trial.TrialState.COMPLETE
    assert study.trials[left.number].value == done.objective
    assert tracker.load_trial("late", left.number).state == "complete"


@pytest.mark.slow
def test_a_killed_worker_process_is_reported_and_its_trial_queued_again(market):
    # kill the spawned worker (SIGKILL) once it has recorded a trial and is training the next one
    import multiprocessing
    import os
    import signal
    import threading
    import time

    spec = load_spec(_write_study(market, "killed", trials="30", workers="2", max_epochs="100",
                                  batch_size="16", patience="[1000, 1001]", pruner='"none"'))
    record = market / "killed.sqlite"
    killed = []

    def kill_worker():
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline and not killed:
            time.sleep(0.05)
            try:
                workers = {t.worker for t in Tracker.open(record, create=False).load_trials("killed")}
            except Exception:  # the record is not there yet
                continue
            if any(not w.endswith(f":{os.getpid()}") for w in workers):
                for child in multiprocessing.active_children():
                    if child.name.startswith("volsweep-worker"):
                        time.sleep(0.1)  # into its next trial
                        os.kill(child.pid, signal.SIGKILL)
                        killed.append(child.pid)

    killer = threading.Thread(target=kill_worker)
    killer.start()
    events = []
    summary = run_study(spec, record_path=record, on_event=lambda e, c: events.append(e))
    killer.join()
    assert killed
    crashes = [e for e in events if isinstance(e, tuple) and e[0] == "crash"]
    assert crashes and "exit code -9" in crashes[0][2]
    # the trial it was running (if the kill did not fall between two trials) is recorded as failed
    # and queued again; the main process went on
    assert len(summary.recovered) <= 1
    trials = {t.number: t for t in Tracker.open(record).load_trials("killed")}
    for number in summary.recovered:
        assert "stopped before it finished" in trials[number].error
    again = run_study(spec, record_path=record, n_workers=1)
    assert again.counts["complete"] == 30
