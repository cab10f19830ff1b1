"""Benchmark of the sweep engine: what sampling, reporting and recording add to a trial, and 2 workers
against 1 on a fixed set of trials.

Run: python tests/benchmarks/bench_sweep.py [--quick]

Prints a table and one JSON line. The reference of each ratio is measured in the same run:
- overhead: one trial through the engine (ask, sample, train with a report and a pruning check per epoch,
  write the record, tell) against the same network trained by `fit_mlp` alone, same settings and seed;
- workers: the same fixed trials (enqueued settings, no pruning) run by 1 worker and by 2 worker processes;
- study: a whole sweep of the demo study (TPE, median pruner, 300 trials by default, one worker) with the
  engine's state in the record (optuna's journal as a table, the default) and in optuna's RDB storage in
  the same SQLite file; the trials are the same in both (same seeds, one worker), so the difference in
  seconds per trial is the storage's.
Targets: overhead under 5 % at 100 epochs; 2 workers at least 1.7x faster than 1.
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import optuna
from threadpoolctl import threadpool_limits

from sweep.study.demo import demo_study_text
from sweep.search import RECORD_STORAGE, inputs_from_record, open_storage, run_study
from sweep.search import run_trial, trial_seed
from sweep.search import PruningView
from sweep.search import params_to_configs
from sweep.study import set_keys
from sweep.record import Tracker
from trainers.fit import fit_mlp
from trainers.scenario import write_market_csv

FIXED = {"batch_size": 32, "hidden_units": 16, "layers": 2, "dropout": 0.1, "patience": 1000,
         "learning_rate": 1e-3, "weight_decay": 1e-5, "activation": "relu"}


def _study_text(trials: int, epochs: int, workers: int, name: str) -> str:
    # patience above max_epochs: every trial runs all its epochs
    return set_keys(demo_study_text(), name=f'"{name}"', trials=str(trials), workers=str(workers),
                    max_epochs=str(epochs), pruner='"none"', sampler='"random"', patience="[1000, 1001]",
                    startup_trials="1", warmup_epochs="1", min_epochs="1")


def _spec(folder: Path, trials: int, epochs: int, workers: int, name: str):
    path = folder / f"{name}.toml"
    path.write_text(_study_text(trials, epochs, workers, name))
    from sweep.study import load_spec

    return load_spec(path)


def _storage(kind: str, record: Path) -> str:
    """The storage of each kind for a record: the record's engine log, optuna's RDB in the record, a journal file."""
    return {"record": RECORD_STORAGE, "rdb": f"sqlite:///{record}",
            "journal": str(record.with_suffix(".optuna.log"))}[kind]


def bench_study(folder: Path, n_trials: int, kind: str) -> dict:
    """Wall seconds per trial of a whole demo sweep, and the engine's share of it (record and storage writes)."""
    name = f"study-{kind}"
    text = set_keys(demo_study_text(), name=f'"{name}"', trials=str(n_trials), workers="1")
    path = folder / f"{name}.toml"
    path.write_text(text)
    from sweep.study import load_spec

    spec = load_spec(path)
    record = folder / f"{name}.sqlite"
    run_study(spec, record_path=record, storage=_storage(kind, record), n_trials=0, n_workers=1)  # baselines
    t0 = time.perf_counter()
    summary = run_study(spec, record_path=record, storage=_storage(kind, record), n_trials=n_trials, n_workers=1)
    wall = time.perf_counter() - t0
    with Tracker.open(record, create=False) as tracker:
        trials = tracker.load_trials(name)
    training = sum(t.seconds for t in trials)  # each trial's own time, from asking the engine to recording it
    return {"storage": kind, "trials": len(trials), "wall_s": wall, "per_trial_s": wall / len(trials),
            "counts": summary.counts, "best": summary.best, "outside_trials": (wall - training) / wall}


