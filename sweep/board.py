"""The study board: one static HTML file that opens anywhere, with no server and no network.

Three steps, each testable on its own:

1. ``collect_board(tracker, study)`` reads the record into a ``BoardData`` of plain values
   (the header, the ranking rows, the learning curves of the best trials, the points of the
   pictures, setting importance, epochs used, and the review records);
2. ``build_figures(data)`` turns those values into plotly figures (``sweep/_board_figures.py``);
3. ``render_board(data, figures)`` fills the jinja2 template (autoescaped) and inlines the CSS,
   the small sorting/filtering script and plotly.js once; ``write_board`` writes the file.

``write_study_board(record_path, study=..., out=...)`` does all three.

Example:
    >>> from sweep.tracker import Tracker
    >>> data = collect_board(tracker, "harbor-demo")        # doctest: +SKIP
    >>> write_board(data, build_figures(data), "board.html")  # doctest: +SKIP
"""

from __future__ import annotations

import math
import shlex
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path

from jinja2 import Environment, FileSystemLoader, select_autoescape
from markupsafe import Markup

from sweep._board_data import (
    N_CURVES,
    collect_curves,
    collect_epochs,
    collect_header,
    collect_importance,
    collect_progress,
    collect_review,
    collect_rows,
    collect_scatter,
    read_spec,
)
from sweep._board_figures import PLOT_CONFIG, build_figures
from sweep.errors import VolsweepError
from sweep.provenance import code_version
from sweep.space import format_value

__all__ = [
    "N_CURVES",
    "BoardData",
    "BoardError",
    "build_figures",
    "collect_board",
    "default_board_path",
    "render_board",
    "write_board",
    "write_study_board",
]

TEMPLATES = Path(__file__).with_name("templates")
TEMPLATE = "board.html.j2"
STYLESHEET = "board.css"
SCRIPT = "board.js"


class BoardError(VolsweepError):
    """The board cannot be written where it was asked to go."""


@dataclass(frozen=True)
class BoardData:
    """Everything the board shows, as plain values (no records, no figures).

    Attributes:
        header: study, dataset, target, objective, search, trial counts, compute time, code version.
        rows: the ranking (trials and validation-window baselines) as ``sweep.ranking.rank_rows``
            gives it, each row with ``behind`` (True: a trial that does not beat the best baseline)
            and ``marker`` (the text shown in the table's marker column).
        settings: the searched settings, in table order; ``setting_kinds`` says "num" or "text" each.
        progress: one dict per trial in number order: ``trial``, ``state``, ``objective``,
            ``running_best`` (best complete objective so far, or None).
        curves: the best complete trials' learning curves: ``trial``, ``rank``, ``objective``,
            ``best_epoch``, ``epoch``, ``train_loss``, ``valid_loss`` (lists).
        scatter: setting name -> {"points": [...], "reason": str | None}; a point has ``trial``,
            ``x``, ``gap``, ``gap_ratio``, ``objective``.
        importance: ``values`` (setting -> share, largest first), ``evaluator``, ``n_trials``,
            ``reason`` (why it is absent, or None).
        epochs: ``max_epochs``, ``max_epochs_source``, ``trials`` (trial, state, epochs),
            ``n_run``, ``n_saved``, ``saved_share``.
        review: ``notes``, ``confirmations``, ``holdouts``, ``comparisons`` (lists of plain dicts),
            ``n_holdouts`` and ``n_comparisons``;
            add more keys here (the template shows the section when any list is non-empty).
        made: ``command``, ``version``, ``time`` (UTC) of this board.
    """

    header: dict
    rows: list[dict]
    settings: list[str]
    setting_kinds: dict[str, str]
    progress: list[dict]
    curves: list[dict]
    scatter: dict[str, dict]
    importance: dict
    epochs: dict
    review: dict = field(default_factory=dict)
    made: dict = field(default_factory=dict)

    @property
    def has_review(self) -> bool:
        """True when the record holds notes, confirmations or holdout results for the study."""
        return any(isinstance(v, list) and v for v in self.review.values())


def collect_board(tracker, study: str | None = None, *, command: str | None = None,
                  now: str | None = None, n_curves: int = N_CURVES) -> BoardData:
    """Read one study of the record into a ``BoardData``.

    Learning curves are loaded only for the ``n_curves`` best complete trials.

    Args:
        tracker: an open ``sweep.tracker.Tracker``.
        study: the study's name; None for the file's only study.
        command: the command line that made the board (shown in the footer).
        now: the time to show as the board's making time (ISO text, UTC); default: now.
        n_curves: how many of the best complete trials get their learning curves drawn.

    Raises:
        StudyNotFound: no such study (or several and no name given).
    """
    record = tracker.find_study(study)
    dataset = tracker.load_dataset(record.dataset_sha256)
    spec, spec_problem = read_spec(record.spec_text)
    trials = tracker.load_trials(record.name)
    baselines = tracker.load_baselines(record.name, window="valid")
    rows, settings, kinds = collect_rows(record, spec, trials, baselines)
    epochs = collect_epochs(trials, spec)
    header = collect_header(record, dataset, spec, spec_problem, trials, rows, epochs)
    review = collect_review(tracker, record.name, objective=record.objective)
    return BoardData(
        header=header,
        rows=rows,
        settings=settings,
        setting_kinds=kinds,
        progress=collect_progress(trials, record.direction),
        curves=collect_curves(tracker, record.name, rows, n_curves),
        scatter=collect_scatter(trials),
        importance=collect_importance(trials, spec, record.direction),
        epochs=epochs,
        review=review,
        made={
            "command": command or f"volsweep board <record> --study {shlex.quote(record.name)}",
            "version": code_version(),
            "time": now or datetime.now(timezone.utc).isoformat(timespec="seconds"),
        },
    )


# ---------------------------------------------------------------------------------------- render


def _fmt(value, digits: int = 4) -> str:
    """A number for the page: 4 significant digits, "–" for missing or non-finite."""
    if value is None or isinstance(value, bool):
        return "–" if value is None else str(value).lower()
    if isinstance(value, float):
        if not math.isfinite(value):
            return "–"
        return f"{value:.{digits}g}"
    if isinstance(value, (list, tuple)):
        return ", ".join(f"[{_fmt(v, digits)}]" if isinstance(v, (list, tuple)) else _fmt(v, digits) for v in value)
    if isinstance(value, dict):
        return "; ".join(f"{k} {_fmt(v, digits)}" for k, v in value.items())
    return str(value)


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
    import plotly.io as pio

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
        states=("complete", "pruned", "failed", "running", "baseline"),
    )


def write_board(data: BoardData, figures, path: str | Path) -> Path:
    """Render the board and write it to ``path`` (UTF-8); returns the path.

    Raises:
        BoardError: the folder of ``path`` does not exist, or ``path`` is a folder.
    """
    path = _checked_out(path)
    path.write_text(render_board(data, figures), encoding="utf-8")
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
    from sweep.tracker import Tracker

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
