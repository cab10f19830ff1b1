"""Tests for sweep/board/reviews.py: the review section's rows, read from review records written by hand.

Records go through a real in-memory tracker (``board_records.write_review`` and ``make_comparison``,
shaped like ``sweep.review.compare_forecasts`` results); expected rows are worked out from them by hand.
"""

from __future__ import annotations


from sweep.board import BoardReview, Comparison, Confirmation, HoldoutShown, Note, RankingSentence, collect_board
from sweep.board.reviews import collect_comparisons, collect_review
from sweep.record import ConfirmRecord, HoldoutRecord

from .board_records import make_comparison, write_review


def test_collect_board_review_holds_notes_confirmations_and_every_holdout(tracker):
    write_review(tracker)
    data = collect_board(tracker, "larkspur")
    review = data.review
    assert data.has_review
    assert [n.created for n in review.notes] == ["2026-02-01T09:00:00+00:00"]
    assert review.confirmations[0].objectives == [0.21, 0.22]
    assert [(h.sequence, h.repeat, h.n_uses) for h in review.holdouts] == [(1, False, 2), (2, True, 2)]
    # the study's objective (qlike) first, then the other metrics by name
    assert review.holdouts[0].metrics == ("qlike", "mse_log")


def test_collect_review_rows_carry_what_was_recorded(tracker):
    write_review(tracker)
    review = collect_review(tracker, "larkspur", objective="qlike")
    # write_review in board_records.py: one note, one confirmation on seeds 101 and 102, two holdouts
    assert review.notes == (Note(created="2026-02-01T09:00:00+00:00", trial=1, author="reviewer",
                                 text="Trial 1 chosen: beats HAR."),)
    assert review.confirmations == (Confirmation(
        created="2026-02-01T10:00:00+00:00", trial=1, seeds=[[3, 101], [3, 102]], objectives=[0.21, 0.22],
        gaps=[0.011, 0.012], summary={"mean": 0.215, "sd": 0.007}, extra={}),)
    results = {"trial 1": {"qlike": 0.24, "mse_log": 0.5}, "har": {"qlike": 0.29}}
    assert review.holdouts[1] == HoldoutShown(
        sequence=2, trial=1, created="2026-02-03T10:00:00+00:00", command="volsweep holdout ...", again=True,
        results=results, metrics=("qlike", "mse_log"), n_uses=2, repeat=True)
    assert review.n_holdouts == 2
    # a confirmation without a ranking sentence, and no comparison recorded
    assert (review.rankings, review.comparisons, review.n_comparisons) == ((), (), 0)


def test_collect_review_without_an_objective_lists_metrics_by_name(tracker):
    write_review(tracker)
    assert collect_review(tracker, "larkspur").holdouts[0].metrics == ("mse_log", "qlike")


def test_collect_review_one_ranking_sentence_per_confirm_run(tracker):
    # a confirm run records one confirmation per trial, all with the run's time and its sentence
    for created, trial, words in (("2026-02-01T10:00:00+00:00", 1, "trial 1 stays first on 2 of 2 seeds"),
                                  ("2026-02-01T10:00:00+00:00", 3, "trial 1 stays first on 2 of 2 seeds"),
                                  ("2026-02-04T10:00:00+00:00", 1, "trial 1 stays first on 1 of 2 seeds")):
        tracker.record_confirmation(ConfirmRecord(
            study="larkspur", trial=trial, created=created, seeds=[[3, 7], [3, 8]], objectives=[0.2, 0.21],
            gaps=[0.01, 0.01], summary={"mean": 0.205}, extra={"ranking": {"words": words}}))
    review = collect_review(tracker, "larkspur")
    assert len(review.confirmations) == 3
    assert review.rankings == (RankingSentence(created="2026-02-01T10:00:00+00:00",
                                            words="trial 1 stays first on 2 of 2 seeds"),
                               RankingSentence(created="2026-02-04T10:00:00+00:00",
                                            words="trial 1 stays first on 1 of 2 seeds"))


def test_collect_comparisons_keeps_the_latest_per_window(tracker):
    tracker.record_holdout(HoldoutRecord(study="larkspur", trial=1, created="2026-02-02T10:00:00+00:00",
                                         command="volsweep holdout 1", again=False,
                                         results={"trial 1": {"qlike": 0.2}}))
    for window, created, words in (("valid", "2026-02-05T10:00:00+00:00", "first"),
                                   ("test", "2026-02-06T10:00:00+00:00", "on test"),
                                   ("valid", "2026-02-07T10:00:00+00:00", "second")):
        tracker.record_comparison(make_comparison(window, created, words))
    shown, n_comparisons = collect_comparisons(tracker, "larkspur")
    # three recorded (sequences 1, 2, 3); the newest valid one (3) first, then test (2)
    assert n_comparisons == 3
    assert [(c.window, c.sequence) for c in shown] == [("valid", 3), ("test", 2)]
    latest = shown[0]
    # only the all-horizons Diebold-Mariano row, as recorded
    assert latest.dm == [{"model": "trial 1", "baseline": "har", "horizon": "all", "mean_diff": -0.01,
                          "hln_pvalue": 0.04, "words": "second at horizon all"}]
    assert latest == Comparison(
        sequence=3, created="2026-02-07T10:00:00+00:00", window="valid", command="volsweep compare --window valid",
        objective="qlike", level=0.05, rows=480, first_date="2022-01-03", last_date="2023-12-29", dm=latest.dm,
        dm_horizon="mean over horizons 1, 5", mcs={"words": "second: the set keeps trial 1"}, spa=None,
        spa_skipped="har is not among the baselines")
    review = collect_review(tracker, "larkspur")
    assert review.comparisons == shown and review.n_comparisons == 3


def test_board_review_is_empty_without_review_records(data):
    assert data.review == BoardReview()
    assert not data.review.has_records and not data.has_review