def bench_overhead(folder: Path, n_trials: int, epochs: int, storage_kind: str) -> dict:
    """Median over trials of (engine trial seconds - plain fit seconds) / plain fit seconds."""
    spec = _spec(folder, n_trials, epochs, 1, f"overhead-{storage_kind}")
    record = folder / f"overhead-{storage_kind}.sqlite"
    storage = _storage(storage_kind, record)
    # create the study and its record (baselines included) without running trials
    run_study(spec, record_path=record, storage=storage, n_trials=0, n_workers=1)
    tracker = Tracker.open(record, create=False)
    spec_r, inputs = inputs_from_record(tracker, tracker.find_study(spec.study.name))
    study = optuna.load_study(study_name=spec.study.name, storage=open_storage(storage, record_path=record),
                              sampler=optuna.samplers.TPESampler(seed=0))
    # a median pruner that checks every epoch (no start-up trials, no warm-up) but never has enough
    # trials at a step to prune: every trial pays for a pruning decision per epoch and runs all epochs
    view = PruningView(optuna.pruners.MedianPruner(n_startup_trials=0, n_warmup_steps=0, n_min_trials=10**6),
                       epochs_per_fold=epochs)
    mlp_config, train_config = params_to_configs(FIXED, n_inputs=inputs.n_inputs, n_outputs=inputs.n_outputs,
                                                 task=inputs.task, training=spec_r.training)

    def through_engine():
        t0 = time.perf_counter()
        run_trial(study, spec_r, inputs, tracker, view)
        engine.append(time.perf_counter() - t0)

    def plain_fit(number):
        t0 = time.perf_counter()
        fit_mlp(mlp_config, train_config, inputs.X["train"], inputs.y["train"], inputs.X["valid"],
                inputs.y["valid"], rng=np.random.default_rng(trial_seed(spec.study.seed, number)),
                valid_score=inputs.scorer("valid"))
        plain.append(time.perf_counter() - t0)

    engine, plain = [], []
    for i in range(n_trials):
        study.enqueue_trial(FIXED)
        number = study.trials[-1].number  # the waiting trial the engine will run next
        if i % 2:  # alternate the order so that drift in the machine's speed cancels
            plain_fit(number)
            through_engine()
        else:
            through_engine()
            plain_fit(number)
    ratios = [(e - p) / p for e, p in zip(engine, plain)]
    return {"storage": storage_kind, "epochs": epochs, "trial_s": statistics.median(engine),
            "fit_s": statistics.median(plain), "overhead": statistics.median(ratios)}


def bench_workers(folder: Path, n_trials: int, epochs: int) -> dict:
    """Wall seconds for the same enqueued trials with 1 and 2 workers."""
    times = {}
    for workers in (1, 2):
        name = f"workers-{workers}"
        spec = _spec(folder, n_trials, epochs, workers, name)
        record = folder / f"{name}.sqlite"
        storage = RECORD_STORAGE
        run_study(spec, record_path=record, storage=storage, n_trials=0, n_workers=1)
        study = optuna.load_study(study_name=name, storage=open_storage(storage, record_path=record))
        for _ in range(n_trials):
            study.enqueue_trial(FIXED)
        t0 = time.perf_counter()
        summary = run_study(spec, record_path=record, storage=storage, n_trials=n_trials, n_workers=workers)
        times[workers] = time.perf_counter() - t0
        assert summary.counts["complete"] == n_trials, summary.counts
    return {"trials": n_trials, "epochs": epochs, "one_worker_s": times[1], "two_workers_s": times[2],
            "speedup": times[1] / times[2]}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer trials (a smoke run, noisier)")
    parser.add_argument("--study-trials", type=int, default=300, help="trials of the whole-sweep measure")
    args = parser.parse_args(argv)
    optuna.logging.set_verbosity(optuna.logging.WARNING)
    with tempfile.TemporaryDirectory() as tmp, threadpool_limits(limits=1):
        folder = Path(tmp)
        (folder / "data").mkdir()
        write_market_csv(folder / "data", seed=7)
        n = 3 if args.quick else 12
        overhead = [bench_overhead(folder, n, 100, kind) for kind in ("record", "rdb", "journal")]
        workers = bench_workers(folder, 8 if args.quick else 48, 60 if args.quick else 100)
        n_study = 20 if args.quick else args.study_trials
        sweeps = [bench_study(folder, n_study, kind) for kind in ("record", "rdb")]
    print(f"{'storage':<10}{'epochs':>8}{'trial s':>10}{'fit s':>10}{'overhead':>10}")
    for row in overhead:
        print(f"{row['storage']:<10}{row['epochs']:>8}{row['trial_s']:>10.3f}{row['fit_s']:>10.3f}"
              f"{row['overhead']:>10.1%}")
    print(f"workers: {workers['trials']} trials x {workers['epochs']} epochs: 1 worker {workers['one_worker_s']:.1f} s, "
          f"2 workers {workers['two_workers_s']:.1f} s, speedup {workers['speedup']:.2f}x")
    print(f"{'sweep':<10}{'trials':>8}{'wall s':>10}{'s/trial':>10}{'outside':>10}  counts, best")
    for row in sweeps:
        print(f"{row['storage']:<10}{row['trials']:>8}{row['wall_s']:>10.1f}{row['per_trial_s']:>10.3f}"
              f"{row['outside_trials']:>10.1%}  {row['counts']}, {row['best']:.6g}")
    print(json.dumps({"overhead": {r["storage"]: round(r["overhead"], 4) for r in overhead},
                      "two_worker_speedup": round(workers["speedup"], 3),
                      "sweep_s_per_trial": {r["storage"]: round(r["per_trial_s"], 4) for r in sweeps},
                      "rdb_over_record": round(sweeps[1]["per_trial_s"] / sweeps[0]["per_trial_s"], 3)}))
    return 0


if __name__ == "__main__":
    sys.exit(main())
