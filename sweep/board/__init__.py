"""The study board: one static HTML file that opens anywhere, with no server and no network.

Three steps, each testable on its own:

1. ``collect_board(tracker, study)`` (``data``) reads the record into a ``BoardData`` of typed values
   (``values``; the review section's in ``reviews``): the header, the ranking rows, the learning curves
   of the best trials, the points of the pictures, setting importance, epochs used, and the review records;
2. ``build_figures(data)`` (``figures``) turns those values into plotly figures;
3. ``render_board(data, figures)`` (``render``) fills the jinja2 template (autoescaped) and inlines the
   CSS, the small sorting/filtering script and plotly.js once; ``write_board`` writes the file.

``write_study_board(record_path, study=..., out=...)`` does all three.

Example:
    >>> data = collect_board(Tracker.open("studies/demo.sqlite"), "harbor-demo")  # doctest: +SKIP
    >>> write_board(data, build_figures(data), "board.html")                     # doctest: +SKIP
"""

from sweep.board.data import N_CURVES, collect_board, saved_share
from sweep.board.figures import PLOT_CONFIG, build_figures
from sweep.board.render import default_board_path, render_board, write_board, write_study_board
from sweep.board.reviews import BoardReview, Comparison, Confirmation, HoldoutShown, Note, RankingSentence
from sweep.board.values import (
    BestBaseline,
    BestTrial,
    BoardData,
    BoardHeader,
    DatasetFacts,
    EpochCount,
    EpochUse,
    GapPoint,
    GapPoints,
    LearningCurve,
    MadeBy,
    ProgressPoint,
    TargetFacts,
)
from sweep.errors import BoardError

__all__ = [
    "N_CURVES", "PLOT_CONFIG", "BestBaseline", "BestTrial", "BoardData", "BoardError", "BoardHeader", "BoardReview",
    "Comparison", "Confirmation", "DatasetFacts", "EpochCount", "EpochUse", "GapPoint", "GapPoints", "HoldoutShown",
    "LearningCurve", "MadeBy", "Note", "ProgressPoint", "RankingSentence", "TargetFacts", "build_figures",
    "collect_board", "default_board_path", "render_board", "saved_share", "write_board", "write_study_board",
]
