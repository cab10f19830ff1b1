"""The invented demo market: seeded daily OHLC paths with clustering, regimes and jumps.

Four invented instruments of an invented coastal economy (no real market, ticker or price is used):

* ``harbor_index`` -- the Harbor Composite, the economy's broad share index;
* ``tidewell_shipping`` -- a container-shipping company, strongly tied to the index;
* ``brinecliff_salt`` -- a sea-salt and brine-chemicals producer;
* ``kelp_oil`` -- front-month futures on kelp oil, a local commodity, loosely tied to the index.

How a day is made, for every instrument at once:

1. A slow Markov chain picks the market's regime (calm, normal, stressed); the regime scales the
   variance level, with a few days of smoothing at each switch.
2. The log variance is that level plus an AR(1) (a discrete stochastic-volatility model), whose shocks
   are tied across instruments and, with a negative leverage effect, to the previous day's return.
3. The day's return is split into an overnight gap (``OVERNIGHT_SHARE`` of the variance) and an
   intraday Brownian path of ``n_steps`` steps drawn as a bridge to the day's intraday move. Within
   each step the path's highest and lowest points are drawn exactly from the Brownian-bridge law of
   the maximum, so high and low are those of a continuous path: high >= max(open, close) and
   low <= min(open, close) hold by construction, and range estimators see the day's true variance.
4. Occasional jumps, market-wide or of one instrument, land overnight or at a random step of the day.
5. Two extra columns: ``volume`` (rises with variance, moves and jumps) and ``implied_vol``, an
   invented implied-volatility-like index: the model's annualised 22-day expected volatility in
   percent, times a risk premium, with noise.

Example:
    >>> frames = generate_market(seed=7)                 # doctest: +SKIP
    >>> frames["harbor_index"].columns.tolist()           # doctest: +SKIP
    ['open', 'high', 'low', 'close', 'volume', 'implied_vol']
"""

from __future__ import annotations

import bisect
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.signal import lfilter

from trainers.data import DATE_COLUMN, DATE_UNIT, PriceFileError, check_prices, frame_to_csv_text
from trainers.volatility import TRADING_DAYS

__all__ = [
    "INSTRUMENTS", "REGIMES", "OVERNIGHT_SHARE", "InstrumentSpec", "INSTRUMENT_SPECS", "Market",
    "simulate_market", "generate_market", "write_market_csv",
]


@dataclass(frozen=True)
class InstrumentSpec:
    """Parameters of one invented instrument (daily units).

    Attributes:
        name: file name stem and key of the market's frames.
        description: one line for people.
        start_price: close of the day before the first row.
        daily_vol: typical daily volatility of log returns in the normal regime.
        market_corr: correlation of its return and variance shocks with the market's.
        leverage: correlation of today's variance shock with yesterday's return shock.
        jump_rate: own jumps per year (market jumps come on top, scaled by ``market_corr``).
        jump_scale: jump size in units of ``daily_vol`` (standard deviation).
        regime_weight: how strongly the market regime moves its variance level (0..1).
        drift: expected log return per year, before the variance correction.
        volume_level: typical daily volume.
    """

    name: str
    description: str
    start_price: float
    daily_vol: float
    market_corr: float
    leverage: float
    jump_rate: float
    jump_scale: float
    regime_weight: float
    drift: float
    volume_level: float


INSTRUMENT_SPECS = (
    InstrumentSpec("harbor_index", "Harbor Composite, share index of an invented coastal economy",
                   2500.0, 0.010, 1.0, -0.55, 0.5, 2.5, 1.0, 0.06, 4.0e8),
    InstrumentSpec("tidewell_shipping", "Tidewell Shipping, invented container-shipping company",
                   42.0, 0.017, 0.65, -0.35, 1.5, 2.5, 1.0, 0.05, 2.5e6),
    InstrumentSpec("brinecliff_salt", "Brinecliff Salt Works, invented sea-salt and brine producer",
                   18.0, 0.015, 0.45, -0.25, 1.0, 2.5, 0.8, 0.04, 9.0e5),
    InstrumentSpec("kelp_oil", "Kelp oil front-month futures, an invented local commodity",
                   75.0, 0.020, 0.20, 0.05, 2.0, 2.5, 0.6, 0.0, 6.0e4),
)
INSTRUMENTS = tuple(s.name for s in INSTRUMENT_SPECS)
REGIMES = ("calm", "normal", "stressed")
REGIME_VARIANCE = (0.4, 1.0, 4.0)            # variance multiplier of each regime
REGIME_TRANSITIONS = ((0.996, 0.004, 0.000),    # daily; expected stays 250, 125, 67 days
                      (0.004, 0.992, 0.004),
                      (0.000, 0.015, 0.985))
