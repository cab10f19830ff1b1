"""Sample records shared by the record tests (test_tracker.py, test_schema.py, test_rows.py).

Invented values: a study "coastal" on the invented Brightwater prices, trials with seeded random arrays.
"""

import numpy as np

from sweep.record import DatasetRecord, EpochRow, StudyRecord, TrialRecord

CSV = "date,open,high,low,close\n2021-01-04,10.0,10.5,9.8,10.2\n2021-01-05,10.2,10.4,10.0,10.1\n"
SHA = "3f" * 32


def make_dataset(sha=SHA, source="prices/brightwater.csv") -> DatasetRecord:
    return DatasetRecord(sha256=sha, source=source, n_rows=2, first_date="2021-01-04", last_date="2021-01-05",
                         columns=["open", "high", "low", "close"], csv_text=CSV,
                         dropped=["line 4 (2021-01-06): high below low; fix: correct the row"])


def make_study(name="coastal", sha=SHA, spec_hash="spec1", direction="minimize") -> StudyRecord:
    return StudyRecord(
        name=name, spec_text='name = "coastal"\n[search]\nhidden = [8, 16]\n', spec_hash=spec_hash,
        search_hash="search1", created="2026-01-05T10:00:00+00:00", code_version="0.1.0", git_commit=None,
        packages={"numpy": "2.4.6", "optuna": "5.0.0"}, python="3.11.7", platform="Linux-6.1",
        machine="x86_64", dataset_sha256=sha, objective="qlike", direction=direction, task="regression",
        storage="sqlite:///coastal.sqlite", sampler="TPESampler(seed=7)", pruner="MedianPruner()",
        settings={"n_trials": 40, "workers": 2},
    )


def make_trial(number=0, study="coastal", state="complete", *, n_epochs=3, objective=0.25, arrays=True,
               rng=None) -> TrialRecord:
    rng = rng or np.random.default_rng(number)
    epochs = tuple(EpochRow(epoch=i + 1, train_loss=float(1 / (i + 2)), valid_loss=float(1 / (i + 1.5)),
                            valid_score=float(0.3 + 0.01 * i), seconds=0.02) for i in range(n_epochs))
    return TrialRecord(
        study=study, number=number, state=state, params={"hidden": [16, 8], "learning_rate": 1e-3,
                                                         "dropout": 0.1, "batch_size": 64},
        seed=[7, number], best_epoch=min(2, n_epochs), n_epochs=n_epochs,
        stop_reason="patience" if state == "complete" else ("pruned" if state == "pruned" else None),
        objective=objective, train_loss=0.33, valid_loss=0.4, gap=0.4 - 0.33, gap_ratio=0.4 / 0.33,
        started="2026-01-05T10:00:01+00:00", finished="2026-01-05T10:00:03+00:00", seconds=2.0, error=None,
        epochs=epochs,
        valid_forecasts=rng.standard_normal((30, 2)) if arrays else None,
        weights={"params": rng.standard_normal(41), "hidden": np.array([16, 8])} if arrays else None,
        worker="1234@host",
    )


def assert_same_trial(got: TrialRecord, want: TrialRecord, *, weights=True):
    # dataclass == leaves the array fields out; arrays are compared bit for bit
    assert got == want
    if want.valid_forecasts is None:
        assert got.valid_forecasts is None
    else:
        np.testing.assert_array_equal(got.valid_forecasts, want.valid_forecasts)
        assert got.valid_forecasts.dtype == np.float64
    if weights and want.weights is not None:
        assert sorted(got.weights) == sorted(want.weights)
        for key, array in want.weights.items():
            np.testing.assert_array_equal(got.weights[key], array)
            assert got.weights[key].dtype == array.dtype
