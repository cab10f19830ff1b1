"""Several `volsweep run` processes on one study join as workers: together they reach exactly the study's
budget, and none takes a trial from another that is alive (the engine's own promise: real processes on
real files, the record and optuna's view of it compared)."""

from __future__ import annotations

import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import optuna
import pytest
from typer.testing import CliRunner

from sweep import review
from sweep.cli import app
from sweep.record import Tracker
from sweep.search import RECORD_STORAGE, open_storage, run_study
from sweep.study import load_spec, set_keys
from sweep.study.demo import demo_study_text
from trainers.scenario import write_market_csv

pytestmark = pytest.mark.slow


def _study(folder: Path, name: str, **keys) -> Path:
    (folder / "data").mkdir(exist_ok=True)
    write_market_csv(folder / "data", seed=3, n_days=700, instruments=["harbor_index"])
    text = set_keys(demo_study_text(), name=f'"{name}"', workers="1", file='"data/harbor_index.csv"',
                    har_window="250", sampler='"random"', **keys)
    path = folder / f"{name}.toml"
    path.write_text(text, encoding="utf-8")
    return path


def _engine_trials(record: Path, name: str):
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    storage = open_storage(RECORD_STORAGE, record_path=record)
    try:
        return optuna.load_study(study_name=name, storage=storage).get_trials(deepcopy=True)
    finally:
        storage.close()


def _wait_for_a_running_trial(record: Path, name: str, proc: subprocess.Popen, seconds: float = 60) -> None:
    """Until the process `proc` is training a trial of the study (it must still be running then)."""
    deadline = time.monotonic() + seconds
    while not any(t.state == optuna.trial.TrialState.RUNNING for t in _engine_trials(record, name)):
        assert proc.poll() is None, f"the run ended before a trial of {name} was seen running"
        assert time.monotonic() < deadline, f"no trial of {name} started within {seconds:g} s"
        time.sleep(0.05)


def _volsweep(*args) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "sweep.cli", *map(str, args)], stdout=subprocess.PIPE,
                            stderr=subprocess.STDOUT, text=True)


def test_three_processes_reach_exactly_the_study_budget(tmp_path):
    study = _study(tmp_path, "three", trials="12", max_epochs="150", pruner='"none"',
                   patience="[1000, 1001]")
    # the study and its baselines are made once; then three processes start together on it
    run_study(load_spec(study), record_path=tmp_path / "three.sqlite", n_trials=0, n_workers=1)
    procs = [_volsweep("run", study, "--no-board") for _ in range(3)]
    outputs = [p.communicate(timeout=300)[0] for p in procs]
    assert [p.returncode for p in procs] == [0, 0, 0], outputs
    with Tracker.open(tmp_path / "three.sqlite", create=False) as tracker:
        recorded = tracker.load_trials("three")
    engine = _engine_trials(tmp_path / "three.sqlite", "three")
    # exactly the budget: 12 finished trials, numbered 0-11, in the record and in the engine alike
    assert sorted(t.number for t in recorded) == list(range(12))
    assert all(t.state == "complete" for t in recorded)
    assert [t.number for t in engine] == list(range(12))
    assert all(t.state == optuna.trial.TrialState.COMPLETE for t in engine)
    # several processes worked, each with its own sampler seed: no settings drawn twice
    assert len({t.worker for t in recorded}) >= 2
    drawn = [tuple(sorted(t.params.items())) for t in recorded]
    assert len(set(drawn)) == len(drawn)


def test_a_second_process_leaves_the_first_ones_running_trial_alone(tmp_path):
    study = _study(tmp_path, "pair", trials="3", max_epochs="400", pruner='"none"', patience="[1000, 1001]")
    record = tmp_path / "pair.sqlite"
    run_study(load_spec(study), record_path=record, n_trials=0, n_workers=1)
    first = _volsweep("run", study, "--no-board")
    try:
        _wait_for_a_running_trial(record, "pair", first)
        # the second process joins while the first one trains: it recovers nothing and fails nothing
        summary = run_study(load_spec(study), record_path=record, n_workers=1)
        assert summary.recovered == ()
    finally:
        output = first.communicate(timeout=300)[0]
    assert first.returncode == 0, output
    with Tracker.open(record, create=False) as tracker:
        recorded = tracker.load_trials("pair")
    assert sorted(t.number for t in recorded) == [0, 1, 2]
    assert all(t.state == "complete" for t in recorded), [(t.number, t.state, t.error) for t in recorded]
    assert len({t.worker for t in recorded}) == 2


def test_export_while_a_run_writes_gives_one_whole_file_that_replays(tmp_path):
    study = _study(tmp_path, "live", trials="4", max_epochs="600", pruner='"none"', patience="[1000, 1001]")
    record = tmp_path / "live.sqlite"
    run_study(load_spec(study), record_path=record, n_trials=1, n_workers=1)
    running = _volsweep("run", study, "--no-board")
    try:
        _wait_for_a_running_trial(record, "live", running)
        exported = tmp_path / "elsewhere" / "copy.sqlite"
        exported.parent.mkdir()
        result = CliRunner().invoke(app, ["export", str(record), "-o", str(exported)])
        assert result.exit_code == 0, result.output
    finally:
        output = running.communicate(timeout=300)[0]
    assert running.returncode == 0, output
    # one self-contained file (SQLite's own integrity check), holding the trials finished by then
    assert sorted(p.name for p in exported.parent.iterdir()) == ["copy.sqlite"]
    assert sqlite3.connect(exported).execute("PRAGMA integrity_check").fetchone() == ("ok",)
    with Tracker.open(exported, create=False) as copy:
        finished = [t for t in copy.load_trials("live") if t.state == "complete"]
        assert finished
        assert review.replay_trial(copy, finished[0].number).identical
    # an export never overwrites
    again = CliRunner().invoke(app, ["export", str(record), "-o", str(exported)])
    assert again.exit_code == 1 and "exists already" in again.stderr
