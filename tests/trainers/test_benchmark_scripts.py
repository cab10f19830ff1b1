"""The benchmark scripts stay runnable, and their work count matches the calls the core really makes."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

BENCH = Path(__file__).resolve().parents[1] / "benchmarks"
sys.path.insert(0, str(BENCH))

import bench_core  # noqa: E402
from profile_core import describe  # noqa: E402

from trainers.fit import TrainConfig, _Stack  # noqa: E402
from trainers.mlp import MLPConfig  # noqa: E402


@pytest.mark.parametrize("hidden", [(64,), (64, 64), (8, 5, 7)])
@pytest.mark.parametrize("batch", [16, 256, 4000])
def test_epoch_macs_counts_the_products_of_one_epoch(hidden, batch):
    # the formula in bench_core against the shapes of every matmul the engine runs in one epoch
    X, Y, Xv, Yv = bench_core.make_data()
    cfg = MLPConfig(bench_core.N_IN, bench_core.N_OUT, hidden)
    tc = TrainConfig(batch_size=batch, max_epochs=2)
    stack = _Stack(cfg, tc, X, Y, Xv, Yv, [np.random.default_rng(0)], None)
    counted = sum(describe(op)[2] for op in stack.ops + stack.eval_ops)
    assert counted == bench_core.epoch_macs(hidden)


@pytest.mark.slow
def test_profile_script_runs_and_reports_each_call():
    out = subprocess.run([sys.executable, str(BENCH / "profile_core.py"), "--hidden", "16", "--batch", "500",
                          "--reps", "2"], capture_output=True, text=True, cwd=BENCH, timeout=120)
    assert out.returncode == 0, out.stderr
    assert "matmul (1, 16, 21) (1, 21, 500) (1, 16, 500)" in out.stdout
    assert "step " in out.stdout and "evaluation pass on 5000 rows" in out.stdout
