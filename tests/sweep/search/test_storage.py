"""Tests of sweep/search/storage.py: the optuna storage behind a URL or journal path, the sampler and the pruner
a study file names.

Outside references: optuna itself (its own journal reader, its samplers and pruners built by hand from the
study file's numbers), SQLite's `PRAGMA busy_timeout` (https://sqlite.org/pragma.html), the JSON-lines
form of optuna's journal file (library notes, optuna 5), and several real processes sharing one journal.
"""

from __future__ import annotations

import dataclasses
import json
import multiprocessing
import os
from pathlib import Path

import numpy as np
import optuna
import pytest
from optuna.storages import JournalStorage, RDBStorage
from optuna.storages.journal import JournalFileBackend, JournalFileOpenLock

from sweep.search import PercentileRule, default_storage_path, make_pruner, make_sampler, open_storage, percentile_rule
from sweep.study import parse_spec, set_keys, suggest_params
from sweep.study.demo import demo_study_text

optuna.logging.set_verbosity(optuna.logging.WARNING)
pytestmark = pytest.mark.filterwarnings("ignore::optuna.exceptions.ExperimentalWarning")  # QMCSampler


def spec_with(**keys):
    """The demo study with some keys changed (parsed from text: no price file is read here)."""
    return parse_spec(set_keys(demo_study_text(), **keys), base_dir=Path("."))


def objective(trial):
    return (trial.suggest_float("x", -2.0, 2.0) - 0.5) ** 2


def test_default_storage_path_sits_beside_the_record():
    assert default_storage_path(Path("studies/x.sqlite")) == Path("studies/x.optuna.log")


# ---------------------------------------------------------------- storages


def test_open_storage_journal_path_writes_json_lines_optuna_reads_back(tmp_path):
    path = str(tmp_path / "x.optuna.log")
    storage = open_storage(path)
    assert isinstance(storage, JournalStorage)
    study = optuna.create_study(study_name="j", storage=storage, sampler=optuna.samplers.RandomSampler(seed=0))
    study.optimize(objective, n_trials=5)
    # optuna's journal is one JSON object a line
    lines = Path(path).read_text(encoding="utf-8").splitlines()
    assert len(lines) > 5 and all(isinstance(json.loads(line), dict) for line in lines)
    # optuna's own journal backend (not ours) reads the same trials back
    theirs = JournalStorage(JournalFileBackend(path, lock_obj=JournalFileOpenLock(path)))
    again = optuna.load_study(study_name="j", storage=theirs)
    assert [(t.number, t.params, t.value) for t in again.trials] == \
        [(t.number, t.params, t.value) for t in study.trials]


def test_open_storage_sqlite_url_has_a_30_second_busy_timeout(tmp_path):
    url = f"sqlite:///{tmp_path / 'x.sqlite'}"
    storage = open_storage(url)
    assert isinstance(storage, RDBStorage)
    # SQLite reports the connection's busy timeout in milliseconds (PRAGMA busy_timeout)
    conn = storage.engine.raw_connection()
    try:
        assert conn.cursor().execute("PRAGMA busy_timeout").fetchone()[0] == 30_000
    finally:
        conn.close()
    study = optuna.create_study(study_name="r", storage=storage, sampler=optuna.samplers.RandomSampler(seed=0))
    study.optimize(objective, n_trials=3)
    # optuna's own RDBStorage on the same URL sees the trials
    again = optuna.load_study(study_name="r", storage=RDBStorage(url))
    assert [t.value for t in again.trials] == [t.value for t in study.trials]


def _add_trials(path: str, n_trials: int) -> None:
    """A worker process: open the journal by its path, load the study and add trials (each names its process)."""
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    study = optuna.load_study(study_name="shared", storage=open_storage(path))

    def tagged(trial):
        trial.set_user_attr("pid", os.getpid())
        return objective(trial)

    study.optimize(tagged, n_trials=n_trials)


