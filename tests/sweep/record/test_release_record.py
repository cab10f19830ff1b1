"""A record written by release 0.1.0 (record schema 2 with optuna's journal beside it) still reads, redraws,
replays and resumes with today's code.

The fixture in tests/fixtures/records/release-0.1.0/ was made by commit a41ae03 (the release) on the invented
market: 6 trials (4 complete, 2 pruned) of a study with a median pruner, its study file, its price file, the
record and the journal. Each test works on a copy.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from sweep.board import write_study_board
from sweep.record import SCHEMA_VERSION, Tracker
from sweep.review import replay_trial
from sweep.search import run_study
from sweep.study import load_spec

FIXTURE = Path(__file__).resolve().parents[2] / "fixtures" / "records" / "release-0.1.0"
STUDY = "release-fixture"
# what the release recorded (read once from the fixture with the release's own code)
RECORDED = {0: "complete", 1: "complete", 2: "pruned", 3: "pruned", 4: "complete", 5: "complete"}


@pytest.fixture
def release(tmp_path) -> Path:
    target = tmp_path / "release"
    shutil.copytree(FIXTURE, target)
    return target


def test_release_record_opens_with_every_trial_and_its_curve(release):
    with Tracker.open(release / "study.sqlite", create=False) as tracker:
        trials = tracker.load_trials(STUDY, with_epochs=True, with_forecasts=True)
        assert {t.number: t.state for t in trials} == RECORDED
        assert all(len(t.epochs) == t.n_epochs > 0 for t in trials)
        assert all(t.valid_forecasts is not None for t in trials if t.state == "complete")
        assert {b.name for b in tracker.load_baselines(STUDY)} == {"random_walk", "ewma", "har"}
        version = tracker.db.execute("SELECT value FROM vs_meta WHERE key = 'schema_version'").fetchone()[0]
    assert int(version) == SCHEMA_VERSION


def test_release_record_redraws_its_board(release, tmp_path):
    out = write_study_board(release / "study.sqlite", out=tmp_path / "board.html")
    html = out.read_text(encoding="utf-8")
    assert STUDY in html
    # one ranking row per trial, by state
    assert (html.count('data-state="complete"'), html.count('data-state="pruned"')) == (4, 2)


def test_release_record_replays_a_trial(release):
    # replay is bit-identical on the machine that made the record; on another CPU the BLAS kernels may
    # round differently in the last bits, so the check here is a tolerance far below any real change
    with Tracker.open(release / "study.sqlite", create=False) as tracker:
        result = replay_trial(tracker, 1)
    assert result.n_epochs_replayed == result.n_epochs_recorded
    assert result.max_abs_diff < 1e-6


def test_release_study_resumes_without_changing_its_trials(release):
    with Tracker.open(release / "study.sqlite", create=False) as tracker:
        before = {t.number: t for t in tracker.load_trials(STUDY)}
    spec = load_spec(release / "study.toml")
    summary = run_study(spec, record_path=release / "study.sqlite", storage=str(release / "study.optuna.log"),
                        n_trials=8, n_workers=1)
    assert summary.resumed and sum(summary.counts.values()) == 8
    with Tracker.open(release / "study.sqlite", create=False) as tracker:
        after = {t.number: t for t in tracker.load_trials(STUDY)}
    assert sorted(after) == list(range(8))
    for number, trial in before.items():  # the release's trials are kept as they were
        assert after[number] == trial
