"""Tests for sweep/cli/run.py's `run_with_progress`: what a person sees after a run.

A tiny study of the invented market (`trainers/scenario.py`) runs for real, in this process, with a
rich Console writing to a StringIO; the summary it prints is checked against the record it wrote,
read back with the Tracker (the best complete trials by objective and the best validation baseline).
"""

from __future__ import annotations

import io
import math
import re

import pytest
from rich.console import Console

from sweep.cli.app import CAUTION
from sweep.cli.run import run_with_progress
from sweep.record import Tracker
from sweep.study import set_keys
from sweep.study.demo import demo_study_text
from trainers.scenario import write_market_csv

N_TOP = 5      # run.py promises "the top 5 beside the best baseline"
N_TRIALS = 7   # more complete trials than the summary shows


def run_to_text(study_file, **kwargs):
    buffer = io.StringIO()
    summary = run_with_progress(study_file, console=Console(file=buffer, width=200), **kwargs)
    return summary, buffer.getvalue()


def table_rows(text: str) -> list[list[str]]:
    """The body rows of the printed ranking table, cell by cell."""
    return [[cell.strip() for cell in line.strip("│").split("│")] for line in text.splitlines()
            if line.startswith("│")]


@pytest.fixture(scope="module")
def ran(tmp_path_factory):
    folder = tmp_path_factory.mktemp("display")
    write_market_csv(folder / "data", seed=5, n_days=900)
    # no pruning, so every trial completes and the top-5 cut shows
    text = set_keys(demo_study_text(), name='"display"', trials=str(N_TRIALS), workers="1", max_epochs="6",
                    har_window="250", pruner='"none"', warmup_epochs="2")
    study_file = folder / "display.toml"
    study_file.write_text(text)
    summary, output = run_to_text(study_file)
    return study_file, summary, output


@pytest.mark.slow
def test_run_with_progress_shows_the_top_trials_beside_the_best_baseline(ran):
    study_file, summary, output = ran
    assert summary.counts.get("complete") == N_TRIALS
    with Tracker.open(summary.record_path, create=False) as tracker:
        trials = sorted((t for t in tracker.load_trials("display") if t.state == "complete"),
                        key=lambda t: t.objective)
        best_baseline = min((b for b in tracker.load_baselines("display", window="valid")
                             if b.objective is not None and math.isfinite(b.objective)),
                            key=lambda b: b.objective)
    assert f"top {N_TOP} trials beside the best baseline:" in output
    rows = table_rows(output)
    # the 5 best complete trials and the best validation baseline, ascending by objective
    expected = sorted([(str(t.number), "complete", t.objective) for t in trials[:N_TOP]]
                      + [(best_baseline.name, "baseline", best_baseline.objective)], key=lambda r: r[2])
    assert [(r[1], r[2]) for r in rows] == [(name, state) for name, state, _ in expected]
    # the objective column shows 4 significant digits
    assert [r[3] for r in rows] == [f"{objective:.4g}" for _, _, objective in expected]
    # ranks count every row of the ranking, so they rise but may skip the baselines not shown
    ranks = [int(r[0]) for r in rows]
    assert ranks == sorted(ranks) and len(set(ranks)) == len(ranks)


@pytest.mark.slow
def test_run_with_progress_prints_the_record_caution_and_board(ran):
    study_file, summary, output = ran
    lines = output.splitlines()
    record_line = next(line for line in lines if line.startswith("record:"))
    assert re.fullmatch(rf"record: {re.escape(str(summary.record_path))} \(study display, \d+\.\d s\)",
                        record_line)
    assert summary.record_path == study_file.with_suffix(".sqlite")
    # the caution comes after the table, whole (the console may wrap it)
    flat = " ".join(output.split())
    assert CAUTION in flat and flat.index(CAUTION) > flat.index("trials beside the best baseline")
    # the last line names the board, written beside the record
    board = study_file.with_name("display-board.html")
    assert lines[-1] == f"board: {board}"
    assert board.is_file() and board.read_text(encoding="utf-8").lstrip().lower().startswith("<!doctype html")


@pytest.mark.slow
def test_run_with_progress_without_board_prints_no_board_line(ran):
    study_file, _, _ = ran
    # the study is already complete: the same command resumes it, runs nothing and prints the summary again
    summary, output = run_to_text(study_file, write_board=False)
    assert summary.counts.get("complete") == N_TRIALS
    assert "board:" not in output
    assert f"top {N_TOP} trials beside the best baseline:" in output
    assert " ".join(output.split()).endswith(CAUTION)