@pytest.mark.slow
def test_open_storage_journal_is_shared_by_real_processes(tmp_path):
    path = str(tmp_path / "shared.optuna.log")
    # this process creates the study and two trials; two spawned processes read them and append at once
    study = optuna.create_study(study_name="shared", storage=open_storage(path))
    study.optimize(objective, n_trials=2)
    ctx = multiprocessing.get_context("spawn")
    workers = [ctx.Process(target=_add_trials, args=(path, 10)) for _ in range(2)]
    for w in workers:
        w.start()
    for w in workers:
        w.join(timeout=120)
    assert [w.exitcode for w in workers] == [0, 0]
    # under the journal's lock no trial is lost or numbered twice, and this process reads them all
    trials = optuna.load_study(study_name="shared", storage=open_storage(path)).trials
    assert sorted(t.number for t in trials) == list(range(22))
    assert all(t.state == optuna.trial.TrialState.COMPLETE for t in trials)
    pids = [t.user_attrs.get("pid") for t in trials]
    assert {pid: pids.count(pid) for pid in set(pids)} == {None: 2, workers[0].pid: 10, workers[1].pid: 10}
    # every line the processes appended is a whole JSON object
    assert all(isinstance(json.loads(line), dict) for line in Path(path).read_text().splitlines())


# ---------------------------------------------------------------- samplers


def suggestions(sampler, space, n_trials: int = 6) -> list[dict]:
    """The settings `sampler` draws for `n_trials` trials of a fresh in-memory study."""
    out = []

    def record(trial):
        out.append(suggest_params(trial, space))
        return float(len(out))

    optuna.create_study(sampler=sampler).optimize(record, n_trials=n_trials)
    return out


@pytest.mark.parametrize("sampler, cls", [("tpe", optuna.samplers.TPESampler),
                                          ("random", optuna.samplers.RandomSampler)])
def test_make_sampler_seeds_each_worker_apart_and_reproducibly(sampler, cls):
    spec = spec_with(sampler=f'"{sampler}"')
    # worker ids are the record's liveness rows, from 1
    assert isinstance(make_sampler(spec, 1), cls)
    first = suggestions(make_sampler(spec, 1), spec.space)
    # the same study seed and worker draw the same settings again
    assert suggestions(make_sampler(spec, 1), spec.space) == first
    # another worker draws other settings, so two workers do not repeat each other's trials
    assert suggestions(make_sampler(spec, 2), spec.space) != first
    # another study seed draws other settings too
    assert suggestions(make_sampler(spec_with(sampler=f'"{sampler}"', seed="8"), 1), spec.space) != first


def test_make_sampler_takes_any_study_seed_and_keeps_release_seeds_for_small_ones():
    # optuna's samplers take seeds up to 2**32 - 1 (numpy's RandomState): a date-like study seed works too
    big = spec_with(sampler='"random"', seed="20240607")
    assert suggestions(make_sampler(big, 1), big.space) != suggestions(make_sampler(big, 2), big.space)
    # small seeds keep release 0.1's rule, study seed x 1000 + worker index, so old studies draw alike
    spec = spec_with(sampler='"random"')
    assert suggestions(make_sampler(spec, 1), spec.space) == \
        suggestions(optuna.samplers.RandomSampler(seed=spec.study.seed * 1000), spec.space)


def test_make_sampler_qmc_shares_the_study_seed_across_workers():
    spec = spec_with(sampler='"qmc"')
    assert isinstance(make_sampler(spec, 0), optuna.samplers.QMCSampler)
    # optuna's QMCSampler docs: samplers running in parallel must share one seed when scrambling,
    # or the sequence loses its low-discrepancy property; so every worker draws the same sequence
    assert suggestions(make_sampler(spec, 0), spec.space) == suggestions(make_sampler(spec, 3), spec.space)
    assert suggestions(make_sampler(spec_with(sampler='"qmc"', seed="8"), 0), spec.space) != \
        suggestions(make_sampler(spec, 0), spec.space)


def test_make_sampler_grid_visits_every_point_once_in_a_worker_order():
    spec = spec_with(sampler='"grid"', hidden_units="[4, 8]", layers="1", dropout="0.0",
                     learning_rate="[1e-3, 1e-2]", weight_decay="0.0")
    sampler = make_sampler(spec, 1)
    assert isinstance(sampler, optuna.samplers.GridSampler)
    # batch_size 3 x hidden_units 2 x patience 2 x learning_rate 2 = 24 points, each exactly once
    keys = ("batch_size", "hidden_units", "patience", "learning_rate")
    seen = [tuple(p[k] for k in keys) for p in suggestions(sampler, spec.space, n_trials=24)]
    assert len(set(seen)) == 24
    assert set(seen) == {(b, h, p, lr) for b in (32, 64, 128) for h in (4, 8) for p in (10, 20) for lr in (1e-3, 1e-2)}
    # each worker walks the grid in its own seeded order
    other = [tuple(p[k] for k in keys) for p in suggestions(make_sampler(spec, 2), spec.space, n_trials=24)]
    assert set(other) == set(seen) and other != seen


