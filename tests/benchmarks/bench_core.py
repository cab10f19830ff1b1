"""Seconds per epoch of our numpy core against scikit-learn's MLPRegressor and (if importable) PyTorch on CPU.

Run: ``python tests/benchmarks/bench_core.py [--reps 7] [--warmup 2]``. This is a script, not a test.

Same data and shapes for everyone: 4,000 training rows, 20 inputs, 3 outputs, hidden [64] and [64, 64],
relu, Adam (lr 1e-3), batch sizes 16, 64 and 256, float64 and float32, one BLAS thread.

* ours: one epoch of ``train_mlp`` (shuffle, mini-batch steps, then the evaluation-mode training and
  validation losses on 4,000 + 1,000 rows, which the others do not compute); the evaluation alone is
  timed too and shown in its own column;
* scikit-learn: one ``MLPRegressor.partial_fit`` over the 4,000 rows (one epoch, shuffled);
* PyTorch: one epoch of the usual loop (randperm, zero_grad, forward, MSELoss, backward, Adam step);
* peak %: the matrix products of our epoch (``epoch_macs``) timed at the rate of one large product
  measured in the same run, as a share of our measured epoch: how close the core runs to the machine;
* stacked: one epoch of K=8 networks trained together (``fit_mlp_stacked``'s engine) against 8 single
  runs, at batch 16.

Configurations and contenders are interleaved round by round; the first ``--warmup`` rounds are
dropped. Times shown are medians over the remaining rounds; each ratio is the median of the
rounds' own ratios (``paired``), so a drift of the machine between rounds cancels. The table is
followed by one JSON line with the ratios (reference seconds / our seconds; above 1 means we are
faster) and the targets.
"""

from __future__ import annotations

import argparse
import json
import platform
import statistics
import time
import warnings

import numpy as np
import sklearn
from sklearn.exceptions import ConvergenceWarning
from sklearn.neural_network import MLPRegressor

from trainers.fit import TrainConfig, _Stack, train_mlp
from trainers.mlp import MLPConfig

try:
    import torch
except ImportError:  # PyTorch is not a dependency; its column is left out
    torch = None

from threadpoolctl import threadpool_info, threadpool_limits  # noqa: E402  (after the BLAS libraries load)

N_TRAIN, N_VALID, N_IN, N_OUT, K_STACK = 4000, 1000, 20, 3, 8
HIDDEN = ((64,), (64, 64))
BATCHES = (16, 64, 256)
DTYPES = ("float64", "float32")


def make_data(seed: int = 0):
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((N_TRAIN + N_VALID, N_IN))
    W = rng.standard_normal((N_IN, N_OUT)) / np.sqrt(N_IN)
    Y = np.tanh(X @ W) + 0.1 * rng.standard_normal((N_TRAIN + N_VALID, N_OUT))
    return X[:N_TRAIN], Y[:N_TRAIN], X[N_TRAIN:], Y[N_TRAIN:]


class Ours:
    def __init__(self, hidden, batch, dtype, data):
        X, Y, Xv, Yv = data
        cfg = MLPConfig(N_IN, N_OUT, hidden, dtype=dtype)
        tc = TrainConfig(batch_size=batch, max_epochs=10**6, patience=10**6, learning_rate=1e-3)
        self.run = iter(train_mlp(cfg, tc, X, Y, Xv, Yv, rng=np.random.default_rng(0)))

    def epoch(self):
        next(self.run)


class OursEval:
    """Only the evaluation part of our epoch (losses on the 4,000 + 1,000 rows), to show its share."""

    def __init__(self, ours: Ours):
        self.stack = ours.run._stack  # the engine behind train_mlp

    def epoch(self):
        st = self.stack
        for op in st.eval_ops:
            op()
        out, n = st.evaluator.out, st.n_train
        st._evaluate(out[0, :n], out[0, n:])


class Stacked:
    def __init__(self, hidden, batch, dtype, data):
        X, Y, Xv, Yv = data
        cfg = MLPConfig(N_IN, N_OUT, hidden, dtype=dtype)
        tc = TrainConfig(batch_size=batch, max_epochs=10**6, patience=10**6, learning_rate=1e-3)
        self.stack = _Stack(cfg, tc, X, Y, Xv, Yv, [np.random.default_rng(s) for s in range(K_STACK)], None)

    def epoch(self):
        self.stack.run_epoch()


class Sklearn:
    def __init__(self, hidden, batch, dtype, data):
        X, Y, _, _ = data
        self.X, self.Y = X.astype(dtype), Y.astype(dtype)
        self.model = MLPRegressor(hidden_layer_sizes=hidden, solver="adam", learning_rate_init=1e-3,
                                  batch_size=batch, shuffle=True, random_state=0)

    def epoch(self):
        self.model.partial_fit(self.X, self.Y)


