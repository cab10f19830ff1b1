"""`volsweep board`: write a study's board from its record."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer

from sweep.board import write_study_board
from sweep.cli.app import DbArg, StudyOpt, app, handles_errors, out

__all__ = ["board"]


@app.command()
@handles_errors
def board(
    db: DbArg,
    study: StudyOpt = None,
    out_file: Annotated[Optional[Path], typer.Option("-o", "--out", help="The HTML file to write (default: beside the record, X.sqlite -> X-board.html).")] = None,
) -> None:
    """Write a study's board: one static HTML file that opens offline."""
    path = write_study_board(db, study=study, out=out_file)
    out.print(f"board: {path}", highlight=False, markup=False)
