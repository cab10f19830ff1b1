"""What every `volsweep` command shares: the typer app, the consoles, the error handler, formatting."""

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

__all__ = ["app", "out", "err", "CAUTION"]

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


def _ranking_table(rows, objective) -> Table:
    table = Table("rank", "trial", "state", objective, "train loss", "gap", "gap ratio", "best/epochs", "stop")
    for r in rows:
        style = "italic" if r["kind"] == "baseline" else ("dim" if r.get("beats_best_baseline") is False else None)
        epochs = "-" if r["epochs"] is None else f"{r['best_epoch']}/{r['epochs']}"
        table.add_row(str(r["rank"]), str(r["trial"]), r["state"], _fmt(r["objective"]), _fmt(r["train_loss"]),
                      _fmt(r["gap"], 3), _fmt(r["gap_ratio"], 3), epochs, r["stop_reason"] or "", style=style)
    return table