class Torch:
    def __init__(self, hidden, batch, dtype, data):
        X, Y, _, _ = data
        tdt = torch.float64 if dtype == "float64" else torch.float32
        torch.manual_seed(0)
        layers, width = [], N_IN
        for h in hidden:
            layers += [torch.nn.Linear(width, h), torch.nn.ReLU()]
            width = h
        layers.append(torch.nn.Linear(width, N_OUT))
        self.model = torch.nn.Sequential(*layers).to(tdt)
        self.opt = torch.optim.Adam(self.model.parameters(), lr=1e-3)
        self.loss = torch.nn.MSELoss()
        self.X, self.Y = torch.tensor(X, dtype=tdt), torch.tensor(Y, dtype=tdt)
        self.batch = batch

    def epoch(self):
        perm = torch.randperm(N_TRAIN)
        for s in range(0, N_TRAIN, self.batch):
            idx = perm[s:s + self.batch]
            self.opt.zero_grad()
            loss = self.loss(self.model(self.X[idx]), self.Y[idx])
            loss.backward()
            self.opt.step()


def epoch_macs(hidden) -> int:
    """Multiply-adds in the matrix products of one of our epochs (biases folded in as a row of ones).

    Per training row: forward P, weight gradients P, and the backward products into every hidden layer
    (the weights without their bias row, input layer excluded); then the evaluation forward, P per row
    of the training and validation windows. P = n_params.
    """
    widths = (N_IN, *hidden, N_OUT)
    p = sum((a + 1) * b for a, b in zip(widths[:-1], widths[1:]))
    back = sum(a * b for a, b in zip(widths[1:-1], widths[2:]))
    return N_TRAIN * (2 * p + back) + (N_TRAIN + N_VALID) * p


def product_rate(dtype: str) -> float:
    """Multiply-adds per second of one large (64, 65) @ (65, 4096) product: this machine's practical peak."""
    rng = np.random.default_rng(0)
    a, b = rng.standard_normal((64, 65)).astype(dtype), rng.standard_normal((65, 4096)).astype(dtype)
    out = np.empty((64, 4096), dtype)
    return 64 * 65 * 4096 / min(timed(lambda: np.matmul(a, b, out)) for _ in range(30))


def paired(times: dict, ref: str, ours) -> float:
    """Median over rounds of (seconds of ``ref``) / (our seconds) within each round.

    The contenders of one case run back to back in every round, so a drift of the machine's speed
    between rounds (this shared machine drifts by 10-40 %) cancels in each round's ratio.
    ``ours`` is a function of one round's times (a dict name -> seconds), giving our seconds.
    """
    rounds = [dict(zip(times, r)) for r in zip(*times.values())]
    return statistics.median(r[ref] / max(ours(r), 1e-9) for r in rounds)


