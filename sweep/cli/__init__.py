"""The `volsweep` command (typer): each command parses, calls one function, prints. No logic of its own.

`app` holds the typer app, the consoles and the error handler; `run` the run and demo commands with
their progress display; `reading` the commands that read a price file, a study file or a record;
`review` the commands that reopen a study; `board` writes the board.
"""

from sweep.cli import run, reading, review, board  # noqa: F401,I001  (each registers its commands, in this order)
from sweep.cli.app import app

__all__ = ["app", "main"]


def main() -> None:
    app()