REGIME_SMOOTHING = 0.2        # share of the gap to the new regime's level closed each day
PERSISTENCE = 0.985           # AR(1) coefficient of the log variance
VOL_OF_VOL = 0.15             # standard deviation of the daily log-variance shock
OVERNIGHT_SHARE = 0.15        # share of the day's diffusive variance in the overnight gap
MARKET_JUMP_RATE = 1.0        # market-wide jumps per year
JUMP_MEAN = -0.4              # mean jump in units of its standard deviation (crashes outnumber rallies)
IMPLIED_PREMIUM = 1.12        # implied over expected volatility (a variance risk premium)
PRICE_DECIMALS = 4


@dataclass(frozen=True)
class Market:
    """A simulated market with the hidden states behind it.

    Attributes:
        frames: instrument -> frame (DatetimeIndex "date"; float columns open, high, low, close,
            volume, implied_vol), as ``generate_market`` returns.
        regimes: the market regime of each day, codes into ``REGIMES`` (0 = calm).
        variance: instrument -> the day's diffusive variance of the log return (overnight + intraday).
        jumps: instrument -> the day's summed log jump (0 on most days).
        jump_step: instrument -> where the day's jump fell: 0 overnight, 1..n_steps intraday, -1 none.
    """

    frames: dict[str, pd.DataFrame]
    regimes: pd.Series
    variance: pd.DataFrame
    jumps: pd.DataFrame
    jump_step: pd.DataFrame


def simulate_market(*, seed: int | np.random.Generator = 7, n_days: int = 3000,
                    instruments: Sequence[str] = INSTRUMENTS, start: str = "2013-01-02",
                    n_steps: int = 39) -> Market:
    """Simulate the invented market, returning the price frames and the hidden states.

    Every instrument is always simulated (so a subset gives the same paths as the full market).

    Args:
        seed: an int (or SeedSequence) for ``np.random.default_rng``, or a Generator to draw from.
        n_days: business days to simulate (about 250 a year).
        instruments: names from ``INSTRUMENTS``.
        start: first business day.
        n_steps: intraday steps per day (39 = ten-minute steps of a 6.5-hour session); the
            extremes within each step are drawn exactly, so a few dozen steps are enough.

    Returns:
        Market with one frame per instrument asked for; every frame passes ``check_prices``.

    Raises:
        ValueError: for an unknown instrument, n_days < 2 or n_steps < 1.
    """
    names = _check_args(instruments, n_days, n_steps)
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    specs = INSTRUMENT_SPECS
    k = len(specs)
    vol, corr, lev, jscale, weight = (np.array([getattr(s, a) for s in specs]) for a in
                                      ("daily_vol", "market_corr", "leverage", "jump_scale", "regime_weight"))
    regimes = _markov_chain(rng, n_days)
    shift = np.log(np.asarray(REGIME_VARIANCE))[regimes]
    level = lfilter([REGIME_SMOOTHING], [1.0, REGIME_SMOOTHING - 1.0], shift,
                    zi=[(1.0 - REGIME_SMOOTHING) * shift[0]])[0]
    # return shocks (overnight, intraday) and variance shocks, each a market factor plus own noise
    z_on, z_id, u = (_factor_mix(rng, corr, n_days) for _ in range(3))
    z = np.sqrt(OVERNIGHT_SHARE) * z_on + np.sqrt(1.0 - OVERNIGHT_SHARE) * z_id
    z_prev = np.vstack([np.zeros((1, k)), z[:-1]])
    eta = lev * z_prev + np.sqrt(1.0 - lev**2) * u
    sd_x = VOL_OF_VOL / np.sqrt(1.0 - PERSISTENCE**2)
    x0 = rng.normal(0.0, sd_x, k)
    x = lfilter([1.0], [1.0, -PERSISTENCE], VOL_OF_VOL * eta, axis=0, zi=(PERSISTENCE * x0)[None, :])[0]
    base = np.log(vol**2) - 0.5 * sd_x**2
    h = base + weight * level[:, None] + x
    v = np.exp(h)                                            # (n_days, k) diffusive variance
    jump, step = _jumps(rng, corr, jscale * vol, n_days, n_steps)
    drift = np.array([s.drift for s in specs]) / TRADING_DAYS - 0.5 * v
    # intraday path: Brownian bridge from 0 to the day's intraday move, plus drift and jump
    frac = np.arange(n_steps + 1) / n_steps
    walk = np.cumsum(rng.standard_normal((n_days, k, n_steps)), axis=2) / np.sqrt(n_steps)
    walk = np.concatenate([np.zeros((n_days, k, 1)), walk], axis=2)
    bridge = walk - frac * walk[..., -1:]
    sd_id = np.sqrt((1.0 - OVERNIGHT_SHARE) * v)[..., None]
    path = sd_id * (frac * z_id[..., None] + bridge) + ((1.0 - OVERNIGHT_SHARE) * drift)[..., None] * frac
    path += np.where(np.arange(n_steps + 1) >= np.maximum(step, 1)[..., None], (jump * (step > 0))[..., None], 0.0)
    gap = np.sqrt(OVERNIGHT_SHARE * v) * z_on + OVERNIGHT_SHARE * drift + jump * (step == 0)
    move = gap + path[..., -1]
    log_start = np.log([s.start_price for s in specs])
    log_open = log_start + np.vstack([np.zeros((1, k)), np.cumsum(move, axis=0)[:-1]]) + gap
    path += log_open[..., None]
    high, low = _step_extremes(rng, path, sd_id[..., 0] ** 2 / n_steps)
    ohlc = {"open": path[..., 0], "high": high, "low": low, "close": path[..., -1]}
    extras = {"volume": _volume(rng, specs, h, z, jump), "implied_vol": _implied_vol(rng, base, weight, level, x)}
    dates = pd.DatetimeIndex(pd.bdate_range(start, periods=n_days), freq=None, name=DATE_COLUMN).as_unit(DATE_UNIT)
    frames = {}
    for j, spec in enumerate(specs):
        if spec.name not in names:
            continue
        cols = {c: np.round(np.exp(a[:, j]), PRICE_DECIMALS) for c, a in ohlc.items()}
        cols.update({c: a[:, j] for c, a in extras.items()})
        frame = pd.DataFrame(cols, index=dates)
        problems = check_prices(frame)
        if problems:   # cannot happen by construction; never hand out a file that fails the reader
            raise PriceFileError(f"<simulated {spec.name}, seed {seed}>", problems)
        frames[spec.name] = frame

    def hidden(a):
        return pd.DataFrame(a, index=dates, columns=list(INSTRUMENTS))[list(frames)]

    return Market(frames=frames, regimes=pd.Series(regimes, index=dates, name="regime"),
                  variance=hidden(v), jumps=hidden(jump), jump_step=hidden(np.where(jump != 0, step, -1)))


