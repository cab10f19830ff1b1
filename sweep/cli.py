"""The `volsweep` command: parse, call one function, print. No logic of its own.

Our own errors (and price-file errors) print as `error: ...` and exit 1, never a traceback.
"""

from __future__ import annotations

import functools
import json
import math
import os
from pathlib import Path
from typing import Annotated, Optional

import typer
from rich.console import Console
from rich.table import Table
from rich.text import Text

from sweep.errors import VolsweepError

__all__ = ["app", "main"]

app = typer.Typer(
    name="volsweep",
    help="Sweep small neural networks for volatility forecasting, record every trial, reopen studies.",
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    add_completion=False,
)


def _console(stderr: bool = False) -> Console:
    """A rich console. Printed to a file or a pipe (a log, CI), rich would cut tables to 80 columns and
    end values with an ellipsis; there the console is 160 columns wide unless COLUMNS says otherwise."""
    console = Console(stderr=stderr, soft_wrap=True)
    if not console.is_terminal and "COLUMNS" not in os.environ:
        console.width = 160
    return console


out = _console()
err = _console(stderr=True)

CAUTION = (
    "Forecasts are estimates from historical data, not advice; out-of-sample results can differ. "
    "Models used for decisions go through the firm's own model-risk review and local rules."
)

DbArg = Annotated[Path, typer.Argument(help="The study record (.sqlite).", show_default=False)]
StudyOpt = Annotated[Optional[str], typer.Option("--study", help="Study name (needed when the record holds several).")]
JsonOpt = Annotated[bool, typer.Option("--json", help="Print JSON instead of a table.")]


