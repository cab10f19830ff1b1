"""One tiny recorded study for the review tests, and helpers that read it outside the review code.

An invented market from ``trainers.scenario`` (800 days, one instrument), 7 trials of at most 8 epochs,
one worker, a median pruner that prunes some trials. ``conftest.py`` builds it once per test session
(``review_record``, read-only) and gives tests that write a private copy (``writable_record``).
"""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np

from sweep.record import Tracker
from sweep.search import inputs_from_record, params_to_configs, run_study
from sweep.study import load_spec
from trainers.fit import fit_mlp
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


def build_review_study(folder: Path) -> Path:
    """Run the tiny study in ``folder`` (an empty folder) and return the path of its record."""
    folder = Path(folder)
    (folder / "data").mkdir()
    write_market_csv(folder / "data", seed=3, n_days=800, instruments=["harbor_index"])
    (folder / "study.toml").write_text(STUDY_TEXT, encoding="utf-8")
    record = folder / "study.sqlite"
    run_study(load_spec(folder / "study.toml"), record_path=record, n_workers=1)
    Tracker.open(record, create=False).close()  # fold the WAL into the file so copies are complete
    return record


def copy_record(record: Path, folder: Path) -> Path:
    """A private copy of the record for a test that writes to it."""
    target = Path(folder) / "copy.sqlite"
    shutil.copyfile(record, target)
    return target


def trials_in_state(tracker: Tracker, state: str):
    """The study's trials in one state, with their epochs, in trial order."""
    return [t for t in tracker.load_trials(STUDY, with_epochs=True) if t.state == state]


def fit_alone(tracker: Tracker, trial, seed):
    """The trial's settings trained by the training loop directly (``trainers.fit.fit_mlp``), outside the
    review code."""
    study = tracker.find_study(STUDY)
    spec, inputs = inputs_from_record(tracker, study)
    mlp, train = params_to_configs(trial.params, n_inputs=inputs.n_inputs, n_outputs=inputs.n_outputs,
                                   task=inputs.task, training=spec.training)
    return fit_mlp(mlp, train, inputs.X["train"], inputs.y["train"], inputs.X["valid"], inputs.y["valid"],
                   rng=np.random.default_rng(seed), valid_score=inputs.scorer("valid"))
