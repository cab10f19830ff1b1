"""The engine's state lives in the record: a study resumes from its .sqlite alone, from any folder, and a
release-0.1 record (schema 2 with optuna's journal in a file beside it) moves its state in on first resume.

These are the record's own promises (no outside reference applies); each test runs real `volsweep run`
commands or `run_study` on the invented market and compares the recorded trials before and after.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from sweep.cli import app
from sweep.errors import RecordError, StudyNotFound
from sweep.record import BaselineRecord, DatasetRecord, StudyRecord, Tracker, collect_provenance
from sweep.search import run_study
from sweep.study import load_spec, load_study_prices, set_keys
from sweep.study.demo import demo_study_text
from trainers.data import frame_to_csv_text
from trainers.scenario import write_market_csv

RELEASE = Path(__file__).resolve().parents[2] / "fixtures" / "records" / "release-0.1.0"


def _trials(record: Path, study: str) -> dict:
    with Tracker.open(record, create=False) as tracker:
        return {t.number: t for t in tracker.load_trials(study)}


@pytest.fixture
def project(tmp_path) -> Path:
    """A project folder with the invented market and a short study file (`proj/study.toml`)."""
    folder = tmp_path / "proj"
    (folder / "data").mkdir(parents=True)
    write_market_csv(folder / "data", seed=3, n_days=700, instruments=["harbor_index"])
    text = set_keys(demo_study_text(), name='"resume"', trials="3", workers="1", max_epochs="6",
                    startup_trials="1", warmup_epochs="1", patience="3", har_window="250",
                    file='"data/harbor_index.csv"')
    (folder / "study.toml").write_text(text, encoding="utf-8")
    return folder


def _run(*args: str) -> None:
    result = CliRunner().invoke(app, ["run", *args, "--no-board"])
    assert result.exit_code == 0, result.output


def test_a_run_leaves_one_file_and_resumes_from_another_folder(project, monkeypatch):
    monkeypatch.chdir(project)
    _run("study.toml")
    # the record is the only file the run made: no engine file beside it
    assert sorted(p.name for p in project.iterdir() if p.is_file()) == ["study.sqlite", "study.toml"]
    before = _trials(project / "study.sqlite", "resume")
    monkeypatch.chdir(project.parent)
    _run("proj/study.toml", "--trials", "5")
    after = _trials(project / "study.sqlite", "resume")
    # the engine went on from trial 3: the completed trials 0-2 are exactly as they were
    assert sorted(after) == list(range(5))
    assert all(after[n] == trial for n, trial in before.items())
    assert not any(p.suffix == ".log" for p in project.parent.rglob("*"))


def test_a_copy_of_the_record_alone_resumes_elsewhere(project, tmp_path, monkeypatch):
    monkeypatch.chdir(project)
    _run("study.toml")
    elsewhere = tmp_path / "elsewhere"
    shutil.copytree(project, elsewhere)  # the folder with its record, nothing else kept
    before = _trials(elsewhere / "study.sqlite", "resume")
    monkeypatch.chdir(tmp_path)
    _run(str(elsewhere / "study.toml"), "--trials", "4")
    after = _trials(elsewhere / "study.sqlite", "resume")
    assert sorted(after) == list(range(4)) and all(after[n] == t for n, t in before.items())
    assert _trials(project / "study.sqlite", "resume").keys() == {0, 1, 2}  # the original is untouched


@pytest.fixture
def release(tmp_path) -> Path:
    target = tmp_path / "release"
    shutil.copytree(RELEASE, target)
    return target


def test_a_release_record_moves_its_journal_into_the_record_on_first_resume(release, monkeypatch):
    monkeypatch.chdir(release.parent)  # not the record's folder: the journal is found beside the record
    record = release / "study.sqlite"
    before = _trials(record, "release-fixture")
    spec = load_spec(release / "study.toml")
    summary = run_study(spec, record_path=record, n_trials=7, n_workers=1)
    assert summary.resumed and sum(summary.counts.values()) == 7
    # the journal file is left as it was; from now on the record alone holds the engine's state
    os.remove(release / "study.optuna.log")
    summary = run_study(spec, record_path=record, n_trials=8, n_workers=1)
    after = _trials(record, "release-fixture")
    assert sorted(after) == list(range(8)) and sum(summary.counts.values()) == 8
    assert all(after[n] == trial for n, trial in before.items())


def test_a_release_record_without_its_journal_is_refused_and_left_as_it_was(release):
    os.remove(release / "study.optuna.log")
    record = release / "study.sqlite"
    before = _trials(record, "release-fixture")
    with pytest.raises(RecordError, match=r"the engine's state of study 'release-fixture' is not in .*study.optuna.log"):
        run_study(load_spec(release / "study.toml"), record_path=record, n_trials=8, n_workers=1)
    assert _trials(record, "release-fixture") == before


def test_one_record_transaction_keeps_a_study_and_its_baselines_together(project):
    # run_study writes a new study, its data rows and its baselines in one `Tracker.transaction()`: a
    # failure while writing the baselines (here, one naming a study the record does not hold) leaves no
    # half-made study behind, so a kill between the two cannot leave a study without its baselines
    spec = load_spec(project / "study.toml")
    prices = load_study_prices(spec)
    frame = prices.frame
    dataset = DatasetRecord(sha256=prices.sha256, source=str(prices.source), n_rows=len(frame),
                            first_date=str(frame.index[0].date()), last_date=str(frame.index[-1].date()),
                            columns=list(frame.columns), csv_text=frame_to_csv_text(frame))
    study = StudyRecord(name=spec.study.name, spec_text=spec.text, spec_hash=spec.spec_hash(),
                        search_hash=spec.search_hash(), dataset_sha256=prices.sha256, objective="qlike",
                        **collect_provenance())
    stray = BaselineRecord(study="elsewhere", name="har", window="valid", objective=0.1, losses={}, params={},
                           forecasts=np.zeros((1, 1)))
    with Tracker.open(project / "study.sqlite") as tracker:
        with pytest.raises(StudyNotFound):
            with tracker.transaction():
                tracker.save_study(study, dataset)
                tracker.record_baselines([stray])
        assert tracker.list_studies() == []