def _handles_errors(func):
    """Print our own errors as one `error:` line (continuation lines indented) and exit 1."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        try:
            return func(*args, **kwargs)
        except (VolsweepError, ValueError) as exc:  # PriceFileError is a ValueError
            # the message is text, never markup: user strings may hold brackets
            err.print(Text.assemble(("error:", "bold red"), " ", str(exc)), highlight=False)
            raise typer.Exit(code=1)

    return wrapper


def _print_json(data) -> None:
    typer.echo(json.dumps(data, indent=2, default=_json_default, allow_nan=False))


def _json_default(value):
    if hasattr(value, "item"):
        return value.item()
    if hasattr(value, "isoformat"):
        return value.isoformat()
    return str(value)


def _clean(value):
    """JSON has no NaN: non-finite floats become null."""
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    return value


def _fmt(value, digits: int = 4) -> str:
    if value is None:
        return "-"
    if isinstance(value, float):
        if not math.isfinite(value):
            return "-"
        return f"{value:.{digits}g}"
    return str(value)


def _open_record(db: Path):
    from sweep.tracker import Tracker

    return Tracker.open(db, create=False)


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


def _ranking_table(rows, objective) -> Table:
    table = Table("rank", "trial", "state", objective, "train loss", "gap", "gap ratio", "best/epochs", "stop")
    for r in rows:
        style = "italic" if r["kind"] == "baseline" else ("dim" if r.get("beats_best_baseline") is False else None)
        epochs = "-" if r["epochs"] is None else f"{r['best_epoch']}/{r['epochs']}"
        table.add_row(str(r["rank"]), str(r["trial"]), r["state"], _fmt(r["objective"]), _fmt(r["train_loss"]),
                      _fmt(r["gap"], 3), _fmt(r["gap_ratio"], 3), epochs, r["stop_reason"] or "", style=style)
    return table


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


# ----------------------------------------------------------------------------- review commands
TrialArg = Annotated[int, typer.Argument(help="Trial number.", show_default=False)]


@app.command()
@_handles_errors
def replay(db: DbArg, trial: TrialArg, study: StudyOpt = None, as_json: JsonOpt = False) -> None:
    """Retrain a recorded trial from the record and compare its learning curve epoch by epoch."""
    from sweep.review import replay_trial

    report = _clean(replay_trial(_open_record(db), trial, study=study))
    if as_json:
        _print_json(report)
        return
    out.print(report["message"], highlight=False, markup=False)
    if not report["identical"]:
        table = Table("epoch", "train loss diff", "valid loss diff", "score diff")
        for e in [e for e in report["epochs"] if e["max_abs_diff"] != 0.0]:  # epochs that differ or are missing
            table.add_row(str(e["epoch"]), _fmt(e["train_loss"], 3), _fmt(e["valid_loss"], 3),
                          _fmt(e["valid_score"], 3))
        out.print(table)
    source = report["source"]
    if source["changed"] is None:
        out.print(f"original price file {source['path']} is not there any more; the record's copy was used")
    elif not source["changed"]:
        out.print(f"original price file {source['path']} is unchanged (same SHA-256)")


@app.command()
@_handles_errors
def confirm(
    db: DbArg,
    study: StudyOpt = None,
    top: Annotated[int, typer.Option(min=1, help="How many of the best complete trials.")] = 5,
    seeds: Annotated[int, typer.Option(min=1, help="Fresh seeds per trial.")] = 8,
    as_json: JsonOpt = False,
) -> None:
    """Retrain the best trials on fresh seeds, record the spread, and say whether the ranking holds."""
    from sweep.review import confirm_trials

    report = _clean(confirm_trials(_open_record(db), study=study, top=top, n_seeds=seeds))
    if as_json:
        _print_json(report)
        return
    name = report["objective"]
    table = Table("trial", f"recorded {name}", "mean", "std", "min", "max", "gap mean", "gap std")
    for r in report["trials"]:
        o, g = r["summary"]["objective"], r["summary"]["gap"]
        table.add_row(str(r["trial"]), _fmt(r["objective_recorded"]), _fmt(o["mean"]), _fmt(o["std"], 3),
                      _fmt(o["min"]), _fmt(o["max"]), _fmt(g["mean"], 3), _fmt(g["std"], 3))
    out.print(table)
    out.print(report["ranking"]["words"], highlight=False, markup=False)
    out.print(f"seeds: {report['seed_rule']}; recorded in {db}", highlight=False, markup=False)


def _holdout_table(results: dict, metric_names=None) -> Table:
    names = metric_names or sorted({m for v in results.values() for m in v})
    table = Table("model", *names)
    for model, values in results.items():
        table.add_row(model, *(_fmt(values.get(m)) for m in names))
    return table


@app.command()
@_handles_errors
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
        report = _clean(holdout_trial(_open_record(db), trial, study=study, again=again, command=command))
    except HoldoutAlreadyUsed as exc:
        previous = _clean(exc.previous)
        if as_json:
            _print_json({"refused": True, "previous": previous})
        else:
            for h in previous:
                out.print(f"holdout #{h['sequence']} on {h['created']} (trial {h['trial']}, {h['command']}):",
                          highlight=False, markup=False)
                out.print(_holdout_table(h["results"]))
        raise
    if as_json:
        _print_json(report)
        return
    w = report["window"]
    repeat = f" (a repeat: the test window was used {len(report['previous'])} time(s) before)" if report["again"] else ""
    out.print(f"holdout #{report['sequence']} of study {report['study']}: trial {report['trial']} on the test window "
              f"{w['first']}..{w['last']} ({w['rows']} rows){repeat}", highlight=False, markup=False)
    out.print(f"network: {report['network']}", highlight=False, markup=False)
    out.print(_holdout_table(report["results"]))
    out.print(f"ranked by {report['objective']}: {', '.join(report['order'])}", highlight=False, markup=False)


@app.command()
@_handles_errors
def compare(
    db: DbArg,
    study: StudyOpt = None,
    window: Annotated[str, typer.Option(help="valid, or test (after a holdout).")] = "valid",
    top: Annotated[int, typer.Option(min=1, help="How many of the best complete trials.")] = 5,
    reps: Annotated[int, typer.Option(min=10, help="Bootstrap replications of the MCS and SPA.")] = 1000,
    as_json: JsonOpt = False,
) -> None:
    """Diebold-Mariano tests, the model confidence set and SPA for the best trials against the baselines."""
    from sweep.compare import compare_forecasts

    command = f"volsweep compare {db} --window {window} --top {top} --reps {reps}" + (f" --study {study}" if study else "")
    report = _clean(compare_forecasts(_open_record(db), study=study, window=window, top=top, reps=reps,
                                      command=command))
    if as_json:
        _print_json(report)
        return
    out.print(f"{report['window']} window {report['first_date']}..{report['last_date']} ({report['rows']} rows), "
              f"loss {report['objective']}; comparison #{report['sequence']} recorded", highlight=False, markup=False)
    table = Table("model", "baseline", "horizon", "mean diff", "DM", "HLN p", "reading")
    for r in report["dm"]:
        table.add_row(r["model"], r["baseline"], str(r["horizon"]), _fmt(r["mean_diff"], 3),
                      _fmt(r["statistic"], 3), _fmt(r["hln_pvalue"], 3), r["words"])
    out.print(table)
    out.print(report["mcs"]["words"], highlight=False, markup=False)
    out.print(report["spa"]["words"] if report["spa"] else f"SPA not run: {report['spa_skipped']}", highlight=False, markup=False)


@app.command()
@_handles_errors
def note(
    db: DbArg,
    trial: TrialArg,
    text: Annotated[str, typer.Argument(help="The note.", show_default=False)],
    study: StudyOpt = None,
    author: Annotated[Optional[str], typer.Option(help="Who writes the note.")] = None,
) -> None:
    """Add a dated decision note on a trial; notes are kept, never overwritten."""
    from sweep.review import add_decision_note

    added = add_decision_note(_open_record(db), trial, text, study=study, author=author)
    out.print(f"note on trial {added.trial} of study {added.study} recorded at {added.created}", highlight=False, markup=False)


@app.command()
@_handles_errors
def notes(db: DbArg, study: StudyOpt = None, as_json: JsonOpt = False) -> None:
    """The study's decision notes, oldest first."""
    from sweep.review import list_notes

    found = _clean(list_notes(_open_record(db), study=study))
    if as_json:
        _print_json(found)
        return
    table = Table("created", "trial", "author", "note")
    for n in found:
        table.add_row(n["created"], _fmt(n["trial"]), Text(n["author"] or "-"), Text(n["text"]))
    out.print(table)


