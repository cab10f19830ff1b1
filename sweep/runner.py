"""`volsweep run` as a person sees it: a progress bar while trials run, then the top 5 beside the best
baseline and the path of the board."""

from __future__ import annotations

import math
from pathlib import Path

from rich.console import Console
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn, TimeRemainingColumn

from sweep.engine import RunSummary, default_record_path, run_study
from sweep.objective import TrialOutcome
from sweep.spec import load_spec

__all__ = ["run_with_progress"]

N_TOP = 5


def _status(counts: dict, best) -> str:
    best_text = "-" if best is None else f"{best:.4g}"
    return (f"complete {counts.get('complete', 0)}  pruned {counts.get('pruned', 0)}  "
            f"failed {counts.get('failed', 0)}  best {best_text}")


def run_with_progress(study_file: Path, *, trials=None, workers=None, db=None, storage=None, name=None,
                      write_board: bool = True, console: Console | None = None) -> RunSummary:
    """Run a study file with a progress bar; print the top trials and write the board."""
    console = console or Console()
    spec = load_spec(study_file)
    if name:
        spec = spec.with_name(name)
    record_path = Path(db) if db else default_record_path(Path(study_file))
    n_target = trials if trials is not None else spec.study.trials
    best = [None]
    progress = Progress(
        TextColumn("[bold]{task.description}"), BarColumn(), MofNCompleteColumn(),
        TextColumn("{task.fields[status]}"), TimeElapsedColumn(), TextColumn("left"), TimeRemainingColumn(),
        console=console, transient=False,
    )
    with progress:
        task = progress.add_task(spec.study.name, total=n_target, status="starting workers")

        def on_event(event, counts):
            if isinstance(event, TrialOutcome):
                if event.state == "complete" and event.objective is not None and math.isfinite(event.objective):
                    best[0] = event.objective if best[0] is None else min(best[0], event.objective)
                if event.state == "failed":
                    progress.console.print(f"trial {event.number} failed: {event.error}", highlight=False)
            elif isinstance(event, tuple) and event and event[0] == "crash":
                progress.console.print(f"worker {event[1]} stopped: {event[2]}", highlight=False)
            done = sum(counts.values())
            progress.update(task, completed=done, status=_status(counts, best[0]))

        summary = run_study(spec, record_path=record_path, storage=storage, n_trials=trials,
                            n_workers=workers, on_event=on_event)
        progress.update(task, completed=sum(summary.counts.values()), status=_status(summary.counts, summary.best))
    _print_summary(console, summary)
    if write_board:
        from sweep.board import default_board_path, write_study_board

        path = write_study_board(record_path, study=spec.study.name, out=default_board_path(record_path),
                                 command=f"volsweep run {study_file}")
        console.print(f"board: {path}")
    return summary


def _print_summary(console: Console, summary: RunSummary) -> None:
    from sweep._cli_common import CAUTION, _ranking_table
    from sweep.reports import top_report
    from sweep.tracker import Tracker

    if summary.interrupted:
        console.print("stopped by the user; run the same command again to resume")
    for n in summary.recovered:
        console.print(f"trial {n} was left unfinished by a stopped worker; its settings are queued again")
    report = top_report(Tracker.open(summary.record_path, create=False), study=summary.study, n=10_000,
                        states=("complete",))
    trials = [r for r in report["rows"] if r["kind"] == "trial"][:N_TOP]
    baselines = [r for r in report["rows"] if r["kind"] == "baseline"][:1]
    rows = sorted(trials + baselines, key=lambda r: (r["objective"] is None, r["objective"]))
    console.print(f"record: {summary.record_path} (study {summary.study}, {summary.seconds:.1f} s)")
    if rows:
        console.print(f"top {len(trials)} trials beside the best baseline:")
        console.print(_ranking_table(rows, report["objective"]))
    console.print(CAUTION, style="dim")