def timed(fn) -> float:
    t0 = time.perf_counter()
    fn()
    return time.perf_counter() - t0


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reps", type=int, default=7, help="measured rounds (median reported), >= 5")
    parser.add_argument("--warmup", type=int, default=2, help="rounds dropped first")
    args = parser.parse_args()
    limiter = threadpool_limits(limits=1)  # noqa: F841  (kept alive for the whole run)
    if torch is not None:
        torch.set_num_threads(1)
    warnings.filterwarnings("ignore", category=ConvergenceWarning)
    data = make_data()

    contenders = {"ours": Ours, "sklearn": Sklearn}
    if torch is not None:
        contenders["torch"] = Torch
    cases = {}
    for hidden in HIDDEN:
        for batch in BATCHES:
            for dtype in DTYPES:
                objs = {name: cls(hidden, batch, dtype, data) for name, cls in contenders.items()}
                objs["ours_eval"] = OursEval(objs["ours"])
                cases[(hidden, batch, dtype)] = objs
    for hidden in HIDDEN:
        cases[(hidden, 16, "float64", "stack")] = {"single": Ours(hidden, 16, "float64", data),
                                                    "stacked": Stacked(hidden, 16, "float64", data)}
    times = {key: {name: [] for name in objs} for key, objs in cases.items()}
    rates = {dtype: [] for dtype in DTYPES}
    for rnd in range(args.warmup + args.reps):
        for dtype in DTYPES:
            rates[dtype].append(product_rate(dtype))
        for key, objs in cases.items():
            for name, obj in objs.items():
                t = timed(obj.epoch)
                if rnd >= args.warmup:
                    times[key][name].append(t)
    med = {key: {name: statistics.median(v) for name, v in d.items()} for key, d in times.items()}
    peak = {dtype: max(v) for dtype, v in rates.items()}

    print(f"numpy {np.__version__}, scikit-learn {sklearn.__version__}, torch "
          f"{torch.__version__ if torch is not None else 'not installed'}, python {platform.python_version()}; "
          f"BLAS threads: {[i['num_threads'] for i in threadpool_info()]}; median of {args.reps} rounds; "
          "ratios are medians of the rounds' own ratios")
    head = f"{'hidden':<9}{'batch':>6} {'dtype':<8}{'ours ms':>9}{'(eval ms)':>10}{'sklearn ms':>11}" \
           f"{'torch ms':>10}{'sk/ours':>9}{'torch/ours':>11}{'sk/ours-no-eval':>16}{'peak %':>8}"
    print(head)
    print("-" * len(head))
    sk_ratio, torch_ratio, no_eval, torch_no_eval, share = {}, {}, {}, {}, {}
    for key, m in med.items():
        if len(key) == 4:
            continue
        hidden, batch, dtype = key
        label = f"h{'x'.join(map(str, hidden))}_b{batch}_{dtype}"
        t = times[key]
        sk_ratio[label] = paired(t, "sklearn", lambda r: r["ours"])
        no_eval[label] = paired(t, "sklearn", lambda r: r["ours"] - r["ours_eval"])
        line = (f"{str(list(hidden)):<9}{batch:>6} {dtype:<8}{1e3 * m['ours']:>9.2f}{1e3 * m['ours_eval']:>10.2f}"
                f"{1e3 * m['sklearn']:>11.2f}")
        if "torch" in m:
            torch_ratio[label] = paired(t, "torch", lambda r: r["ours"])
            torch_no_eval[label] = paired(t, "torch", lambda r: r["ours"] - r["ours_eval"])
            line += f"{1e3 * m['torch']:>10.2f}{sk_ratio[label]:>9.2f}{torch_ratio[label]:>11.2f}"
        else:
            line += f"{'-':>10}{sk_ratio[label]:>9.2f}{'-':>11}"
        share[label] = epoch_macs(hidden) / (m["ours"] * peak[dtype])
        print(line + f"{no_eval[label]:>16.2f}{100 * share[label]:>8.0f}")
    print("ours = a full epoch, including the evaluation-mode losses on 5,000 rows (eval ms) that the others "
          "skip;\nsk/ours-no-eval = scikit-learn against our epoch without that evaluation (for information only);\n"
          "peak % = the time our epoch's matrix products would take at the rate of one large product "
          f"measured in this run ({2e-9 * peak['float64']:.1f} GFLOP/s float64, {2e-9 * peak['float32']:.1f} "
          "float32),\nas a share of the epoch's measured time: 100 % would be every cycle in products at that rate")
    stack_ratio = {}
    print(f"\nstacked K={K_STACK} at batch 16, float64: throughput against {K_STACK} sequential runs")
    for key, m in med.items():
        if len(key) == 4:
            label = f"h{'x'.join(map(str, key[0]))}"
            stack_ratio[label] = K_STACK * paired(times[key], "single", lambda r: r["stacked"])
            print(f"  hidden {list(key[0])}: single epoch {1e3 * m['single']:.2f} ms, stacked epoch "
                  f"{1e3 * m['stacked']:.2f} ms, {stack_ratio[label]:.2f}x the throughput")

    def small(label):
        return int(label.split("_b")[1].split("_")[0]) <= 64

    targets = {
        "sklearn_3x_at_batch_le_64": all(r >= 3 for k, r in sk_ratio.items() if small(k)),
        "sklearn_2x_at_batch_256": all(r >= 2 for k, r in sk_ratio.items() if not small(k)),
        "torch_5x_at_batch_le_64": (all(r >= 5 for k, r in torch_ratio.items() if small(k))
                                    if torch_ratio else None),
        "stacked_2x_at_batch_16": all(r >= 2 for r in stack_ratio.values()),
    }
    print(json.dumps({"sklearn_over_ours": {k: round(v, 3) for k, v in sk_ratio.items()},
                      "torch_over_ours": {k: round(v, 3) for k, v in torch_ratio.items()} or None,
                      "stacked_throughput_ratio": {k: round(v, 3) for k, v in stack_ratio.items()},
                      "sklearn_over_ours_without_eval": {k: round(v, 3) for k, v in no_eval.items()},
                      "torch_over_ours_without_eval": {k: round(v, 3) for k, v in torch_no_eval.items()} or None,
                      "share_of_product_peak": {k: round(v, 3) for k, v in share.items()},
                      "targets_met": targets, "reps": args.reps}))


if __name__ == "__main__":
    main()
