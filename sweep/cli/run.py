"""`volsweep run` and `volsweep demo` as a person sees them: a progress bar while trials run, then the
top 5 beside the best baseline and the path of the board."""

from __future__ import annotations

import math
from pathlib import Path
from typing import Annotated, Optional

import typer
from rich.console import Console
from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn, TimeRemainingColumn

from sweep.board import default_board_path, write_study_board
from sweep.cli.app import CAUTION, app, err, handles_errors, out, ranking_table
from sweep.record import Tracker, top_report
from sweep.search import RunSummary, TrialOutcome, default_record_path, run_study
from sweep.study import load_spec
from sweep.study.demo import write_demo

__all__ = ["demo", "run", "run_with_progress"]

N_TOP = 5


@app.command()
@handles_errors
def run(
    study_file: Annotated[Path, typer.Argument(help="The study file (TOML).", show_default=False)],
    trials: Annotated[Optional[int], typer.Option(min=1, help="Total trials the study should reach.")] = None,
    workers: Annotated[Optional[int], typer.Option(min=1, help="Worker processes (one BLAS thread each).")] = None,
    db: Annotated[Optional[Path], typer.Option(help="The record (default: beside the study file).")] = None,
    storage: Annotated[Optional[str], typer.Option(help="optuna storage URL or journal file (default: the record itself).")] = None,
    name: Annotated[Optional[str], typer.Option(help="Run the file as a new study under this name.")] = None,
    board: Annotated[bool, typer.Option(help="Write the HTML board at the end.")] = True,
) -> None:
    """Create or resume a study and run its trials."""
    summary = run_with_progress(study_file, trials=trials, workers=workers, db=db, storage=storage,
                                name=name, write_board=board, console=out)
    _exit_code(summary)


@app.command()
@handles_errors
def demo(
    dir: Annotated[Path, typer.Option("--dir", help="Where to write the demo market, study and record.")] = Path("demo"),
    trials: Annotated[Optional[int], typer.Option(min=1, help="Override the demo's number of trials.")] = None,
    workers: Annotated[Optional[int], typer.Option(min=1, help="Override the demo's worker count.")] = None,
) -> None:
    """Write the invented demo market and its study file, then run it end to end."""
    study_file = write_demo(dir)
    out.print(f"demo study written to {study_file}")
    _exit_code(run_with_progress(study_file, trials=trials, workers=workers, console=out))


def _exit_code(summary: RunSummary) -> None:
    """130 after Ctrl-C; 1 when every trial this run finished failed (each one's error is in the record)."""
    if summary.interrupted:
        raise typer.Exit(code=130)
    if summary.all_failed:
        err.print(f"error: all {summary.ran['failed']} trials of this run failed; each one's error is in the "
                  f"record (`volsweep show {summary.record_path} TRIAL`) and printed above", highlight=False)
        raise typer.Exit(code=1)


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
            elif isinstance(event, tuple) and event and event[0] == "start":
                # trials finished before this run count as done, not as speed: the time left is
                # estimated from this run's trials only (none shown until one has finished)
                progress.reset(task, total=n_target, completed=event[1], status=_status(counts, best[0]))
                return
            done = sum(counts.values())
            progress.update(task, completed=done, status=_status(counts, best[0]))

        summary = run_study(spec, record_path=record_path, storage=storage, n_trials=trials,
                            n_workers=workers, on_event=on_event)
        progress.update(task, completed=sum(summary.counts.values()), status=_status(summary.counts, summary.best))
    _print_summary(console, summary)
    if write_board:
        path = write_study_board(record_path, study=spec.study.name, out=default_board_path(record_path),
                                 command=f"volsweep run {study_file}")
        console.print(f"board: {path}")
    return summary


def _print_summary(console: Console, summary: RunSummary) -> None:
    if summary.interrupted:
        console.print("stopped by the user; run the same command again to resume")
    for n in summary.recovered:
        console.print(f"trial {n} was left unfinished by a stopped worker; its settings are queued again")
    with Tracker.open(summary.record_path, create=False) as tracker:
        report = top_report(tracker, study=summary.study, n=10_000, states=("complete",))
    trials = [r for r in report.rows if r.kind == "trial"][:N_TOP]
    baselines = [r for r in report.rows if r.kind == "baseline"][:1]
    rows = sorted(trials + baselines, key=lambda r: r.rank)  # the ranking's own order: missing objectives last
    console.print(f"record: {summary.record_path} (study {summary.study}, {summary.seconds:.1f} s)")
    if rows:
        console.print(f"top {len(trials)} trials beside the best baseline:")
        console.print(ranking_table([r.to_dict() for r in rows], report.objective))
    console.print(CAUTION, style="dim")
