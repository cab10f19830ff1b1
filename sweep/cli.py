"""The `volsweep` command: parse, call one function, print. No logic of its own.

Our own errors (and price-file errors) print as `error: ...` and exit 1, never a traceback.
The study and record commands are here, the review commands in `_cli_review.py`, and what they
share (the app, the consoles, the error handler, formatting) in `_cli_common.py`.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Annotated, Optional

import typer
from rich.table import Table

from sweep._cli_common import (DbArg, JsonOpt, StudyOpt, _clean, _fmt, _handles_errors, _json_default,
                               _open_record, _print_json, _ranking_table, app, out)

__all__ = ["app", "main"]


@app.command()
@_handles_errors
def run(
    study_file: Annotated[Path, typer.Argument(help="The study file (TOML).", show_default=False)],
    trials: Annotated[Optional[int], typer.Option(min=1, help="Total trials the study should reach.")] = None,
    workers: Annotated[Optional[int], typer.Option(min=1, help="Worker processes (one BLAS thread each).")] = None,
    db: Annotated[Optional[Path], typer.Option(help="The record (default: beside the study file).")] = None,
    storage: Annotated[Optional[str], typer.Option(help="optuna storage URL or journal file (default: beside the record).")] = None,
    name: Annotated[Optional[str], typer.Option(help="Run the file as a new study under this name.")] = None,
    board: Annotated[bool, typer.Option(help="Write the HTML board at the end.")] = True,
) -> None:
    """Create or resume a study and run its trials."""
    from sweep.runner import run_with_progress

    summary = run_with_progress(study_file, trials=trials, workers=workers, db=db, storage=storage,
                                name=name, write_board=board, console=out)
    if summary.interrupted:
        raise typer.Exit(code=130)


@app.command()
@_handles_errors
def demo(
    dir: Annotated[Path, typer.Option("--dir", help="Where to write the demo market, study and record.")] = Path("demo"),
    trials: Annotated[Optional[int], typer.Option(min=1, help="Override the demo's number of trials.")] = None,
    workers: Annotated[Optional[int], typer.Option(min=1, help="Override the demo's worker count.")] = None,
) -> None:
    """Write the invented demo market and its study file, then run it end to end."""
    from sweep.demo import write_demo
    from sweep.runner import run_with_progress

    study_file = write_demo(dir)
    out.print(f"demo study written to {study_file}")
    run_with_progress(study_file, trials=trials, workers=workers, console=out)


@app.command()
@_handles_errors
def data(
    file: Annotated[Path, typer.Argument(help="A daily price file (CSV).", show_default=False)],
    min_rows: Annotated[int, typer.Option(min=0, help="Fewest rows accepted (default: what the default study settings need).")] = 140,
    as_json: JsonOpt = False,
) -> None:
    """Check a price file and summarise its daily variance by estimator."""
    from sweep.reports import data_report

    report = _clean(data_report(file, min_rows=min_rows))
    if as_json:
        _print_json(report)
    else:
        out.print(f"{report['file']}: {report['rows']} rows, {report['first_date']} to {report['last_date']}")
        for p in report["problems"]:
            out.print(f"  problem: {p}", highlight=False)
        if report["estimators"]:
            table = Table("estimator", "mean daily variance", "median", "annualised vol", "zero days")
            for est, s in report["estimators"].items():
                table.add_row(est, _fmt(s["mean"]), _fmt(s["median"]), _fmt(s["annualised_vol"], 3),
                              str(s["zero_days"]))
            out.print(table)
    if report["problems"]:
        raise typer.Exit(code=1)


@app.command()
@_handles_errors
def baselines(
    study_file: Annotated[Path, typer.Argument(help="The study file (TOML).", show_default=False)],
    as_json: JsonOpt = False,
) -> None:
    """Every baseline's losses on the validation and test windows, with fitted parameters."""
    from sweep.reports import baselines_report
    from sweep.spec import load_spec

    report = _clean(baselines_report(load_spec(study_file)))
    if as_json:
        _print_json(report)
        return
    table = Table("baseline", "window", f"objective ({report['objective']})", "qlike", "mse_log", "mz_r2")
    for b in report["baselines"]:
        table.add_row(b["name"], b["window"], _fmt(b["objective"]), _fmt(b["losses"].get("qlike")),
                      _fmt(b["losses"].get("mse_log")), _fmt(b["losses"].get("mz_r2")))
    out.print(table)
    for b in report["baselines"]:
        if b["window"] == "valid" and b["params"]:
            out.print(f"{b['name']}: {json.dumps(b['params'], default=_json_default)}", highlight=False)


