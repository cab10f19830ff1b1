"""One tiny recorded study shared by the review tests (test_review, test_compare, test_forecast).

An invented market from ``trainers.scenario`` (800 days, one instrument), 7 trials of at most 8 epochs,
one worker, a median pruner that prunes some trials. Built once per test process; tests that write to
the record work on a copy (``copy_record``).
"""

from __future__ import annotations

import shutil
from pathlib import Path

from sweep.search import run_study
from sweep.study import load_spec
from sweep.record import Tracker
from trainers.scenario import write_market_csv

STUDY = "review-tiny"
STUDY_TEXT = """
[study]
name = "review-tiny"
seed = 11
trials = 7
workers = 1
objective = "qlike"
[data]
file = "data/harbor_index.csv"
[target]
horizons = [1, 5]
[split]
valid = 0.25
test = 0.2
embargo = 5
[search]
sampler = "random"
pruner = "median"
startup_trials = 3
warmup_epochs = 2
[space]
batch_size = [32, 64]
hidden_units = { low = 4, high = 12 }
layers = 1
dropout = [0.0, 0.2]
patience = 4
learning_rate = { low = 1e-3, high = 1e-2, log = true }
weight_decay = 0.0
[training]
max_epochs = 8
[baselines]
include = ["random_walk", "ewma", "har", "garch"]
"""
_BUILT: dict[str, Path] = {}  # one build per test process (the tests share it read-only)


def review_study(tmp_path_factory) -> Path:
    """The path of the shared record (built on first use)."""
    if "record" not in _BUILT:
        root = tmp_path_factory.mktemp("review-study")
        (root / "data").mkdir()
        write_market_csv(root / "data", seed=3, n_days=800, instruments=["harbor_index"])
        (root / "study.toml").write_text(STUDY_TEXT, encoding="utf-8")
        record = root / "study.sqlite"
        run_study(load_spec(root / "study.toml"), record_path=record, n_workers=1)
        Tracker.open(record, create=False).close()  # fold the WAL into the file so copies are complete
        _BUILT["record"] = record
    return _BUILT["record"]


def copy_record(record: Path, folder: Path) -> Path:
    """A private copy of the record for a test that writes to it."""
    target = Path(folder) / "copy.sqlite"
    shutil.copyfile(record, target)
    return target
