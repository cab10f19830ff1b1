"""The review commands of `volsweep`: replay, confirm, holdout, compare, note, notes, predict, diff."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer
from rich.table import Table
from rich.text import Text

from sweep.cli.app import (
    CAUTION, DbArg, JsonOpt, StudyOpt, app, checked_out_file, clean_json, err, fmt, handles_errors, open_record, out,
    print_json, write_csv,
)

__all__ = ["compare", "confirm", "diff", "holdout", "note", "notes", "predict", "replay"]


TrialArg = Annotated[int, typer.Argument(help="Trial number.", show_default=False)]


@app.command()
@handles_errors
def replay(db: DbArg, trial: TrialArg, study: StudyOpt = None, as_json: JsonOpt = False) -> None:
    """Retrain a recorded trial from the record and compare its learning curve epoch by epoch."""
    from sweep.review import replay_trial

    with open_record(db) as tracker:
        report = replay_trial(tracker, trial, study=study)
    if as_json:
        print_json(clean_json(report.to_dict()))
        return
    out.print(report.message, highlight=False, markup=False)
    if not report.identical:
        table = Table("epoch", "train loss diff", "valid loss diff", "score diff")
        for e in [e for e in report.epochs if e.max_abs_diff != 0.0]:  # epochs that differ or are missing
            table.add_row(str(e.epoch), fmt(e.train_loss, 3), fmt(e.valid_loss, 3), fmt(e.valid_score, 3))
        out.print(table)
    source = report.source
    if source.changed is None:
        out.print(f"original price file {source.path} is not there any more; the record's copy was used")
    elif not source.changed:
        out.print(f"original price file {source.path} is unchanged (same SHA-256)")


@app.command()
@handles_errors
def confirm(
    db: DbArg,
    study: StudyOpt = None,
    top: Annotated[int, typer.Option(min=1, help="How many of the best complete trials.")] = 5,
    seeds: Annotated[int, typer.Option(min=1, help="Fresh seeds per trial.")] = 8,
    as_json: JsonOpt = False,
) -> None:
    """Retrain the best trials on fresh seeds, record the spread, and say whether the ranking holds."""
    from sweep.review import confirm_trials

    with open_record(db) as tracker:
        report = confirm_trials(tracker, study=study, top=top, n_seeds=seeds)
    if as_json:
        print_json(clean_json(report.to_dict()))
        return
    table = Table("trial", f"recorded {report.objective}", "mean", "std", "min", "max", "gap mean", "gap std")
    for r in report.trials:
        o, g = r.objective_spread, r.gap_spread
        table.add_row(str(r.trial), fmt(r.objective_recorded), fmt(o.mean), fmt(o.std, 3), fmt(o.min), fmt(o.max),
                      fmt(g.mean, 3), fmt(g.std, 3))
    out.print(table)
    out.print(report.ranking.words, highlight=False, markup=False)
    out.print(f"seeds: {report.seed_rule}; recorded in {db}", highlight=False, markup=False)


def _holdout_table(results: dict, metric_names=None) -> Table:
    names = metric_names or sorted({m for v in results.values() for m in v})
    table = Table("model", *names)
    for model, values in results.items():
        table.add_row(model, *(fmt(values.get(m)) for m in names))
    return table


@app.command()
@handles_errors
def holdout(
    db: DbArg,
    trial: TrialArg,
    study: StudyOpt = None,
    again: Annotated[bool, typer.Option("--again", help="Use the test window again; the repeat is recorded.")] = False,
    as_json: JsonOpt = False,
) -> None:
    """Score one trial and every baseline on the test window, once; the look is recorded."""
    from sweep.review import HoldoutAlreadyUsed, holdout_trial

    command = f"volsweep holdout {db} {trial}" + (f" --study {study}" if study else "") + (" --again" if again else "")
    try:
        with open_record(db) as tracker:
            report = holdout_trial(tracker, trial, study=study, again=again, command=command)
    except HoldoutAlreadyUsed as exc:
        if as_json:
            print_json({"refused": True, "previous": clean_json([h.to_dict() for h in exc.previous])})
        else:
            for h in exc.previous:
                out.print(f"holdout #{h.sequence} on {h.created} (trial {h.trial}, {h.command}):",
                          highlight=False, markup=False)
                out.print(_holdout_table(h.results))
        raise
    if as_json:
        print_json(clean_json(report.to_dict()))
        return
    w = report.window
    repeat = f" (a repeat: the test window was used {len(report.previous)} time(s) before)" if report.again else ""
    out.print(f"holdout #{report.sequence} of study {report.study}: trial {report.trial} on the test window "
              f"{w.first}..{w.last} ({w.rows} rows){repeat}", highlight=False, markup=False)
    out.print(f"network: {report.network}", highlight=False, markup=False)
    out.print(_holdout_table(report.results))
    out.print(f"ranked by {report.objective}: {', '.join(report.order)}", highlight=False, markup=False)


@app.command()
@handles_errors
def compare(
    db: DbArg,
    study: StudyOpt = None,
    window: Annotated[str, typer.Option(help="valid, or test (after a holdout).")] = "valid",
    top: Annotated[int, typer.Option(min=1, help="How many of the best complete trials.")] = 5,
    reps: Annotated[int, typer.Option(min=10, help="Bootstrap replications of the MCS and SPA.")] = 1000,
    as_json: JsonOpt = False,
) -> None:
    """Diebold-Mariano tests, the model confidence set and SPA for the best trials against the baselines."""
    from sweep.review import compare_forecasts

    command = f"volsweep compare {db} --window {window} --top {top} --reps {reps}" + (f" --study {study}" if study else "")
    with open_record(db) as tracker:
        report = compare_forecasts(tracker, study=study, window=window, top=top, reps=reps, command=command)
    if as_json:
        print_json(clean_json(report.to_dict()))
        return
    out.print(f"{report.window} window {report.first_date}..{report.last_date} ({report.rows} rows), "
              f"loss {report.objective}; comparison #{report.sequence} recorded", highlight=False, markup=False)
    table = Table("model", "baseline", "horizon", "mean diff", "DM", "HLN p", "reading")
    for r in report.dm:
        table.add_row(r.model, r.baseline, str(r.horizon), fmt(r.mean_diff, 3), fmt(r.statistic, 3),
                      fmt(r.hln_pvalue, 3), r.words)
    out.print(table)
    out.print(report.mcs.words, highlight=False, markup=False)
    out.print(report.spa.words if report.spa else f"SPA not run: {report.spa_skipped}", highlight=False, markup=False)


@app.command()
@handles_errors
def note(
    db: DbArg,
    trial: TrialArg,
    text: Annotated[str, typer.Argument(help="The note.", show_default=False)],
    study: StudyOpt = None,
    author: Annotated[Optional[str], typer.Option(help="Who writes the note.")] = None,
) -> None:
    """Add a dated decision note on a trial; notes are kept, never overwritten."""
    from sweep.review import add_decision_note

    with open_record(db) as tracker:
        added = add_decision_note(tracker, trial, text, study=study, author=author)
    out.print(f"note on trial {added.trial} of study {added.study} recorded at {added.created}", highlight=False, markup=False)


@app.command()
@handles_errors
def notes(db: DbArg, study: StudyOpt = None, as_json: JsonOpt = False) -> None:
    """The study's decision notes, oldest first."""
    from sweep.review import list_notes

    with open_record(db) as tracker:
        found = list_notes(tracker, study=study)
    if as_json:
        print_json(clean_json([n.to_dict() for n in found]))
        return
    table = Table("created", "trial", "author", "note")
    for n in found:
        table.add_row(n.created, fmt(n.trial), Text(n.author or "-"), Text(n.text))
    out.print(table)


