"""Where the time of one training step goes: each precompiled numpy call of the core, timed alone.

Run: ``python tests/benchmarks/profile_core.py [--hidden 64,64] [--batch 64] [--dtype float64] [--models 1]``.
This is a script, not a test. It builds the engine behind ``train_mlp`` on the benchmark's data
(``bench_core.make_data``), runs two epochs, then times every call of the first batch's step and
of the evaluation pass, each repeated ``--reps`` times, and prints them with their operand shapes,
followed by the share of the step spent in matrix products, in the other calls of the forward and
backward pass, and in the optimizer. Timing calls one by one adds about 0.1 us to each.

Alongside, it times one large matrix product of the same dtype, the machine's practical peak, so
each product's rate can be read against it.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from threadpoolctl import threadpool_limits

from bench_core import N_IN, N_OUT, make_data, product_rate
from trainers.fit import TrainConfig, _Stack
from trainers.mlp import MLPConfig


def time_calls(ops: list, reps: int) -> np.ndarray:
    """Mean seconds of each call, the whole list run ``reps`` times in order."""
    spent = np.zeros(len(ops))
    clock = time.perf_counter
    for _ in range(reps):
        for i, op in enumerate(ops):
            t0 = clock()
            op()
            spent[i] += clock() - t0
    return spent / reps


def describe(op) -> tuple[str, str, float]:
    """Name, operand shapes and multiply-adds (products only) of one precompiled call."""
    func = getattr(op, "func", op)
    name = getattr(func, "__name__", type(func).__name__)
    args = [a for a in getattr(op, "args", ()) if isinstance(a, np.ndarray)]
    macs = 0.0
    if name == "matmul":
        a, b = args[0], args[1]
        macs = float(np.prod(a.shape[:-1])) * a.shape[-1] * b.shape[-1]
    return name, " ".join(str(a.shape) for a in args), macs


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--hidden", default="64,64", help="hidden widths, comma separated")
    parser.add_argument("--batch", type=int, default=64)
    parser.add_argument("--dtype", default="float64", choices=("float64", "float32"))
    parser.add_argument("--models", type=int, default=1, help="stacked networks K")
    parser.add_argument("--reps", type=int, default=200)
    args = parser.parse_args()
    threadpool_limits(limits=1)
    X, Y, Xv, Yv = make_data()
    hidden = tuple(int(h) for h in args.hidden.split(",") if h)
    cfg = MLPConfig(N_IN, N_OUT, hidden, dtype=args.dtype)
    tc = TrainConfig(batch_size=args.batch, max_epochs=10**6, patience=10**6, learning_rate=1e-3)
    stack = _Stack(cfg, tc, X, Y, Xv, Yv, [np.random.default_rng(s) for s in range(args.models)], None)
    for _ in range(2):
        stack.run_epoch()
    n_batches = -(-X.shape[0] // min(args.batch, X.shape[0]))
    step = stack.ops[:len(stack.ops) // n_batches]
    peak = product_rate(args.dtype)
    print(f"hidden {list(hidden)}, batch {args.batch}, {args.dtype}, K={args.models}; "
          f"large product: {2 * peak / 1e9:.1f} GFLOP/s")
    groups = {"products": 0.0, "forward/backward others": 0.0, "optimizer": 0.0}
    in_update = False
    print(f"{'us':>9} {'GFLOP/s':>8}  call")
    for op, sec in zip(step, time_calls(step, args.reps)):
        name, shapes, macs = describe(op)
        in_update = in_update or name == "advance"
        rate = f"{2 * macs / sec / 1e9:8.1f}" if macs else " " * 8
        print(f"{1e6 * sec:9.2f} {rate}  {name} {shapes}")
        key = "optimizer" if in_update else "products" if macs else "forward/backward others"
        groups[key] += sec
    total = sum(groups.values())
    print(f"step {1e6 * total:.1f} us, {len(step)} calls: "
          + ", ".join(f"{k} {100 * v / total:.0f} %" for k, v in groups.items()))
    ev = time_calls(stack.eval_ops, max(1, args.reps // 20))
    ev_macs = sum(describe(op)[2] for op in stack.eval_ops)
    print(f"evaluation pass on {stack.evaluator.out.shape[1]} rows: {1e3 * ev.sum():.2f} ms in "
          f"{len(stack.eval_ops)} calls, its products' work over its whole time: "
          f"{2 * ev_macs / ev.sum() / 1e9:.1f} GFLOP/s")


if __name__ == "__main__":
    main()
