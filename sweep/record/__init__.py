"""The record: one SQLite file holding studies, their data, trials and reviews.

`values` holds the record's value objects (frozen dataclasses, no SQL); `rows` turns them into table
rows; `schema` owns the tables, their upgrades, write transactions and lookups; `Tracker` (`tracker`) is
the one class that reads and writes a record, with the review log's SQL in `reviews`. `ranking` and
`reports` are pure summaries of what a tracker returns; `provenance` says where and with what a study
was made.
"""

from sweep.errors import RecordError, RecordNotFound, StudyNotFound, TrialNotFound
from sweep.record.liveness import GRACE_SECONDS, HEARTBEAT_SECONDS
from sweep.record.provenance import PACKAGES, code_version, collect_provenance, git_commit, package_versions
from sweep.record.ranking import SORT_KEYS, baseline_row, rank_rows, trial_row
from sweep.record.reports import (
    CurvePoint, DatasetSummary, RankRow, ShowReport, StudyList, StudyProvenance, StudySummary, TopReport,
    TrialDetail, TrialRow, list_report, show_report, top_report,
)
from sweep.record.schema import SCHEMA_VERSION
from sweep.record.tracker import Tracker
from sweep.record.values import (
    BASELINE_WINDOWS, COMPARISON_WINDOWS, DIRECTIONS, STOP_REASONS, TRIAL_STATES, BaselineRecord,
    ComparisonRecord, ConfirmRecord, DatasetRecord, EpochRow, HoldoutRecord, NoteRecord, StudyRecord,
    TrialRecord, check_weights, finite_or_none, format_number, is_finite, plain, utc_now,
)

__all__ = [
    "GRACE_SECONDS", "HEARTBEAT_SECONDS",
    "BASELINE_WINDOWS", "COMPARISON_WINDOWS", "DIRECTIONS", "PACKAGES", "SCHEMA_VERSION", "SORT_KEYS",
    "STOP_REASONS", "TRIAL_STATES", "BaselineRecord", "ComparisonRecord", "ConfirmRecord", "CurvePoint",
    "DatasetRecord", "DatasetSummary", "EpochRow", "HoldoutRecord", "NoteRecord", "RankRow", "RecordError",
    "RecordNotFound", "ShowReport", "StudyList", "StudyNotFound", "StudyProvenance", "StudyRecord",
    "StudySummary", "TopReport", "Tracker", "TrialDetail", "TrialNotFound", "TrialRecord", "TrialRow",
    "baseline_row", "check_weights", "code_version", "collect_provenance", "finite_or_none", "format_number",
    "git_commit", "is_finite", "list_report", "package_versions", "plain", "rank_rows", "show_report",
    "top_report", "trial_row", "utc_now",
]
