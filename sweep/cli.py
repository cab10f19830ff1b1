"""The `volsweep` command: parse, call one function, print. No logic of its own.

Our own errors (and price-file errors) print as `error: ...` and exit 1, never a traceback.
"""

from __future__ import annotations

import functools
import json
import math
from pathlib import Path
from typing import Annotated, Optional

import typer
from rich.console import Console
from rich.table import Table

from sweep.errors import VolsweepError
from trainers.data import PriceFileError

__all__ = ["app", "main"]

app = typer.Typer(
    name="volsweep",
    help="Sweep small neural networks for volatility forecasting, record every trial, reopen studies.",
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    add_completion=False,
)
out = Console()
err = Console(stderr=True)

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
        except PriceFileError as exc:
            err.print(f"[bold red]error:[/] {exc}", markup=True, highlight=False)
            raise typer.Exit(code=1)
        except (VolsweepError, ValueError) as exc:
            err.print(f"[bold red]error:[/] {exc}", markup=True, highlight=False)
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

    run_with_progress(study_file, trials=trials, workers=workers, db=db, storage=storage,
                      name=name, write_board=board, console=out)


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
    as_json: JsonOpt = False,
) -> None:
    """Check a price file and summarise its daily variance by estimator."""
    from sweep.reports import data_report

    report = _clean(data_report(file))
    if as_json:
        _print_json(report)
    else:
        out.print(f"{report['file']}: {report['rows']} rows, {report['first_date']} to {report['last_date']}")
        for p in report["problems"]:
            out.print(f"  problem: {p}", highlight=False)
        table = Table("estimator", "mean daily variance", "median", "annualised vol", "zero days")
        for est, s in report["estimators"].items():
            table.add_row(est, _fmt(s["mean"]), _fmt(s["median"]), _fmt(s["annualised_vol"], 3), str(s["zero_days"]))
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


def main() -> None:
    app()


if __name__ == "__main__":
    main()
