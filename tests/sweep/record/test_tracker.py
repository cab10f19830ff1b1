"""Tests for sweep/tracker.py: every loader returns what was recorded.

Most tests run on ``Tracker.memory()``; file-based tests cover WAL, copying a file, several
worker processes, and optuna's RDBStorage sharing the file. The outside references are SQLite's
own behaviour (PRAGMA journal_mode / foreign_keys / typeof, https://sqlite.org/pragma.html),
numpy's ``.npy``/``.npz`` format read with ``allow_pickle=False``, and optuna's storage.
"""

import dataclasses
import multiprocessing
import shutil
import sqlite3
import zlib

import numpy as np
import pytest

from sweep.record import rows as _record_rows
from sample_records import CSV, SHA, assert_same_trial, make_dataset, make_study, make_trial
from sweep.record import BaselineRecord, ConfirmRecord, EpochRow, HoldoutRecord, NoteRecord
from sweep.record import RecordError, RecordNotFound, StudyNotFound, Tracker, TrialNotFound

@pytest.fixture
def tracker():
    t = Tracker.memory()
    t.save_study(make_study(), make_dataset())
    yield t
    t.close()


# ---------------------------------------------------------------- studies and datasets

def test_save_study_round_trips_study_and_dataset(tracker):
    assert tracker.find_study("coastal") == make_study()
    assert tracker.find_study() == make_study()
    # the CSV text comes back character for character, with the dropped-row notes
    assert tracker.load_dataset(SHA) == make_dataset()


def test_save_study_stores_a_dataset_once_per_sha256(tracker):
    tracker.save_study(make_study("inland"), make_dataset(source="elsewhere/brightwater.csv"))
    assert tracker.db["vs_datasets"].count == 1
    assert tracker.load_dataset(SHA).source == "prices/brightwater.csv"


def test_save_study_again_with_the_same_hashes_keeps_the_first(tracker):
    tracker.save_study(dataclasses.replace(make_study(), created="2027-01-01T00:00:00+00:00"), make_dataset())
    assert tracker.find_study().created == "2026-01-05T10:00:00+00:00"


def test_save_study_same_name_other_spec_raises(tracker):
    with pytest.raises(RecordError, match="already holds a study named 'coastal'.*another name"):
        tracker.save_study(make_study(spec_hash="spec2"), make_dataset())


def test_save_study_dataset_mismatch_raises():
    with pytest.raises(ValueError, match="names dataset 3f3f.*the dataset given is abab"):
        Tracker.memory().save_study(make_study(), make_dataset(sha="ab" * 32))


def test_find_study_names_the_studies_when_ambiguous_or_missing(tracker):
    tracker.save_study(make_study("inland"), make_dataset())
    with pytest.raises(StudyNotFound, match="holds 2 studies: coastal, inland; name the one"):
        tracker.find_study()
    with pytest.raises(StudyNotFound, match=r"no study named 'x' in :memory:; studies there: coastal, inland "
                                            r"\(see `volsweep list"):
        tracker.find_study("x")
    with pytest.raises(StudyNotFound, match="holds no study yet; run `volsweep run"):
        Tracker.memory().find_study()


def test_load_dataset_missing_raises():
    with pytest.raises(RecordNotFound, match="no dataset 000000000000"):
        Tracker.memory().load_dataset("0" * 64)


@pytest.mark.parametrize("direction, best_trial, best", [("minimize", 1, 0.1), ("maximize", 2, 0.9)])
def test_list_studies_counts_states_and_finds_the_best(direction, best_trial, best):
    t = Tracker.memory()
    t.save_study(make_study(direction=direction), make_dataset())
    for number, state, objective in [(0, "complete", 0.5), (1, "complete", 0.1), (2, "complete", 0.9),
                                     (3, "pruned", 0.05), (4, "running", None)]:
        t.record_trial(make_trial(number, state=state, objective=objective, arrays=False))
    (summary,) = t.list_studies()
    # pruned trials never count as best, whatever their value
    assert summary["trials"] == {"complete": 3, "pruned": 1, "failed": 0, "running": 1}
    assert (summary["n_trials"], summary["best_trial"], summary["best_objective"]) == (5, best_trial, best)
    assert (summary["dataset"], summary["dataset_sha256"], summary["n_rows"]) == ("prices/brightwater.csv", SHA, 2)


# ---------------------------------------------------------------- trials

def test_record_trial_round_trips_everything(tracker):
    trial = make_trial(3)
    tracker.record_trial(trial)
    assert_same_trial(tracker.load_trial("coastal", 3), trial)


