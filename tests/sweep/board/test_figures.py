"""Tests for sweep/board/figures.py: the traces, lines and captions drawn from a small hand-built BoardData.

Each expected trace is read off the hand-built values below; the quantile that cuts a scale is checked
against numpy's ``quantile`` (its default "linear" method, the reference library); colours are the
Okabe-Ito palette's published hex codes (Okabe & Ito 2008, "Color Universal Design").
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from sweep.board import (
    BestBaseline,
    BestTrial,
    BoardData,
    BoardHeader,
    DatasetFacts,
    EpochCount,
    EpochUse,
    GapPoint,
    GapPoints,
    LearningCurve,
    MadeBy,
    ProgressPoint,
    build_figures,
    collect_board,
)
from sweep.board.figures import MAX_BARS, _quantile
from sweep.record import Tracker
from sweep.search import SettingImportance

from .board_records import NOW, write_record

HEADER = BoardHeader(
    study="hand", created="2026-01-05T10:00:00+00:00", objective="qlike", direction="minimize", task="regression",
    target=None, dataset=DatasetFacts(source="prices.csv", n_rows=100, first_date="2020-01-01",
                                      last_date="2020-05-01", sha256="ab" * 32, sha256_short="ab" * 6, n_dropped=0),
    windows=None, sampler="random", pruner="none", search_details="", max_epochs=10, space={}, fixed={},
    counts={"complete": 3, "pruned": 1, "failed": 1, "running": 0}, n_trials=5, compute_seconds=5.0,
    wall_seconds=None, code_version="0.1.0", git_commit=None, git_commit_short=None, python="3.11.7",
    platform="Linux", spec_hash_short="cd" * 6, spec_problem=None, best_trial=BestTrial(trial=2, objective=0.4),
    best_baseline=BestBaseline(name="har", objective=0.42), n_beating=2)
BLUE, ORANGE = "#0072B2", "#E69F00"  # Okabe-Ito blue and orange


def _epochs(*counts: tuple[int, str, int]) -> tuple[EpochCount, ...]:
    return tuple(EpochCount(trial=n, state=s, epochs=e) for n, s, e in counts)


def board(**parts) -> BoardData:
    """Five trials: 0, 2, 4 complete, 1 pruned, 3 failed; one learning curve; har the best baseline at 0.42."""
    values = dict(
        header=HEADER, rows=[], settings=(), setting_kinds={},
        progress=(ProgressPoint(0, "complete", 0.5, 0.5), ProgressPoint(1, "pruned", 0.7, 0.5),
                  ProgressPoint(2, "complete", 0.4, 0.4), ProgressPoint(3, "failed", None, 0.4),
                  ProgressPoint(4, "complete", 0.45, 0.4)),
        curves=(LearningCurve(trial=7, rank=1, objective=0.4, best_epoch=2, epoch=(1, 2, 3, 4),
                              train_loss=(1.0, 0.8, 0.7, 0.65), valid_loss=(1.1, 0.9, 0.95, 1.0)),),
        scatter={"hidden_units": GapPoints(points=(GapPoint(0, 4, 0.02, 1.2, 0.5),
                                                   GapPoint(2, 8, 0.01, float("nan"), 0.4),
                                                   GapPoint(4, 32, 0.03, 1.3, 0.45))),
                 "dropout": GapPoints(points=(GapPoint(0, 0.1, 0.02, 1.2, 0.5),))},
        importance=SettingImportance(values={"hidden_units": 0.7, "dropout": 0.2, "batch_size": 0.1}, n_trials=3),
        epochs=EpochUse(max_epochs=10, max_epochs_source="training.max_epochs of the study file",
                        trials=_epochs((0, "complete", 10), (1, "pruned", 3), (2, "complete", 10), (3, "failed", 1),
                                       (4, "complete", 8)),
                        n_run=32, n_saved=7, saved_share=7 / 39, n_pruned=1),
        made=MadeBy(command="volsweep board hand.sqlite", version="0.1.0", time=NOW),
    )
    values.update(parts)
    return BoardData(**values)


def figure(data: BoardData, fig_id: str):
    """(figure, caption) of one picture."""
    return {i: (f, c) for i, c, f in build_figures(data)}[fig_id]


# ---------------------------------------------------------------------------------------- every picture


def test_build_figures_one_per_picture_with_captions(data):
    figures = build_figures(data)
    assert [f[0] for f in figures] == ["fig-progress", "fig-curves", "fig-gap-hidden-units", "fig-gap-dropout",
                                       "fig-importance", "fig-epochs"]
    assert all(fig is not None and caption for _, caption, fig in figures)
    progress = figures[0][2]
    # the best baseline is drawn as a horizontal line at its objective
    assert [s["y0"] for s in progress.layout.shapes] == [0.30]
    # 30 / 87 = 34% (test_saved_share_worked_number in test_data.py)
    assert "pruning saved 34% of epochs = the 30 epochs the 2 pruned trials" in figures[5][1]
    assert "57 epochs actually run" in figures[5][1]


def test_build_figures_absent_pictures_keep_a_caption_saying_why():
    t = Tracker.memory()
    write_record(t, trials=[])
    figures = build_figures(collect_board(t, "larkspur"))
    assert all(fig is None for _, _, fig in figures)
    captions = dict((i, c) for i, c, _ in figures)
    assert "no trial has an objective" in captions["fig-progress"]
    assert "at least 2 complete trials" in captions["fig-importance"]


def test_quantile_matches_numpy():
    # Reference: numpy.quantile's default method ("linear" interpolation between order statistics)
    rng = np.random.default_rng(0)
    for values in ([3.0], [1.0, 2.0], list(rng.normal(size=11)), list(rng.uniform(size=40))):
        for q in (0.0, 0.1, 0.5, 0.85, 0.9, 1.0):
            assert _quantile(values, q) == pytest.approx(float(np.quantile(values, q)), rel=1e-12)


# ---------------------------------------------------------------------------------------- progress


def test_progress_draws_states_the_best_so_far_and_the_baseline():
    fig, caption = figure(board(), "fig-progress")
    complete, pruned, best = fig.data
    # trial 3 failed with no objective: not drawn
    assert (complete.name, complete.x, complete.y) == ("complete", (0, 2, 4), (0.5, 0.4, 0.45))
    assert (pruned.name, pruned.x, pruned.y, pruned.marker.symbol) == ("pruned", (1,), (0.7,), "x")
    assert (best.name, best.x, best.y) == ("best so far", (0, 1, 2, 3, 4), (0.5, 0.5, 0.4, 0.4, 0.4))
    assert [s.y0 for s in fig.layout.shapes] == [0.42]
    assert [a.text for a in fig.layout.annotations] == ["best baseline: har"]
    assert fig.layout.yaxis.range is None  # fewer than 5 objectives: the scale is never cut
    assert "(lower is better;" in caption and "the dashed line is the best baseline (har)" in caption


def test_progress_without_a_baseline_and_maximizing():
    header = dataclasses.replace(HEADER, best_baseline=None, direction="maximize")
    fig, caption = figure(board(header=header), "fig-progress")
    assert fig.layout.shapes == ()
    assert "(higher is better;" in caption and "no baseline recorded" in caption


def test_progress_puts_far_values_on_the_top_edge():
    objectives = [0.30 + 0.01 * k for k in range(10)] + [5.0]
    progress = tuple(ProgressPoint(k, "complete", v, 0.30) for k, v in enumerate(objectives))
    fig, caption = figure(board(progress=progress), "fig-progress")
    # the scale keeps 85% of the values (numpy's quantile), the baseline (0.42) and the best (0.30),
    # plus 8% of the range; 5.0 lies beyond it by more than the range kept
    low = 0.30
    top = max(float(np.quantile(objectives, 0.85)), 0.42, 0.30)
    top += 0.08 * (top - low)
    inside, above = fig.data[0], fig.data[1]
    assert inside.x == tuple(range(10))
    assert above.name == "complete, above the scale" and above.marker.symbol == "triangle-up"
    assert (above.x, above.y[0], above.customdata) == ((10,), pytest.approx(top), (5.0,))
    assert fig.layout.yaxis.range == pytest.approx((low - 0.04 * (top - low), top))
    assert "1 trials far above the rest sit on the top edge as triangles" in caption


# ---------------------------------------------------------------------------------------- curves


def test_curves_draw_validation_training_and_the_best_epoch():
    fig, caption = figure(board(), "fig-curves")
    valid, train, best = fig.data
    assert (valid.name, valid.x, valid.y, valid.line.color) == ("#1 trial 7", (1, 2, 3, 4), (1.1, 0.9, 0.95, 1.0), BLUE)
    assert (train.name, train.y, train.line.dash, train.line.color) == ("trial 7 training", (1.0, 0.8, 0.7, 0.65),
                                                                        "dot", BLUE)
    # the best epoch (2) at its validation loss
    assert (best.x, best.y, best.marker.symbol) == ((2,), (0.9,), "diamond")
    assert "of the 1 best complete trials" in caption


def test_curves_without_a_best_epoch_draw_no_diamond():
    curve = dataclasses.replace(board().curves[0], best_epoch=9)  # not among the epochs run
    fig, _ = figure(board(curves=(curve,)), "fig-curves")
    assert [t.name for t in fig.data] == ["#1 trial 7", "trial 7 training"]


# ---------------------------------------------------------------------------------------- overfit gap


def test_gap_draws_each_complete_trial_with_its_numbers():
    fig, caption = figure(board(), "fig-gap-hidden-units")
    (points,) = fig.data
    assert (points.x, points.y) == ((4, 8, 32), (0.02, 0.01, 0.03))
    # trial, gap, gap ratio (a non-finite ratio is left out), objective
    assert [list(row) for row in points.customdata] == [[0, 0.02, 1.2, 0.5], [2, 0.01, None, 0.4], [4, 0.03, 1.3, 0.45]]
    assert points.marker.color == (0.5, 0.4, 0.45) and points.marker.colorscale is not None
    assert (points.marker.cmin, points.marker.cmax) == (0.4, 0.5)  # fewer than 5: the whole range
    assert fig.layout.xaxis.type == "log"  # 32 / 4 > 4: units on a log scale
    assert [s.y0 for s in fig.layout.shapes] == [0]
    assert "against its hidden units, coloured by qlike" in caption


def test_gap_of_dropout_keeps_a_linear_scale_and_says_why_it_is_absent():
    fig, _ = figure(board(), "fig-gap-dropout")
    assert fig.data[0].x == (0.1,) and fig.layout.xaxis.type is None
    fig, caption = figure(board(scatter={}), "fig-gap-dropout")
    assert fig is None and caption == ("Overfit gap against dropout rate: not drawn, dropout is not among the "
                                       "trials' settings.")


# ---------------------------------------------------------------------------------------- importance


def test_importance_bars_largest_at_the_top():
    fig, caption = figure(board(), "fig-importance")
    (bars,) = fig.data
    # plotly draws the first category at the bottom: the largest share goes last
    assert (bars.y, bars.x, bars.text) == (("batch_size", "dropout", "hidden_units"), (0.1, 0.2, 0.7),
                                           ("10%", "20%", "70%"))
    assert bars.orientation == "h" and bars.marker.color == BLUE
    assert fig.layout.xaxis.range == pytest.approx((0, 0.7 * 1.18))
    assert "(optuna's PedAnovaImportanceEvaluator on the 3 complete trials;" in caption


def test_importance_absent_shows_its_reason():
    absent = SettingImportance(n_trials=1, reason="it needs at least 2 complete trials")
    fig, caption = figure(board(importance=absent), "fig-importance")
    assert fig is None and caption == "Setting importance: not drawn, it needs at least 2 complete trials."


# ---------------------------------------------------------------------------------------- epochs


def test_epochs_bars_per_state_and_the_max_epochs_line():
    fig, caption = figure(board(), "fig-epochs")
    assert [(t.type, t.name, t.x, t.y) for t in fig.data] == [
        ("bar", "complete", (0, 2, 4), (10, 10, 8)), ("bar", "pruned", (1,), (3,)), ("bar", "failed", (3,), (1,))]
    assert (fig.data[0].marker.color, fig.data[1].marker.color) == (BLUE, ORANGE)
    assert fig.data[1].marker.pattern.shape == "/"  # pruned bars hatched, not told by colour alone
    assert [s.y0 for s in fig.layout.shapes] == [10]
    assert [a.text for a in fig.layout.annotations] == ["max_epochs 10"]
    # 7 / (7 + 32) = 17.9%, shown as 18%
    assert "pruning saved 18% of epochs = the 7 epochs the 1 pruned trials" in caption
    assert "plus the 32 epochs actually run by all trials" in caption


def test_epochs_beyond_max_bars_are_points():
    counts = _epochs(*((n, "complete" if n % 2 else "pruned", 5) for n in range(MAX_BARS + 1)))
    epochs = EpochUse(max_epochs=5, max_epochs_source="s", trials=counts, n_run=5 * (MAX_BARS + 1), n_saved=0,
                      saved_share=0.0, n_pruned=(MAX_BARS + 2) // 2)
    fig, caption = figure(board(epochs=epochs), "fig-epochs")
    assert [(t.type, t.mode, len(t.x)) for t in fig.data] == [("scatter", "markers", MAX_BARS // 2),
                                                              ("scatter", "markers", MAX_BARS // 2 + 1)]
    assert "complete (dots) against pruned (crosses)" in caption


def test_epochs_before_any_epoch_say_so():
    epochs = EpochUse(max_epochs=10, max_epochs_source="s", trials=_epochs((0, "running", 0)), n_run=0, n_saved=0,
                      saved_share=None, n_pruned=0)
    fig, caption = figure(board(epochs=epochs), "fig-epochs")
    assert [t.name for t in fig.data] == ["running"] and caption.endswith("; no epoch was run yet.")
    fig, caption = figure(board(epochs=dataclasses.replace(epochs, trials=())), "fig-epochs")
    assert fig is None and caption == "Epochs per trial: not drawn, the study has no trial yet."