@app.command()
@_handles_errors
def predict(
    db: DbArg,
    trial: TrialArg,
    prices: Annotated[Path, typer.Argument(help="A daily price file with the study's columns.", show_default=False)],
    study: StudyOpt = None,
    out_file: Annotated[Optional[Path], typer.Option("--out", help="CSV file to write (default: print).")] = None,
) -> None:
    """Forecast with a recorded trial on a new price file: daily variance and annualised volatility per horizon."""
    from sweep.forecast import open_study, predict_file

    tracker = _open_record(db)
    ctx = open_study(tracker, study)
    frame, info = predict_file(ctx, tracker.load_trial(ctx.name, trial), prices)
    line = (f"{info['rows']} forecasts of trial {info['trial']} ({info['first_date']}..{info['last_date']}); "
            f"network: {info['network']}")
    if out_file is None:
        typer.echo(frame.to_csv(index=False, lineterminator="\n"), nl=False)
        err.print(line, highlight=False, markup=False)
    else:
        frame.to_csv(out_file, index=False, lineterminator="\n")
        out.print(f"wrote {out_file}: {line}", highlight=False, markup=False)
    err.print(CAUTION, style="dim")


@app.command()
@_handles_errors
def diff(
    db: DbArg,
    study_a: Annotated[str, typer.Argument(help="First study.", show_default=False)],
    study_b: Annotated[str, typer.Argument(help="Second study.", show_default=False)],
    as_json: JsonOpt = False,
) -> None:
    """What differs between two studies: settings, data, windows, best objective, package versions."""
    from sweep.review import diff_studies

    report = _clean(diff_studies(_open_record(db), study_a, study_b))
    if as_json:
        _print_json(report)
        return
    a, b = report["a"], report["b"]
    out.print(f"{a['name']} -> {b['name']}", highlight=False, markup=False)
    out.print("settings: " + ("same" if not report["spec"] else ""), highlight=False, markup=False)
    for line in report["spec"]:
        out.print(f"  {line}", highlight=False, markup=False)
    data = "same data" if report["same_data"] else (
        f"data differs: {a['dataset']['sha256'][:12]} ({a['dataset']['first_date']}..{a['dataset']['last_date']}) -> "
        f"{b['dataset']['sha256'][:12]} ({b['dataset']['first_date']}..{b['dataset']['last_date']})")
    out.print(data, highlight=False, markup=False)
    for line in report["windows"]:
        out.print(f"  {line}", highlight=False, markup=False)
    for line in report["packages"]:
        out.print(f"  package {line}", highlight=False, markup=False)
    out.print(f"best: {report['best']}", highlight=False, markup=False)
    if not report["comparable"]:
        out.print("the objectives are not comparable (another objective, data or windows)", highlight=False, markup=False)


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