def test_record_trial_stores_numpy_scalars_as_numbers(tracker):
    # sqlite-utils writes np.float32/np.int64 as BLOB bytes (library-notes); the record converts them
    trial = dataclasses.replace(make_trial(0, arrays=False), params={"lr": np.float32(0.5), "units": np.int64(8)},
                                objective=np.float32(0.25), best_epoch=np.int64(2))
    tracker.record_trial(trial)
    types = tracker.db.execute("SELECT typeof(objective), typeof(best_epoch) FROM vs_trials").fetchone()
    assert types == ("real", "integer")
    got = tracker.load_trial("coastal", 0)
    assert got.params == {"lr": 0.5, "units": 8} and type(got.params["units"]) is int
    assert got.objective == 0.25 and type(got.best_epoch) is int


def test_record_trial_replaces_epochs_and_arrays(tracker):
    tracker.record_trial(make_trial(0, state="running", n_epochs=5))
    final = make_trial(0, n_epochs=2, arrays=False)
    tracker.record_trial(final)
    got = tracker.load_trial("coastal", 0)
    # the stored trial is exactly the last record: two epochs, no forecasts or weights left behind
    assert_same_trial(got, final)
    assert len(got.epochs) == 2 and got.weights is None
    assert tracker.db["vs_trials"].count == 1


def test_record_trial_is_one_transaction(tracker, monkeypatch):
    first = make_trial(0)
    tracker.record_trial(first)

    def fail(arrays):
        raise RuntimeError("disk full")

    monkeypatch.setattr(_record_rows, "arrays_to_npz", fail)
    with pytest.raises(RuntimeError, match="disk full"):
        tracker.record_trial(make_trial(0, state="failed", n_epochs=1))
    monkeypatch.undo()
    # nothing of the failed write remains: the first record is intact, epochs included
    assert_same_trial(tracker.load_trial("coastal", 0), first)


def test_record_trial_keeps_nan_and_inf_losses(tracker):
    # SQLite stores NaN as NULL (sqlite.org/floatingpoint); required losses come back as NaN
    epochs = (EpochRow(1, 0.5, 0.6, None, 0.01), EpochRow(2, float("inf"), float("nan"), None, 0.01))
    trial = dataclasses.replace(make_trial(0, arrays=False), epochs=epochs, stop_reason="diverged")
    tracker.record_trial(trial)
    got = tracker.load_trial("coastal", 0).epochs
    assert got[0] == epochs[0]
    assert got[1].train_loss == float("inf") and np.isnan(got[1].valid_loss) and got[1].valid_score is None


def test_record_trial_unknown_study_raises(tracker):
    with pytest.raises(StudyNotFound, match="no study named 'other'.*studies there: coastal"):
        tracker.record_trial(make_trial(0, study="other"))


def test_load_trials_filters_and_attaches(tracker):
    trials = [make_trial(n, state=s) for n, s in enumerate(["complete", "pruned", "complete", "failed"])]
    for trial in reversed(trials):
        tracker.record_trial(trial)
    light = tracker.load_trials("coastal")
    assert [t.number for t in light] == [0, 1, 2, 3]
    # without the flags: no epochs, forecasts or weights
    assert all(t.epochs == () and t.valid_forecasts is None and t.weights is None for t in light)
    full = tracker.load_trials("coastal", states=["complete"], with_epochs=True, with_forecasts=True)
    assert [t.number for t in full] == [0, 2]
    for got, want in zip(full, [trials[0], trials[2]]):
        assert_same_trial(got, dataclasses.replace(want, weights=None), weights=False)
    assert [t.number for t in tracker.load_trials("coastal", states="pruned")] == [1]


def test_load_trials_bad_state_raises(tracker):
    with pytest.raises(ValueError, match="states must be taken from complete, pruned, failed, running; got \\['done'\\]"):
        tracker.load_trials("coastal", states=["done"])


def test_load_trial_missing_raises(tracker):
    tracker.record_trial(make_trial(0, arrays=False))
    tracker.record_trial(make_trial(1, arrays=False))
    with pytest.raises(TrialNotFound, match=r"study 'coastal' in :memory: has no trial 9 \(2 trials, numbers 0-1\)"):
        tracker.load_trial("coastal", 9)


def test_save_weights_round_trips_and_replaces(tracker):
    tracker.record_trial(make_trial(0, arrays=False))
    assert tracker.load_weights("coastal", 0) is None
    arrays = {"params": np.random.default_rng(0).standard_normal(100).astype(np.float32),
              "hidden": np.array([32, 16]), "activation": np.array("relu")}
    tracker.save_weights("coastal", 0, {"params": np.zeros(3)})
    tracker.save_weights("coastal", 0, arrays)
    got = tracker.load_weights("coastal", 0)
    assert sorted(got) == sorted(arrays)
    for key in arrays:
        np.testing.assert_array_equal(got[key], arrays[key])
        assert got[key].dtype == arrays[key].dtype


