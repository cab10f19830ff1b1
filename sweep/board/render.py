"""The board's last step: ``BoardData`` and its figures into one static HTML file.

``render_board(data, figures)`` fills the jinja2 template (autoescaped) and inlines the CSS, the small
sorting/filtering script and plotly.js once; ``write_board`` writes the file;
``write_study_board(record_path, study=..., out=...)`` runs all three steps of the board.
"""

from __future__ import annotations

import math
import shlex
from datetime import datetime, timezone
from pathlib import Path

from jinja2 import Environment, FileSystemLoader, StrictUndefined, select_autoescape
import plotly.io as pio
from markupsafe import Markup

from sweep.board.data import collect_board
from sweep.board.figures import PLOT_CONFIG, build_figures
from sweep.board.values import BoardData
from sweep.errors import BoardError
from sweep.record import TRIAL_STATES, Tracker, format_number
from sweep.study import format_value

__all__ = ["default_board_path", "render_board", "write_board", "write_study_board"]

TEMPLATES = Path(__file__).with_name("templates")
TEMPLATE = "board.html.j2"
STYLESHEET = "board.css"
SCRIPT = "board.js"


# ---------------------------------------------------------------------------------------- render


def _fmt(value, digits: int = 4) -> str:
    """A value for the page: numbers as ``sweep.record.format_number`` writes them ("–" when missing),
    booleans in lower case, lists and dicts item by item."""
    if isinstance(value, bool):
        return str(value).lower()
    if isinstance(value, (list, tuple)):
        return ", ".join(f"[{_fmt(v, digits)}]" if isinstance(v, (list, tuple)) else _fmt(v, digits) for v in value)
    if isinstance(value, dict):
        return "; ".join(f"{k} {_fmt(v, digits)}" for k, v in value.items())
    return format_number(value, digits, missing="–")


def _sort_value(value) -> str:
    """The ``data-v`` attribute a table cell sorts by: the raw number, the text, or "" when missing."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return ""
    if isinstance(value, bool):
        return str(value).lower()
    return repr(value) if isinstance(value, float) else str(value)


def _duration(seconds) -> str:
    if seconds is None or not math.isfinite(float(seconds)):
        return "–"
    seconds = float(seconds)
    if seconds < 60:
        return f"{seconds:.1f} s"
    minutes, secs = divmod(round(seconds), 60)
    if minutes < 60:
        return f"{minutes} min {secs:02d} s"
    hours, minutes = divmod(minutes, 60)
    return f"{hours} h {minutes:02d} min"


def _utc(text: str) -> str:
    """ISO time text as "2026-03-01 12:00:00 UTC" (converted to UTC); other text as it is."""
    try:
        moment = datetime.fromisoformat(text)
    except (TypeError, ValueError):
        return str(text)
    if moment.tzinfo is not None:
        moment = moment.astimezone(timezone.utc)
    return moment.strftime("%Y-%m-%d %H:%M:%S") + " UTC"


def _breakable(name: str) -> str:
    """A long setting name that may wrap after each underscore (a zero-width space follows it)."""
    return str(name).replace("_", "_\u200b")


def _environment() -> Environment:
    env = Environment(
        loader=FileSystemLoader(str(TEMPLATES)),
        autoescape=select_autoescape(["html", "htm", "xml", "j2"]),
        trim_blocks=True,
        lstrip_blocks=True,
        undefined=StrictUndefined,
    )
    env.filters["fmt"] = _fmt
    env.filters["sortv"] = _sort_value
    env.filters["duration"] = _duration
    env.filters["setting"] = format_value
    env.filters["breakable"] = _breakable
    env.filters["utc"] = _utc
    return env


def _figure_html(figures) -> list[dict]:
    """Each figure as its own div; plotly.js goes with the first drawn figure only."""
    out, included = [], False
    for fig_id, caption, figure in figures:
        html = None
        if figure is not None:
            html = Markup(pio.to_html(figure, full_html=False, include_plotlyjs=not included,
                                      config=PLOT_CONFIG, div_id=fig_id, default_width="100%"))
            included = True
        out.append({"id": fig_id, "caption": caption, "html": html})
    return out


def render_board(data: BoardData, figures) -> str:
    """The board as one HTML document (every user string escaped, plotly.js inlined once).

    Args:
        data: from ``collect_board``.
        figures: from ``build_figures``: (id, caption, plotly Figure or None when absent).
    """
    env = _environment()
    return env.get_template(TEMPLATE).render(
        data=data,
        h=data.header,
        figures=_figure_html(figures),
        css=Markup((TEMPLATES / STYLESHEET).read_text(encoding="utf-8")),
        js=Markup((TEMPLATES / SCRIPT).read_text(encoding="utf-8")),
        states=(*TRIAL_STATES, "baseline"),
    )


def write_board(data: BoardData, figures, path: str | Path) -> Path:
    """Render the board and write it to ``path`` (UTF-8); returns the path.

    Raises:
        BoardError: the folder of ``path`` does not exist, ``path`` is a folder, or the file cannot be written.
    """
    path = _checked_out(path)
    html = render_board(data, figures)
    try:
        path.write_text(html, encoding="utf-8")
    except OSError as exc:  # a full disk, a read-only folder
        path.unlink(missing_ok=True)  # no half-written board is left behind
        raise BoardError(f"cannot write the board to {path}: {exc.strerror or exc}; free some space or choose "
                         "another -o FILE") from exc
    return path


def _checked_out(path: str | Path) -> Path:
    path = Path(path)
    if path.is_dir():
        raise BoardError(f"cannot write the board to {path}: it is a folder; give a file name such as "
                         f"{path / 'board.html'}")
    if not path.parent.is_dir():
        raise BoardError(f"cannot write the board to {path}: folder {path.parent} does not exist; "
                         "create it first or choose another -o FILE")
    return path


def default_board_path(record_path: str | Path) -> Path:
    """``studies/x.sqlite`` -> ``studies/x-board.html``."""
    record_path = Path(record_path)
    return record_path.with_name(record_path.stem + "-board.html")


def write_study_board(record_path: str | Path, *, study: str | None = None, out: str | Path | None = None,
                      command: str | None = None) -> Path:
    """Read a study from its record file and write its board.

    Args:
        record_path: the record (.sqlite).
        study: the study's name; None for the file's only study.
        out: the HTML file to write; default ``default_board_path(record_path)``.
        command: the command line shown in the footer; default: the equivalent ``volsweep board``.

    Returns:
        The path written.

    Raises:
        RecordNotFound, RecordError, StudyNotFound: from the tracker; BoardError: bad ``out``.
    """
    out = _checked_out(default_board_path(record_path) if out is None else out)
    tracker = Tracker.open(record_path, create=False)
    try:
        if command is None:
            name = tracker.find_study(study).name
            command = (f"volsweep board {shlex.quote(str(record_path))} --study {shlex.quote(name)} "
                       f"-o {shlex.quote(str(out))}")
        data = collect_board(tracker, study, command=command)
    finally:
        tracker.close()
    return write_board(data, build_figures(data), out)
