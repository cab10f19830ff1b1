"""The commands that read a price file, a study file or a record: data, baselines, features, top, list,
show. Each parses, calls one function, prints."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Annotated, Optional

import typer
from rich.table import Table

from sweep.cli.app import (
    DbArg, JsonOpt, StudyOpt, app, checked_out_file, clean_json, fmt, handles_errors, json_default, open_record, out,
    print_json, ranking_table, write_csv,
)
from sweep.record import list_report, show_report, top_report

__all__ = ["baselines", "data", "export", "features", "list_studies", "show", "top"]


@app.command()
@handles_errors
def data(
    file: Annotated[Path, typer.Argument(help="A daily price file (CSV).", show_default=False)],
    min_rows: Annotated[int, typer.Option(min=0, help="Fewest rows accepted (default: what the default study settings need).")] = 140,
    as_json: JsonOpt = False,
) -> None:
    """Check a price file and summarise its daily variance by estimator."""
    from sweep.study import data_report

    report = data_report(file, min_rows=min_rows)
    if as_json:
        print_json(clean_json(report.to_dict()))
    else:
        out.print(f"{report.file}: {report.rows} rows, {report.first_date} to {report.last_date}")
        for p in report.problems:
            out.print(f"  problem: {p}", highlight=False)
        if report.estimators:
            table = Table("estimator", "mean daily variance", "median", "annualised vol", "zero days")
            for s in report.estimators:
                table.add_row(s.name, fmt(s.mean), fmt(s.median), fmt(s.annualised_vol, 3), str(s.zero_days))
            out.print(table)
    if report.problems:
        raise typer.Exit(code=1)


@app.command()
@handles_errors
def baselines(
    study_file: Annotated[Path, typer.Argument(help="The study file (TOML).", show_default=False)],
    as_json: JsonOpt = False,
) -> None:
    """Every baseline's losses on the validation and test windows, with fitted parameters."""
    from sweep.study import baselines_report, load_spec

    report = baselines_report(load_spec(study_file))
    if as_json:
        print_json(clean_json(report.to_dict()))
        return
    table = Table("baseline", "window", f"objective ({report.objective})", "qlike", "mse_log", "mz_r2")
    for b in report.baselines:
        table.add_row(b.name, b.window, fmt(b.objective), fmt(b.losses.get("qlike")),
                      fmt(b.losses.get("mse_log")), fmt(b.losses.get("mz_r2")))
    out.print(table)
    for b in report.baselines:
        if b.window == "valid" and b.params:
            out.print(f"{b.name}: {json.dumps(clean_json(dict(b.params)), default=json_default)}", highlight=False)


@app.command()
@handles_errors
def features(
    study_file: Annotated[Path, typer.Argument(help="The study file (TOML).", show_default=False)],
    out_file: Annotated[Path, typer.Option("--out", help="CSV file to write.")] = Path("features.csv"),
) -> None:
    """Write the exact design matrix and targets the sweep would use, with dates and windows."""
    from sweep.study import features_frame, load_spec

    checked_out_file(out_file)
    frame = features_frame(load_spec(study_file))
    write_csv(frame, out_file)
    counts = frame["window"].value_counts().to_dict()
    out.print(f"wrote {len(frame)} rows x {frame.shape[1] - 1} columns to {out_file} ({counts})")


@app.command()
@handles_errors
def top(
    db: DbArg,
    study: StudyOpt = None,
    n: Annotated[int, typer.Option("-n", min=1, help="How many rows.")] = 20,
    sort: Annotated[str, typer.Option(help="Sort key: objective, train_loss, gap, gap_ratio, best_epoch, epochs, seconds, trial.")] = "objective",
    state: Annotated[Optional[list[str]], typer.Option(help="Only trials in this state (repeatable).")] = None,
    as_json: JsonOpt = False,
) -> None:
    """The ranking of a study's trials, with the baselines marked."""
    with open_record(db) as tracker:
        report = top_report(tracker, study=study, n=n, sort=sort, states=state)
    rows = clean_json([r.to_dict() for r in report.rows])
    if as_json:
        print_json(rows)
        return
    out.print(ranking_table(rows, report.objective))


@app.command("list")
@handles_errors
def list_studies(db: DbArg, as_json: JsonOpt = False) -> None:
    """The studies a record holds."""
    with open_record(db) as tracker:
        report = list_report(tracker)
    if as_json:
        print_json(clean_json(report.to_list()))
        return
    table = Table("study", "created", "trials", "best objective", "dataset")
    for s in report.studies:
        table.add_row(str(s.name), str(s.created), json.dumps(dict(s.trials)), fmt(s.best_objective),
                      str(s.dataset)[:40])
    out.print(table)


@app.command()
@handles_errors
def show(
    db: DbArg,
    trial: Annotated[int, typer.Argument(help="Trial number.", show_default=False)],
    study: StudyOpt = None,
    as_json: JsonOpt = False,
) -> None:
    """One trial in full, with the study's provenance."""
    with open_record(db) as tracker:
        report = show_report(tracker, trial, study=study)
    if as_json:
        print_json(clean_json(report.to_dict()))
        return
    t, s, d = report.trial, report.study, report.dataset
    out.print(f"[bold]trial {t.trial}[/] of study {s.name}: {t.state}, stop reason {t.stop_reason}")
    out.print(f"objective ({s.objective}) {fmt(t.objective)}; train loss {fmt(t.train_loss)}, "
              f"valid loss {fmt(t.valid_loss)}, gap {fmt(t.gap, 3)} (ratio {fmt(t.gap_ratio, 3)})")
    out.print(f"best epoch {t.best_epoch} of {t.epochs}; seed {list(t.seed)}; {fmt(t.seconds, 3)} s")
    out.print(f"settings: {json.dumps(clean_json(dict(t.params)))}", highlight=False)
    out.print(f"data: {d.source} ({d.rows} rows, {d.first_date} to {d.last_date}, sha256 {d.sha256[:12]})")
    out.print(f"made with volsweep {s.code_version} ({s.git_commit or 'no git commit'}), "
              f"Python {s.python} on {s.platform}")
    if t.error:
        out.print(f"error: {t.error}", highlight=False)


@app.command()
@handles_errors
def export(
    db: DbArg,
    out_file: Annotated[Path, typer.Option("-o", "--out", help="The new .sqlite file to write.", show_default=False)],
) -> None:
    """Write a consistent copy of a record to one new file, even while a run is writing to it."""
    with open_record(db) as tracker:
        path = tracker.export(out_file)
    out.print(f"exported {db} to {path}", highlight=False, markup=False)