@app.command()
@handles_errors
def predict(
    db: DbArg,
    trial: TrialArg,
    prices: Annotated[Path, typer.Argument(help="A daily price file with the study's columns.", show_default=False)],
    study: StudyOpt = None,
    out_file: Annotated[Optional[Path], typer.Option("--out", help="CSV file to write (default: print).")] = None,
) -> None:
    """Forecast with a recorded trial on a new price file: daily variance and annualised volatility per horizon."""
    from sweep.review import open_study, predict_file

    if out_file is not None:
        checked_out_file(out_file)
    with open_record(db) as tracker:
        ctx = open_study(tracker, study)
        made = predict_file(ctx, tracker.load_trial(ctx.name, trial), prices)
    line = (f"{made.rows} forecasts of trial {made.trial} ({made.first_date}..{made.last_date}); "
            f"network: {made.network}")
    if out_file is None:
        typer.echo(made.frame.to_csv(index=False, lineterminator="\n"), nl=False)
        err.print(line, highlight=False, markup=False)
    else:
        write_csv(made.frame, out_file, index=False, lineterminator="\n")
        out.print(f"wrote {out_file}: {line}", highlight=False, markup=False)
    err.print(CAUTION, style="dim")


@app.command()
@handles_errors
def diff(
    db: DbArg,
    study_a: Annotated[str, typer.Argument(help="First study.", show_default=False)],
    study_b: Annotated[str, typer.Argument(help="Second study.", show_default=False)],
    as_json: JsonOpt = False,
) -> None:
    """What differs between two studies: settings, data, windows, best objective, package versions."""
    from sweep.review import diff_studies

    with open_record(db) as tracker:
        report = diff_studies(tracker, study_a, study_b)
    if as_json:
        print_json(clean_json(report.to_dict()))
        return
    a, b = report.a.dataset, report.b.dataset
    out.print(f"{report.a.name} -> {report.b.name}", highlight=False, markup=False)
    out.print("settings: " + ("same" if not report.spec else ""), highlight=False, markup=False)
    for line in report.spec:
        out.print(f"  {line}", highlight=False, markup=False)
    data = "same data" if report.same_data else (
        f"data differs: {a.sha256[:12]} ({a.first_date}..{a.last_date}) -> "
        f"{b.sha256[:12]} ({b.first_date}..{b.last_date})")
    out.print(data, highlight=False, markup=False)
    for line in report.windows:
        out.print(f"  {line}", highlight=False, markup=False)
    for line in report.packages:
        out.print(f"  package {line}", highlight=False, markup=False)
    out.print(f"best: {report.best}", highlight=False, markup=False)
    if not report.comparable:
        out.print("the objectives are not comparable (another objective, data or windows)", highlight=False, markup=False)
