"""What every `volsweep` command shares: the typer app, the consoles, the error handler, formatting.

The error handler prints our named errors (`sweep.errors`) and the price reader's `PriceFileError` as
one `error:` line and exits 1. Anything else is a bug: its traceback is shown, with one line asking
for a report.
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

from sweep.errors import InputError, VolsweepError
from sweep.record import Tracker, format_number
from trainers.price_checks import PriceFileError

__all__ = [
    "CAUTION", "DbArg", "JsonOpt", "REPORT_BUG", "StudyOpt", "app", "checked_out_file", "clean_json", "err", "fmt",
    "handles_errors", "json_default", "open_record", "out", "print_json", "ranking_table", "write_csv",
]

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


REPORT_BUG = ("this is a bug in volsweep, not a problem with your files: please report it with the "
              "traceback above and the command you ran")


def handles_errors(func):
    """Print our named errors as one `error:` line (continuation lines indented) and exit 1.

    Any other exception is a bug: it propagates with its traceback, after one line asking for a report.
    """

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        try:
            return func(*args, **kwargs)
        except (VolsweepError, PriceFileError) as exc:
            # the message is text, never markup: user strings may hold brackets
            err.print(Text.assemble(("error:", "bold red"), " ", str(exc)), highlight=False)
            raise typer.Exit(code=1)
        except (typer.Exit, typer.Abort, KeyboardInterrupt):
            raise
        except Exception:
            err.print(Text(REPORT_BUG), highlight=False)
            raise

    return wrapper


def print_json(data) -> None:
    typer.echo(json.dumps(data, indent=2, default=json_default, allow_nan=False))


def json_default(value):
    if hasattr(value, "item"):
        return value.item()
    if hasattr(value, "isoformat"):
        return value.isoformat()
    return str(value)


def clean_json(value):
    """JSON has no NaN: non-finite floats become null."""
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: clean_json(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [clean_json(v) for v in value]
    return value


def fmt(value, digits: int = 4) -> str:
    """A value in a table cell (``sweep.record.format_number``, "-" when missing)."""
    return format_number(value, digits)


def open_record(db: Path) -> Tracker:
    return Tracker.open(db, create=False)


def checked_out_file(path: Path, option: str = "--out") -> Path:
    """``path`` if a file can be written there: not a folder, in a folder that exists.

    Called before a command does its work, so a bad ``--out`` fails at once.

    Raises:
        InputError: naming the path, what is wrong and the option to change.
    """
    path = Path(path)
    if path.is_dir():
        raise InputError(f"cannot write to {path}: it is a folder; give {option} a file name such as "
                         f"{path / 'out.csv'}")
    if not path.parent.is_dir():
        raise InputError(f"cannot write to {path}: folder {path.parent} does not exist; create it first or "
                         f"choose another {option} FILE")
    return path


def write_csv(frame, path: Path, option: str = "--out", **kwargs) -> None:
    """``frame.to_csv(path, **kwargs)``; a file the system refuses (no permission, a full disk) is an InputError."""
    path = checked_out_file(path, option)
    try:
        frame.to_csv(path, **kwargs)
    except OSError as exc:
        raise InputError(f"cannot write to {path}: {exc.strerror or exc}; choose another {option} FILE") from exc


def ranking_table(rows, objective) -> Table:
    table = Table("rank", "trial", "state", objective, "train loss", "gap", "gap ratio", "best/epochs", "stop")
    for r in rows:
        style = "italic" if r["kind"] == "baseline" else ("dim" if r.get("beats_best_baseline") is False else None)
        epochs = "-" if r["epochs"] is None else f"{r['best_epoch']}/{r['epochs']}"
        table.add_row(str(r["rank"]), str(r["trial"]), r["state"], fmt(r["objective"]), fmt(r["train_loss"]),
                      fmt(r["gap"], 3), fmt(r["gap_ratio"], 3), epochs, r["stop_reason"] or "", style=style)
    return table