def generate_market(*, seed: int | np.random.Generator = 7, n_days: int = 3000,
                    instruments: Sequence[str] = INSTRUMENTS, **kwargs) -> dict[str, pd.DataFrame]:
    """Daily OHLC plus volume and implied_vol for each instrument (see ``simulate_market``)."""
    return simulate_market(seed=seed, n_days=n_days, instruments=instruments, **kwargs).frames


def write_market_csv(directory: str | Path, *, seed: int | np.random.Generator = 7, n_days: int = 3000,
                     instruments: Sequence[str] = INSTRUMENTS, **kwargs) -> dict[str, Path]:
    """Write one CSV per instrument, ``<directory>/<name>.csv`` with a "date" column first.

    Returns:
        instrument -> path written. Each file loads with ``trainers.data.load_prices`` to exactly
        the frame ``generate_market`` returns for the same arguments.
    """
    directory = Path(directory)
    directory.mkdir(parents=True, exist_ok=True)
    paths = {}
    for name, frame in generate_market(seed=seed, n_days=n_days, instruments=instruments, **kwargs).items():
        paths[name] = directory / f"{name}.csv"
        paths[name].write_text(frame_to_csv_text(frame), encoding="utf-8", newline="")
    return paths


def _check_args(instruments, n_days, n_steps) -> set[str]:
    if isinstance(instruments, str):
        instruments = (instruments,)
    unknown = [i for i in instruments if i not in INSTRUMENTS]
    if unknown or not instruments:
        raise ValueError(f"instruments must be names from {INSTRUMENTS}, got {list(instruments)!r}")
    for name, value, low in (("n_days", n_days, 2), ("n_steps", n_steps, 1)):
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < low:
            raise ValueError(f"{name} must be an integer >= {low}, got {name}={value!r}")
    return set(instruments)


