"""Tests for sweep/review/confirm.py: the best trials retrained on fresh seeds.

Outside references: the training loop run directly (``trainers.fit.fit_mlp``, not through the review
code) on each seed; Python's ``statistics`` module for the confirmation summary; Spearman's rank formula
``1 - 6 sum d^2 / (n (n^2 - 1))`` (untied ranks) for the ranking check; numpy's ``SeedSequence`` streams
for the seeds.
"""

import json
import statistics

import numpy as np
import pytest
from typer.testing import CliRunner

from review_study import STUDY, fit_alone, trials_in_state
from sweep import review
from sweep.cli import app
from sweep.record import Tracker
from sweep.review import confirm

# the keys `volsweep confirm --json` printed before the results were typed (captured from that version)
CONFIRM_KEYS = ["study", "created", "objective", "seed_rule", "trials", "ranking"]
TRIAL_KEYS = ["trial", "objective_recorded", "gap_recorded", "seeds", "objectives", "gaps", "best_epochs",
              "stop_reasons", "summary"]
RANKING_KEYS = ["leader", "leader_first", "n_seeds", "leader_first_share", "spearman", "order_by_mean",
                "order_recorded", "words"]


def test_confirm_seeds_differ_from_the_trial_seed():
    seeds = review.confirm_seeds(11, 4, 3)
    assert seeds == [[11, 4, 1000], [11, 4, 1001], [11, 4, 1002]]
    # a trial's own seed is [study_seed, number]; numpy's SeedSequence gives another stream for it
    own = np.random.default_rng([11, 4]).random(4)
    assert not any(np.array_equal(own, np.random.default_rng(s).random(4)) for s in seeds)


def test_confirm_trials_stacked_runs_equal_single_runs(writable):
    report = review.confirm_trials(writable, top=2, n_seeds=2)
    records = writable.load_confirmations(STUDY)
    assert [r.trial for r in records] == [t.trial for t in report.trials]
    complete = sorted(trials_in_state(writable, "complete"), key=lambda t: t.objective)
    assert [r.trial for r in records] == [t.number for t in complete[:2]]
    for rec, trial in zip(records, complete):
        for seed, objective, gap in zip(rec.seeds, rec.objectives, rec.gaps):
            alone = fit_alone(writable, trial, seed)
            # the contract of fit_mlp_stacked: equal to fit_mlp on one seed within 1e-12 (float64)
            assert objective == pytest.approx(alone.valid_score, abs=1e-12)
            assert gap == pytest.approx(alone.gap, abs=1e-12)
        summary = rec.summary["objective"]
        # mean and sample standard deviation as Python's statistics module computes them
        assert summary["mean"] == pytest.approx(statistics.fmean(rec.objectives), rel=1e-12)
        assert summary["std"] == pytest.approx(statistics.stdev(rec.objectives), rel=1e-9)
        assert summary["min"] == min(rec.objectives) and summary["max"] == max(rec.objectives)
        assert rec.extra["ranking"] == report.ranking.to_dict()


def test_confirm_trials_returns_what_it_records(writable):
    report = review.confirm_trials(writable, top=2, n_seeds=3)
    records = writable.load_confirmations(STUDY)
    for row, rec in zip(report.trials, records):
        # the typed rows hold the values the record keeps (read back through SQLite and JSON)
        assert [list(s) for s in row.seeds] == rec.seeds
        assert list(row.objectives) == rec.objectives and list(row.gaps) == rec.gaps
        assert row.summary_dict() == {k: v for k, v in rec.summary.items() if k != "objective_recorded"}
        assert rec.summary["objective_recorded"] == row.objective_recorded
        assert rec.extra["best_epochs"] == list(row.best_epochs)
        assert rec.extra["confirmed_together"] == [t.trial for t in report.trials]
        # three finite values: their count, and the spread statistics module computes
        assert row.objective_spread.n_finite == 3
        assert row.objective_spread.std == pytest.approx(statistics.stdev(rec.objectives), rel=1e-9)
    assert report.created == records[0].created
    assert report.seed_rule == "[study_seed, trial_number, 1000 + k], k = 0..2"


def test_ranking_counts_the_leader_and_rank_correlation():
    per_seed = np.array([[1.0, 2.0, 3.0], [2.0, 1.0, 4.0], [3.0, 3.0, 0.5]])
    result = confirm._ranking([7, 8, 9], [0.1, 0.2, 0.3], per_seed)
    # trial 7 is lowest on seed 0 only
    assert result.leader_first == 1 and result.leader_first_share == pytest.approx(1 / 3)
    # means 2.0, 2.333, 2.167 -> order 7, 9, 8; ranks (1,2,3) vs (1,3,2): 1 - 6*2/(3*8) = 0.5 (Spearman)
    assert list(result.order_by_mean) == [7, 9, 8]
    assert result.spearman == pytest.approx(0.5)


def test_confirm_trials_rejects_bad_counts(tracker):
    with pytest.raises(ValueError, match="top and seeds must be at least 1"):
        review.confirm_trials(tracker, top=0)


def test_confirm_report_to_dict_keeps_the_printed_json_shape(writable):
    report = review.confirm_trials(writable, top=1, n_seeds=2).to_dict()
    assert list(report) == CONFIRM_KEYS
    assert list(report["trials"][0]) == TRIAL_KEYS
    assert list(report["trials"][0]["summary"]) == ["objective", "gap"]
    assert list(report["trials"][0]["summary"]["objective"]) == ["mean", "std", "min", "max", "n_finite"]
    assert list(report["ranking"]) == RANKING_KEYS
    # seeds as JSON lists of three numbers, as the record keeps them
    assert report["trials"][0]["seeds"] == [[11, report["trials"][0]["trial"], 1000],
                                            [11, report["trials"][0]["trial"], 1001]]
    assert json.loads(json.dumps(report)) == report


def test_cli_confirm(writable_record):
    db = str(writable_record)
    runner = CliRunner()
    res = runner.invoke(app, ["confirm", db, "--top", "2", "--seeds", "2", "--json"])
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    assert len(data["trials"]) == 2 and data["ranking"]["n_seeds"] == 2
    res = runner.invoke(app, ["confirm", db, "--top", "1", "--seeds", "2"])
    assert res.exit_code == 0 and "[study_seed, trial_number, 1000 + k]" in res.output


def test_board_says_whether_the_ranking_holds_after_confirm(writable_record):
    from sweep.board import collect_board

    with Tracker.open(writable_record, create=False) as tracker:
        report = review.confirm_trials(tracker, top=2, n_seeds=2)
        data = collect_board(tracker, STUDY)
    # one sentence per confirm run, the one confirm_trials printed
    assert [r.words for r in data.review.rankings] == [report.ranking.words]
