"""Fixtures shared by the board tests: the hand-made record of ``board_records.py`` and its board data."""

from __future__ import annotations

import pytest

from sweep.board import collect_board
from sweep.record import Tracker

from .board_records import COMMAND, NOW, write_record


@pytest.fixture
def tracker():
    t = Tracker.memory()
    write_record(t)
    yield t
    t.close()


@pytest.fixture
def data(tracker):
    return collect_board(tracker, "larkspur", command=COMMAND, now=NOW)
