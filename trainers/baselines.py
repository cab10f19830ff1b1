"""Classic volatility benchmarks with one fit/forecast shape: random walk, EWMA, HAR, GARCH(1,1).

Every baseline forecasts, at each forecast origin ``t`` (a row of ``Dataset.dates``), the mean
daily variance over ``t+1 .. t+h`` in LEVEL units (squared daily log returns), for every horizon.
Only the training window is used to fit; later windows are forecast with information up to ``t``.

* ``random_walk``: the proxy on day ``t``, flat over ``h``.
* ``ewma``: RiskMetrics (J.P. Morgan/Reuters, Technical Document, 1996)
  ``s2_{t+1} = lambda s2_t + (1 - lambda) r_t^2`` on daily log returns, flat over ``h``. Seed:
  the mean squared return (zero mean, as RiskMetrics assumes) of the first ``EWMA_INIT_DAYS``
  returns on or after the first training origin, used as the variance of that origin's day. The seed
  looks at most 21 days into the training window; its weight decays as ``lambda^k``.
* ``har``: Corsi (2009) HAR, OLS of each target ``h<h>`` on a constant and the mean proxy over the
  last 1, 5, 22 days, in the study's scale (log of the floored mean if ``log``, else level),
  fitted once on the training rows whose targets are known at the first validation origin.
* ``har_rolling``: the same regression re-estimated every ``har_refit`` origins on the last
  ``har_window`` rows whose targets are fully known at the origin (row ``s`` of origin ``t``
  needs ``s + h <= t`` in calendar rows), never reaching before the training window; at least
  ``har_min_rows`` rows, else NaN.
* ``garch``: GARCH(1,1) with zero mean and normal errors through ``arch`` on ``100 * returns``
  from the first training origin on; parameters fitted on the training origins' returns, then the
  variance is filtered through the later windows with those parameters. The ``arch`` forecasts
  ``E_t[s2_{t+k}]``, ``k = 1..max(h)``, are divided by 1e4 and averaged over ``k = 1..h``.

Log HAR forecasts are ``exp(fitted log)`` with no lognormal bias correction, the same conversion
the networks' log outputs get (``params["resid_var"]`` gives ``s^2`` for ``exp(s^2/2)`` if wanted).
Every forecast is floored at ``dataset.config.floor`` (level HAR can go negative). ``ewma``, ``garch``
and ``har_rolling`` are NaN before the first training origin (and ``har_rolling`` until it has
``har_min_rows`` rows); ``random_walk`` and ``har`` forecast every row with complete HAR inputs.

Example:
    >>> out = forecast_baselines(ds, windows, horizons=(1, 5, 22))
    >>> out["har"].forecasts.iloc[windows.valid].head()
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from trainers.features import FeatureConfig, feature_frame, target_frame

__all__ = ["BASELINES", "EWMA_INIT_DAYS", "HAR_MIN_ROWS", "HAR_WINDOWS", "BaselineForecast", "forecast_baselines"]

BASELINES = ("random_walk", "ewma", "har", "har_rolling", "garch")
EWMA_INIT_DAYS = 22
HAR_MIN_ROWS = 250   # fewest rows of a rolling HAR fit by default: about one year of trading days
HAR_WINDOWS = (1, 5, 22)
GARCH_SCALE = 100.0


@dataclass(frozen=True)
class BaselineForecast:
    """One baseline's forecasts on every dataset row.

    Attributes:
        name: one of ``BASELINES``.
        forecasts: DataFrame (n_rows, n_horizons), index ``Dataset.dates``, columns "h1", "h5", ...;
            mean level daily variance over ``t+1 .. t+h``; NaN where the baseline has no forecast.
        params: JSON-able dict of plain Python values (fitted coefficients and settings).
    """

    name: str
    forecasts: pd.DataFrame
    params: dict


@dataclass(frozen=True)
class _Inputs:
    """What every baseline needs, checked once."""

    dates: pd.DatetimeIndex
    pos: np.ndarray          # position of each dataset row in the daily (frame) index
    variance: pd.Series      # level proxy, frame index
    returns: pd.Series       # log returns, frame index
    train: np.ndarray
    first_oos: int | None    # dataset row of the first validation (else test) origin
    horizons: tuple[int, ...]
    floor: float


def _check_int(name: str, value, low: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < low:
        raise ValueError(f"{name} must be an integer >= {low}, got {name}={value!r}")
    return int(value)


def _inputs(dataset, windows, horizons) -> _Inputs:
    try:
        hs = tuple(_check_int("horizons", h, 1) for h in horizons)
    except TypeError:
        raise ValueError(f"horizons must be a tuple of positive integers, got {horizons!r}; e.g. (1, 5, 22)") from None
    if not hs or len(set(hs)) != len(hs):
        raise ValueError(f"horizons must be distinct positive integers, got {horizons!r}; e.g. (1, 5, 22)")
    n = len(dataset.dates)
    train = np.asarray(windows.train, dtype=np.int64)
    if train.size == 0:
        raise ValueError("windows.train is empty; baselines are fitted on the training window")
    for name in ("train", "valid", "test"):
        rows = np.asarray(getattr(windows, name))
        if rows.size and (rows.min() < 0 or rows.max() >= n):
            raise ValueError(
                f"windows.{name} has row positions outside 0..{n - 1} of the dataset; "
                "build the windows from len(dataset.dates)"
            )
    pos = dataset.variance.index.get_indexer(dataset.dates)
    if (pos < 0).any():
        raise ValueError("dataset.dates are not all in dataset.variance's index; build the dataset with build_dataset")
    later = [np.asarray(w) for w in (windows.valid, windows.test) if len(w)]
    return _Inputs(
        dates=pd.DatetimeIndex(dataset.dates),
        pos=pos.astype(np.int64),
        variance=dataset.variance.astype(np.float64),
        returns=dataset.returns.astype(np.float64),
        train=train,
        first_oos=int(later[0][0]) if later else None,
        horizons=hs,
        floor=float(dataset.config.floor),
    )


def _returns_from(inp: _Inputs, start: int, what: str) -> np.ndarray:
    r = inp.returns.to_numpy()[start:]
    if not np.isfinite(r).all():
        raise ValueError(
            f"{what} needs finite returns from the first training origin on, found "
            f"{int((~np.isfinite(r)).sum())} NaN/inf; check the close prices"
        )
    return r


# ----------------------------------------------------------------------------- the baselines
def _random_walk(inp: _Inputs, **_) -> tuple[np.ndarray, dict]:
    last = inp.variance.to_numpy()[inp.pos]
    return np.repeat(last[:, None], len(inp.horizons), axis=1), {}


def _ewma(inp: _Inputs, *, ewma_lambda: float, **_) -> tuple[np.ndarray, dict]:
    p0 = int(inp.pos[inp.train[0]])
    r = _returns_from(inp, p0, "ewma")
    if r.size < EWMA_INIT_DAYS:
        raise ValueError(f"ewma needs {EWMA_INIT_DAYS} returns from the first training origin, got {r.size}")
    seed = float(np.mean(r[:EWMA_INIT_DAYS] ** 2))
    s2 = np.empty(r.size)
    prev = seed
    for k in range(r.size):
        prev = ewma_lambda * prev + (1.0 - ewma_lambda) * r[k] * r[k]
        s2[k] = prev
    full = np.full(len(inp.variance), np.nan)
    full[p0:] = s2
    out = full[inp.pos]
    params = {"lambda": float(ewma_lambda), "init_variance": seed, "init_days": EWMA_INIT_DAYS}
    return np.repeat(out[:, None], len(inp.horizons), axis=1), params


def _har_design(inp: _Inputs, log: bool) -> tuple[np.ndarray, np.ndarray, list[str]]:
    config = FeatureConfig(har_windows=HAR_WINDOWS, log=log, floor=inp.floor)
    X = feature_frame(inp.variance, inp.returns, None, config).to_numpy()[inp.pos]
    Y = target_frame(inp.variance, inp.horizons, config).to_numpy()[inp.pos]
    return np.column_stack([np.ones(len(X)), X]), Y, ["const"] + [f"har_{w}" for w in HAR_WINDOWS]


def _ols(Z: np.ndarray, y: np.ndarray, what: str) -> tuple[np.ndarray, float]:
    if len(y) <= Z.shape[1] or not (np.isfinite(Z).all() and np.isfinite(y).all()):
        raise ValueError(
            f"{what}: {len(y)} usable rows (need > {Z.shape[1]} with finite HAR features and targets); "
            "use a longer training window or a smaller embargo"
        )
    coef, *_ = np.linalg.lstsq(Z, y, rcond=None)
    resid = y - Z @ coef
    return coef, float(resid @ resid / (len(y) - Z.shape[1]))


def _to_level(fitted: np.ndarray, log: bool) -> np.ndarray:
    return np.exp(fitted) if log else fitted


def _har(inp: _Inputs, *, log: bool, **_) -> tuple[np.ndarray, dict]:
    Z, Y, names = _har_design(inp, log)
    out = np.empty((len(Z), len(inp.horizons)))
    coefs, n_obs, resid_var = {}, {}, {}
    for j, h in enumerate(inp.horizons):
        rows = inp.train[np.isfinite(Z[inp.train]).all(axis=1) & np.isfinite(Y[inp.train, j])]
        if inp.first_oos is not None:  # targets known at the first validation origin: s + h <= t
            rows = rows[inp.pos[rows] + h <= inp.pos[inp.first_oos]]
        coef, s2 = _ols(Z[rows], Y[rows, j], f"har h{h}")
        out[:, j] = _to_level(Z @ coef, log)
        coefs[f"h{h}"] = {k: float(c) for k, c in zip(names, coef)}
        n_obs[f"h{h}"], resid_var[f"h{h}"] = int(len(rows)), s2
    return out, {"log": bool(log), "windows": list(HAR_WINDOWS), "coefficients": coefs, "n_obs": n_obs,
                 "resid_var": resid_var, "bias_correction": False}


def _har_rolling(inp: _Inputs, *, log: bool, har_window: int, har_refit: int, har_min_rows: int,
                 **_) -> tuple[np.ndarray, dict]:
    Z, Y, names = _har_design(inp, log)
    out = np.full((len(Z), len(inp.horizons)), np.nan)
    bad_rows = np.flatnonzero(~np.isfinite(Z).all(axis=1))  # HAR warm-up when the study's windows are shorter
    start = max(int(inp.train[0]), int(bad_rows[-1]) + 1 if bad_rows.size else 0)
    last, n_fits = {}, {}
    # One least-squares solve per sample serves every horizon whose window it is: lstsq solves
    # each right-hand column on its own, so NaN targets (set to 0) of other horizons do not leak.
    Y0 = np.where(np.isfinite(Y), Y, 0.0)
    solved: dict[tuple[int, int], np.ndarray] = {}
    for j, h in enumerate(inp.horizons):
        coef, since, fits = None, 0, 0
        # end[i]: number of dataset rows whose target is known at origin i (pos[s] + h <= pos[i])
        end = np.searchsorted(inp.pos, inp.pos - h, side="right")
        for i in range(start, len(Z)):
            lo, hi = max(start, int(end[i]) - har_window), int(end[i])
            if coef is None and hi - lo < har_min_rows:
                continue
            if coef is None or since >= har_refit:
                if not np.isfinite(Y[lo:hi, j]).all():
                    raise ValueError(f"har_rolling h{h}: NaN targets in the sample at {inp.dates[i].date()}")
                if (lo, hi) not in solved:
                    solved[(lo, hi)] = np.linalg.lstsq(Z[lo:hi], Y0[lo:hi], rcond=None)[0]
                coef = solved[(lo, hi)][:, j]
                since, fits = 0, fits + 1
            out[i, j] = _to_level(Z[i] @ coef, log)
            since += 1
        n_fits[f"h{h}"] = fits
        last[f"h{h}"] = None if coef is None else {k: float(c) for k, c in zip(names, coef)}
    return out, {"log": bool(log), "windows": list(HAR_WINDOWS), "window": int(har_window),
                 "refit_every": int(har_refit), "min_rows": int(har_min_rows), "n_fits": n_fits,
                 "last_coefficients": last, "bias_correction": False}


def _garch(inp: _Inputs, **_) -> tuple[np.ndarray, dict]:
    from arch import arch_model
    from arch.utility.exceptions import ConvergenceWarning

    p0 = int(inp.pos[inp.train[0]])
    r = GARCH_SCALE * _returns_from(inp, p0, "garch")
    n_fit = int(inp.pos[inp.train[-1]]) - p0 + 1
    model = arch_model(r, mean="Zero", vol="GARCH", p=1, q=1, dist="normal")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        res = model.fit(disp="off", last_obs=n_fit, show_warning=False)
    hmax = max(inp.horizons)
    path = res.forecast(start=0, horizon=hmax, reindex=False).variance.to_numpy() / GARCH_SCALE**2
    mean_path = np.cumsum(path, axis=1) / np.arange(1, hmax + 1)
    full = np.full((len(inp.variance), len(inp.horizons)), np.nan)
    full[p0:] = mean_path[:, [h - 1 for h in inp.horizons]]
    omega, alpha, beta = (float(res.params[k]) for k in ("omega", "alpha[1]", "beta[1]"))
    persistence = alpha + beta
    params = {
        "omega": omega, "alpha": alpha, "beta": beta, "scale": GARCH_SCALE, "mean": "zero", "dist": "normal",
        "persistence": persistence,
        "unconditional_variance": omega / (1 - persistence) / GARCH_SCALE**2 if persistence < 1 else None,
        "loglikelihood": float(res.loglikelihood), "n_obs": int(res.nobs),
        "converged": bool(res.convergence_flag == 0),
    }
    return full[inp.pos], params


_BUILDERS = {"random_walk": _random_walk, "ewma": _ewma, "har": _har, "har_rolling": _har_rolling,
             "garch": _garch}


def forecast_baselines(dataset, windows, *, horizons, names=BASELINES, ewma_lambda: float = 0.94,
                       har_window: int = 1000, log: bool = True, har_refit: int = 1,
                       har_min_rows: int = HAR_MIN_ROWS) -> dict[str, BaselineForecast]:
    """Fit the named baselines on ``windows.train`` and forecast every dataset row.

    Args:
        dataset: a ``trainers.features.Dataset`` (uses ``dates``, ``variance``, ``returns``,
            ``config.floor``).
        windows: a ``trainers.splits.Windows`` on the dataset's rows.
        horizons: forecast horizons in days, e.g. (1, 5, 22); columns "h1", "h5", "h22".
        names: which baselines, a subset of ``BASELINES``, in the order wanted.
        ewma_lambda: RiskMetrics decay, in (0, 1); 0.94 for daily data (RiskMetrics, 1996).
        har_window: rows in each rolling HAR estimation window.
        log: fit HAR in log variances (True) or levels (False), as the study's targets.
        har_refit: re-estimate the rolling HAR every this many origins (1 = every day).
        har_min_rows: fewest rows for a rolling HAR fit; earlier origins are NaN.

    Every row from the first validation origin on has a finite forecast, or this raises.

    Returns:
        dict name -> BaselineForecast, in the order of ``names``.

    Raises:
        ValueError: unknown names, bad settings, empty training window, windows outside the
            dataset, or too few rows to fit.
    """
    names = (names,) if isinstance(names, str) else tuple(names)
    unknown = [n for n in names if n not in BASELINES]
    if unknown or not names or len(set(names)) != len(names):
        raise ValueError(f"names must be distinct baselines from {BASELINES}, got {names!r}; fix baselines.include")
    if isinstance(ewma_lambda, bool) or not isinstance(ewma_lambda, (int, float)) or not 0.0 < ewma_lambda < 1.0:
        raise ValueError(f"ewma_lambda must be in (0, 1), got {ewma_lambda=!r}; RiskMetrics uses 0.94 for daily data")
    har_window = _check_int("har_window", har_window, len(HAR_WINDOWS) + 2)
    har_refit = _check_int("har_refit", har_refit, 1)
    har_min_rows = _check_int("har_min_rows", har_min_rows, len(HAR_WINDOWS) + 2)
    if har_min_rows > har_window:
        raise ValueError(f"har_min_rows={har_min_rows} exceeds har_window={har_window}; lower it or widen the window")
    inp = _inputs(dataset, windows, horizons)
    columns = [f"h{h}" for h in inp.horizons]
    result = {}
    for name in names:
        values, params = _BUILDERS[name](inp, ewma_lambda=float(ewma_lambda), log=bool(log), har_window=har_window,
                                         har_refit=har_refit, har_min_rows=har_min_rows)
        if inp.first_oos is not None and not np.isfinite(values[inp.first_oos:]).all():
            missing = int((~np.isfinite(values[inp.first_oos:])).any(axis=1).sum())
            raise ValueError(
                f"{name} has no forecast for {missing} rows from the first validation origin "
                f"{inp.dates[inp.first_oos].date()} on (training window: {len(inp.train)} rows); "
                f"use a longer training window, or for har_rolling lower har_min_rows={har_min_rows}")
        floored = values < inp.floor
        params["n_floored"] = int(floored.sum())
        values = np.where(floored, inp.floor, values)
        frame = pd.DataFrame(values, index=inp.dates, columns=columns)
        result[name] = BaselineForecast(name=name, forecasts=frame, params=params)
    return result