def _markov_chain(rng: np.random.Generator, n_days: int) -> np.ndarray:
    """Regime codes of a Markov chain started from its stationary distribution."""
    P = np.asarray(REGIME_TRANSITIONS)
    w, vecs = np.linalg.eig(P.T)
    pi = np.real(vecs[:, np.argmin(np.abs(w - 1.0))])
    pi = pi / pi.sum()
    cum = np.cumsum(P, axis=1).tolist()
    draws = rng.random(n_days).tolist()
    last = len(REGIMES) - 1
    state = min(bisect.bisect_right(np.cumsum(pi).tolist(), draws[0]), last)
    out = [state]
    for u in draws[1:]:
        state = min(bisect.bisect_right(cum[state], u), last)
        out.append(state)
    return np.array(out, dtype=np.int64)


def _step_extremes(rng, path: np.ndarray, step_var: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Day's highest and lowest log price: per step, the exact maximum (minimum) of a Brownian bridge.

    For a Brownian bridge from a to b with variance s2 over the step, P(max > m) = exp(-2 (m - a)(m - b) / s2)
    for m >= max(a, b), so m = (a + b + sqrt((b - a)^2 - 2 s2 log U)) / 2 with U uniform (reflection
    principle, stated from memory; tests check it against the Rayleigh law of the bridge from 0 to 0).
    A step in which an intraday jump lands is treated as a bridge between its two ends.
    """
    a, b = path[..., :-1], path[..., 1:]
    s2 = step_var[..., None]
    spread = (b - a) ** 2
    top = 0.5 * (a + b + np.sqrt(spread - 2.0 * s2 * np.log(1.0 - rng.random(a.shape))))
    bottom = 0.5 * (a + b - np.sqrt(spread - 2.0 * s2 * np.log(1.0 - rng.random(a.shape))))
    return np.maximum(top.max(axis=2), path[..., 0]), np.minimum(bottom.min(axis=2), path[..., 0])


def _factor_mix(rng, corr: np.ndarray, n_days: int) -> np.ndarray:
    """Standard normal shocks (n_days, k) with correlation ``corr`` to one common factor."""
    common = rng.standard_normal((n_days, 1))
    own = rng.standard_normal((n_days, corr.size))
    return corr * common + np.sqrt(1.0 - corr**2) * own


def _jumps(rng, corr, size, n_days, n_steps):
    """Log jump per day and instrument, and the step it lands on (0 = overnight)."""
    rates = np.array([s.jump_rate for s in INSTRUMENT_SPECS]) / TRADING_DAYS
    n_market = rng.poisson(MARKET_JUMP_RATE / TRADING_DAYS, n_days)[:, None]
    n_own = rng.poisson(rates, (n_days, rates.size))
    market = rng.normal(JUMP_MEAN * n_market, np.sqrt(n_market))
    own = rng.normal(JUMP_MEAN * n_own, np.sqrt(n_own))
    jump = size * (corr * market + own)
    step = np.where(rng.random(jump.shape) < 0.5, 0, rng.integers(1, n_steps + 1, jump.shape))
    return jump, step


def _volume(rng, specs, h, z, jump) -> np.ndarray:
    """Daily volume: higher with variance, large moves and jumps; persistent noise."""
    noise = lfilter([1.0], [1.0, -0.8], rng.normal(0.0, 0.25, h.shape), axis=0)
    log_v = (np.log([s.volume_level for s in specs]) + 0.5 * (h - h.mean(axis=0)) + 0.2 * np.abs(z)
             + 0.5 * (jump != 0) + noise)
    return np.round(np.exp(log_v))


def _implied_vol(rng, base, weight, level, x, horizon: int = 22) -> np.ndarray:
    """Annualised expected volatility over the next ``horizon`` days in percent, with premium and noise."""
    lags = np.arange(1, horizon + 1)
    spread = VOL_OF_VOL**2 * (1.0 - PERSISTENCE ** (2 * lags)) / (1.0 - PERSISTENCE**2)
    mean_h = (base + weight * level[:, None])[..., None] + PERSISTENCE**lags * x[..., None]
    expected = np.exp(mean_h + 0.5 * spread).mean(axis=2)
    noise = lfilter([1.0], [1.0, -0.7], rng.normal(0.0, 0.03, x.shape), axis=0)
    return np.round(100.0 * np.sqrt(TRADING_DAYS * expected) * IMPLIED_PREMIUM * np.exp(noise), 2)
