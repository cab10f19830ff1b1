"""Fixtures of the review tests: one tiny recorded study, built once per session.

``review_record`` is shared by every test and must stay as built (its SHA-256 is checked when the
session ends); a test that writes asks for ``writable_record`` (or ``writable``), a private copy.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import pytest

from review_study import build_review_study, copy_record
from sweep.record import Tracker


def _sha256(path: Path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


@pytest.fixture(scope="session")
def review_record(tmp_path_factory) -> Path:
    """The path of the shared record, built once per session; read it, never write to it."""
    record = build_review_study(tmp_path_factory.mktemp("review-study"))
    built = _sha256(record)
    yield record
    assert _sha256(record) == built, "a test wrote to the shared review record; give it `writable_record`"


@pytest.fixture
def writable_record(review_record, tmp_path) -> Path:
    """A private copy of the shared record, for a test that adds to it or edits it."""
    return copy_record(review_record, tmp_path)


@pytest.fixture
def tracker(review_record):
    """The shared record opened for reading."""
    with Tracker.open(review_record, create=False) as t:
        yield t


@pytest.fixture
def writable(writable_record):
    """A private copy of the record, opened."""
    with Tracker.open(writable_record, create=False) as t:
        yield t