def test_save_weights_rejects_object_arrays(tracker):
    tracker.record_trial(make_trial(0, arrays=False))
    with pytest.raises(TypeError, match=r"weights\['cfg'\] has dtype object"):
        tracker.save_weights("coastal", 0, {"cfg": np.array([{"a": 1}], dtype=object)})


# ---------------------------------------------------------------- baselines and reviews

def test_record_baselines_round_trip_and_replace(tracker):
    rng = np.random.default_rng(0)
    records = [BaselineRecord(study="coastal", name=name, window=window, objective=float(rng.random()),
                              losses={"qlike": 0.2, "mse": 1e-8}, params={"lambda": 0.94},
                              forecasts=rng.random((20, 3)))
               for window in ("valid", "test") for name in ("ewma", "har")]
    tracker.record_baselines(records)
    replaced = dataclasses.replace(records[0], objective=9.0)
    tracker.record_baselines([replaced])
    got = tracker.load_baselines("coastal", "valid")
    # valid window only, by name; "ewma" now holds the replacement
    assert got == [replaced, records[1]]
    np.testing.assert_array_equal(got[0].forecasts, records[0].forecasts)
    assert len(tracker.load_baselines("coastal")) == 4
    with pytest.raises(ValueError, match="window must be one of valid, test"):
        tracker.load_baselines("coastal", "train")


def test_record_holdout_numbers_and_never_overwrites(tracker):
    tracker.record_trial(make_trial(2, arrays=False))
    first = tracker.record_holdout(HoldoutRecord(study="coastal", trial=2, created="2026-02-01T00:00:00+00:00",
                                                 command="volsweep holdout coastal.sqlite 2", again=False,
                                                 results={"mlp": {"qlike": 0.21}, "har": {"qlike": 0.24}}))
    second = tracker.record_holdout(dataclasses.replace(first, sequence=None, again=True))
    assert (first.sequence, second.sequence) == (1, 2)
    assert tracker.load_holdouts("coastal") == [first, second]
    with pytest.raises(RecordError, match="holdout #1 of study 'coastal' is already recorded"):
        tracker.record_holdout(first)
    with pytest.raises(TrialNotFound):
        tracker.record_holdout(dataclasses.replace(first, trial=5, sequence=None))


def test_record_confirmation_round_trips(tracker):
    tracker.record_trial(make_trial(1, arrays=False))
    record = ConfirmRecord(study="coastal", trial=1, created="2026-02-01T00:00:00+00:00", seeds=[[7, 100], [7, 101]],
                           objectives=[0.3, 0.31], gaps=[0.01, 0.02],
                           summary={"mean": 0.305, "std": 0.005, "min": 0.3, "max": 0.31}, extra={"n_epochs": [4, 5]})
    tracker.record_confirmation(record)
    tracker.record_confirmation(record)
    assert tracker.load_confirmations("coastal") == [record, record]
    assert tracker.load_confirmations("coastal", trial=0) == []


def test_add_note_keeps_every_note(tracker):
    tracker.record_trial(make_trial(1, arrays=False))
    notes = [NoteRecord(study="coastal", trial=None, created="2026-02-01T00:00:00+00:00", text="chosen: trial 1"),
             NoteRecord(study="coastal", trial=1, created="2026-02-01T00:00:00+00:00", text="chosen: trial 1",
                        author="reviewer")]
    for note in notes:
        tracker.add_note(note)
    assert tracker.load_notes("coastal") == notes
    assert tracker.load_notes("coastal", trial=1) == notes[1:]
    with pytest.raises(TrialNotFound):
        tracker.add_note(dataclasses.replace(notes[1], trial=4))


# ---------------------------------------------------------------- files

def test_open_missing_file_without_create_raises(tmp_path):
    with pytest.raises(RecordNotFound, match="no record file at .*nothing.sqlite"):
        Tracker.open(tmp_path / "nothing.sqlite", create=False)


def test_open_sets_wal_and_foreign_keys(tmp_path):
    # PRAGMA journal_mode and foreign_keys report the connection's settings (sqlite.org/pragma.html)
    with Tracker.open(tmp_path / "r.sqlite") as t:
        assert t.db.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
        assert t.db.execute("PRAGMA foreign_keys").fetchone()[0] == 1
        with pytest.raises(sqlite3.IntegrityError):
            t.db.execute("INSERT INTO vs_epochs (study, number, epoch) VALUES ('nobody', 0, 1)")


def test_open_rejects_files_that_are_not_records(tmp_path):
    junk = tmp_path / "notes.sqlite"
    junk.write_bytes(b"this is not a database, just text " * 200)
    with pytest.raises(RecordError, match="notes.sqlite is not a volsweep record"):
        Tracker.open(junk)
    other = tmp_path / "other.sqlite"
    sqlite3.connect(other).execute("CREATE TABLE x (a)").connection.commit()
    with pytest.raises(RecordError, match="has no vs_meta table \\(tables there: x\\)"):
        Tracker.open(other, create=False)