@app.command()
@_handles_errors
def features(
    study_file: Annotated[Path, typer.Argument(help="The study file (TOML).", show_default=False)],
    out_file: Annotated[Path, typer.Option("--out", help="CSV file to write.")] = Path("features.csv"),
) -> None:
    """Write the exact design matrix and targets the sweep would use, with dates and windows."""
    from sweep.reports import features_frame
    from sweep.spec import load_spec

    frame = features_frame(load_spec(study_file))
    frame.to_csv(out_file)
    counts = frame["window"].value_counts().to_dict()
    out.print(f"wrote {len(frame)} rows x {frame.shape[1] - 1} columns to {out_file} ({counts})")


@app.command()
@_handles_errors
def top(
    db: DbArg,
    study: StudyOpt = None,
    n: Annotated[int, typer.Option("-n", min=1, help="How many rows.")] = 20,
    sort: Annotated[str, typer.Option(help="Sort key: objective, train_loss, gap, gap_ratio, best_epoch, epochs, seconds, trial.")] = "objective",
    state: Annotated[Optional[list[str]], typer.Option(help="Only trials in this state (repeatable).")] = None,
    as_json: JsonOpt = False,
) -> None:
    """The ranking of a study's trials, with the baselines marked."""
    from sweep.reports import top_report

    report = _clean(top_report(_open_record(db), study=study, n=n, sort=sort, states=state))
    if as_json:
        _print_json(report["rows"])
        return
    out.print(_ranking_table(report["rows"], report["objective"]))


@app.command("list")
@_handles_errors
def list_studies(db: DbArg, as_json: JsonOpt = False) -> None:
    """The studies a record holds."""
    from sweep.reports import list_report

    studies = _clean(list_report(_open_record(db)))
    if as_json:
        _print_json(studies)
        return
    table = Table("study", "created", "trials", "best objective", "dataset")
    for s in studies:
        table.add_row(str(s.get("name")), str(s.get("created")), json.dumps(s.get("trials", {})),
                      _fmt(s.get("best_objective")), str(s.get("dataset", ""))[:40])
    out.print(table)


@app.command()
@_handles_errors
def show(
    db: DbArg,
    trial: Annotated[int, typer.Argument(help="Trial number.", show_default=False)],
    study: StudyOpt = None,
    as_json: JsonOpt = False,
) -> None:
    """One trial in full, with the study's provenance."""
    from sweep.reports import show_report

    report = _clean(show_report(_open_record(db), trial, study=study))
    if as_json:
        _print_json(report)
        return
    t, s, d = report["trial"], report["study"], report["dataset"]
    out.print(f"[bold]trial {t['trial']}[/] of study {s['name']}: {t['state']}, stop reason {t['stop_reason']}")
    out.print(f"objective ({s['objective']}) {_fmt(t['objective'])}; train loss {_fmt(t['train_loss'])}, "
              f"valid loss {_fmt(t['valid_loss'])}, gap {_fmt(t['gap'], 3)} (ratio {_fmt(t['gap_ratio'], 3)})")
    out.print(f"best epoch {t['best_epoch']} of {t['epochs']}; seed {t['seed']}; {_fmt(t['seconds'], 3)} s")
    out.print(f"settings: {json.dumps(t['params'])}", highlight=False)
    out.print(f"data: {d['source']} ({d['rows']} rows, {d['first_date']} to {d['last_date']}, sha256 {d['sha256'][:12]})")
    out.print(f"made with volsweep {s['code_version']} ({s['git_commit'] or 'no git commit'}), "
              f"Python {s['python']} on {s['platform']}")
    if t["error"]:
        out.print(f"error: {t['error']}", highlight=False)


# the review commands register themselves on the same app
from sweep import _cli_review  # noqa: E402,F401


@app.command()
@_handles_errors
def board(
    db: DbArg,
    study: StudyOpt = None,
    out_file: Annotated[Optional[Path], typer.Option("-o", "--out", help="The HTML file to write (default: beside the record, X.sqlite -> X-board.html).")] = None,
) -> None:
    """Write a study's board: one static HTML file that opens offline."""
    from sweep.board import write_study_board

    path = write_study_board(db, study=study, out=out_file)
    out.print(f"board: {path}", highlight=False, markup=False)


def main() -> None:
    app()


if __name__ == "__main__":
    main()