def test_make_sampler_and_pruner_refuse_unknown_names():
    spec = spec_with()
    with pytest.raises(ValueError, match="unknown sampler 'anneal'"):
        make_sampler(dataclasses.replace(spec, search=dataclasses.replace(spec.search, sampler="anneal")))
    with pytest.raises(ValueError, match="unknown pruner 'wilcoxon'"):
        make_pruner(dataclasses.replace(spec, search=dataclasses.replace(spec.search, pruner="wilcoxon")))


# ---------------------------------------------------------------- pruners


def _curves(n_trials=16, n_epochs=30, seed=0):
    rng = np.random.default_rng(seed)
    # falling validation curves with a level per trial and noise: some trials clearly worse
    return [rng.normal(1.0, 0.5) + 1.0 / np.arange(1, n_epochs + 1) + rng.normal(0, 0.02, n_epochs)
            for _ in range(n_trials)]


def decisions(pruner) -> list[tuple[int, int]]:
    """(trial, epoch) of every pruning decision of `pruner` on the same curves (optuna's report loop)."""
    study = optuna.create_study(study_name="curves", pruner=pruner, sampler=optuna.samplers.RandomSampler(seed=0))
    pruned = []
    for number, curve in enumerate(_curves()):
        trial = study.ask()
        for epoch, score in enumerate(curve, start=1):
            trial.report(float(score), epoch)
            if trial.should_prune():
                pruned.append((number, epoch))
                break
        if pruned and pruned[-1][0] == number:
            study.tell(trial, state=optuna.trial.TrialState.PRUNED)
        else:
            study.tell(trial, float(min(curve)))
    return pruned


def test_make_pruner_median_follows_the_study_file_numbers():
    spec = spec_with(pruner='"median"', startup_trials="3", warmup_epochs="4", max_epochs="30")
    assert isinstance(make_pruner(spec), optuna.pruners.MedianPruner)
    ours = decisions(make_pruner(spec))
    # optuna's MedianPruner built by hand from the file's startup_trials and warmup_epochs
    assert ours == decisions(optuna.pruners.MedianPruner(n_startup_trials=3, n_warmup_steps=4))
    assert ours and min(number for number, _ in ours) >= 3 and min(epoch for _, epoch in ours) >= 4
    # the view's percentile rule is the same pruner: the 50th percentile, the same numbers
    rule = percentile_rule(spec)
    assert rule == PercentileRule(50.0, 3, 4)
    assert decisions(rule.pruner()) == ours


def test_make_pruner_halving_prunes_only_at_its_rungs():
    spec = spec_with(pruner='"halving"', min_epochs="5", reduction_factor="3", max_epochs="30")
    assert isinstance(make_pruner(spec), optuna.pruners.SuccessiveHalvingPruner)
    ours = decisions(make_pruner(spec))
    assert ours == decisions(optuna.pruners.SuccessiveHalvingPruner(min_resource=5, reduction_factor=3))
    # successive halving (Jamieson and Talwalkar 2016; Li et al. 2018) decides at rungs
    # min_resource * reduction_factor^k: epochs 5 and 15 within 30 epochs
    assert ours and {epoch for _, epoch in ours} <= {5, 15}
    assert percentile_rule(spec) is None


def test_make_pruner_hyperband_uses_max_epochs_as_its_largest_budget():
    spec = spec_with(pruner='"hyperband"', min_epochs="5", reduction_factor="3", max_epochs="30")
    assert isinstance(make_pruner(spec), optuna.pruners.HyperbandPruner)
    ours = decisions(make_pruner(spec))
    assert ours == decisions(optuna.pruners.HyperbandPruner(min_resource=5, max_resource=30, reduction_factor=3))
    # no bracket decides before the smallest budget
    assert ours and min(epoch for _, epoch in ours) >= 5
    assert percentile_rule(spec) is None


def test_make_pruner_none_never_prunes():
    spec = spec_with(pruner='"none"')
    assert isinstance(make_pruner(spec), optuna.pruners.NopPruner)
    assert decisions(make_pruner(spec)) == []
    assert percentile_rule(spec) is None