def test_copied_file_is_a_complete_study(tmp_path):
    path = tmp_path / "a" / "coastal.sqlite"
    path.parent.mkdir()
    trial = make_trial(0)
    with Tracker.open(path) as t:
        t.save_study(make_study(), make_dataset())
        t.record_trial(trial)
    copy = tmp_path / "b" / "coastal.sqlite"
    copy.parent.mkdir()
    shutil.copyfile(path, copy)  # the .sqlite alone: close() has folded the WAL back into it
    with Tracker.open(copy, create=False) as t:
        assert t.load_dataset(SHA).csv_text == CSV
        assert t.find_study() == make_study()
        assert_same_trial(t.load_trial("coastal", 0), trial)


def test_optuna_storage_shares_the_file(tmp_path):
    optuna = pytest.importorskip("optuna")
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    path = tmp_path / "coastal.sqlite"
    t = Tracker.open(path)
    t.save_study(make_study(), make_dataset())
    # optuna's RDBStorage makes its own tables (studies, trials, ...) beside ours
    study = optuna.create_study(study_name="coastal", storage=f"sqlite:///{path}", direction="minimize")
    study.optimize(lambda trial: (trial.suggest_float("x", -1, 1)) ** 2, n_trials=3)
    for number, frozen in enumerate(study.trials):
        t.record_trial(make_trial(number, objective=frozen.value, arrays=False))
    t.close()
    with Tracker.open(path, create=False) as again:
        assert [tr.objective for tr in again.load_trials("coastal")] == [f.value for f in study.trials]
        tables = set(again.db.table_names())
    assert {"studies", "trials", "vs_studies", "vs_trials"} <= tables
    reloaded = optuna.load_study(study_name="coastal", storage=f"sqlite:///{path}")
    assert len(reloaded.trials) == 3


def _write_trials(path, first, count):
    with Tracker.open(path, create=False) as t:
        for number in range(first, first + count):
            t.record_trial(make_trial(number, n_epochs=4))


@pytest.mark.slow
def test_two_processes_write_one_file(tmp_path):
    path = tmp_path / "shared.sqlite"
    with Tracker.open(path) as t:
        t.save_study(make_study(), make_dataset())
    ctx = multiprocessing.get_context("spawn")
    workers = [ctx.Process(target=_write_trials, args=(path, 50 * k, 50)) for k in range(2)]
    for w in workers:
        w.start()
    for w in workers:
        w.join(timeout=120)
    assert [w.exitcode for w in workers] == [0, 0]
    with Tracker.open(path, create=False) as t:
        trials = t.load_trials("coastal", with_epochs=True, with_forecasts=True)
        assert [tr.number for tr in trials] == list(range(100))
        assert all(len(tr.epochs) == 4 for tr in trials)
        assert_same_trial(t.load_trial("coastal", 77), make_trial(77, n_epochs=4))


def test_load_dataset_detects_damaged_rows(tracker):
    # the rows carry their own SHA-256 (hashlib), so a changed copy is caught on reading
    tracker.db.execute("UPDATE vs_datasets SET csv_zlib = ?", [zlib.compress(b"date\n")])
    with pytest.raises(RecordError, match="is damaged: the stored rows of dataset 3f3f3f3f3f3f do not match"):
        tracker.load_dataset(SHA)


def test_empty_selections_are_empty(tracker):
    tracker.record_trial(make_trial(0, arrays=False))
    assert tracker.load_trials("coastal", states=[]) == []
    tracker.record_baselines([])
    assert tracker.load_baselines("coastal") == []
    with pytest.raises(StudyNotFound, match="no study named 'inland'"):
        tracker.load_baselines("inland")


def test_a_writer_blocked_past_the_timeout_gets_a_busy_error(tmp_path):
    import sqlite_utils

    path = tmp_path / "busy.sqlite"
    with Tracker.open(path) as t:
        t.save_study(make_study(), make_dataset())
    holder = sqlite3.connect(path, isolation_level=None)
    holder.execute("BEGIN IMMEDIATE")  # another process holding the write lock (sqlite.org/lang_transaction.html)
    try:
        impatient = Tracker(sqlite_utils.Database(sqlite3.connect(path, timeout=0.1)), create=False)
        with pytest.raises(RecordError, match="busy.sqlite is busy: database is locked"):
            impatient.record_trial(make_trial(0, arrays=False))
        # WAL readers are not blocked by the writer
        assert impatient.find_study().name == "coastal"
    finally:
        holder.execute("ROLLBACK")
        holder.close()
    impatient.record_trial(make_trial(0, arrays=False))
    assert [tr.number for tr in impatient.load_trials("coastal")] == [0]
    impatient.close()
