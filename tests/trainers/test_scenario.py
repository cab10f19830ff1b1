"""Tests for trainers/scenario.py: the invented demo market.

Outside references: the stylised facts of Cont (2001), "Empirical properties of asset returns:
stylized facts and statistical issues", Quantitative Finance 1, 223-236 (no linear autocorrelation of
returns, heavy tails, volatility clustering = positive autocorrelation of squared returns); statsmodels
for the autocorrelations and the Ljung-Box statistic on squared returns (the McLeod and Li, 1983, test
for ARCH effects); Parkinson (1980) and Garman and Klass (1980) for the range estimators, which are
unbiased for the variance of a driftless Brownian path; scipy's Rayleigh law for the maximum of a
Brownian bridge; and trainers.data, the project's own reader, which every file must pass.
"""

import numpy as np
import pandas as pd
import pytest
from pandas.testing import assert_frame_equal
from scipy import stats
from statsmodels.stats.diagnostic import acorr_ljungbox
from statsmodels.tsa.stattools import acf

from trainers import scenario
from trainers.data import check_prices, load_prices
from trainers.scenario import (
    INSTRUMENTS, OVERNIGHT_SHARE, REGIME_TRANSITIONS, REGIMES, generate_market, simulate_market, write_market_csv,
)

COLUMNS = ["open", "high", "low", "close", "volume", "implied_vol"]


@pytest.fixture(scope="module")
def market():
    return simulate_market(seed=7)


def log_returns(frame):
    return np.log(frame["close"]).diff().dropna()


def test_generate_market_is_deterministic_per_seed():
    a, b = generate_market(seed=3, n_days=400), generate_market(seed=3, n_days=400)
    c = generate_market(seed=4, n_days=400)
    for name in INSTRUMENTS:
        assert_frame_equal(a[name], b[name], check_exact=True)
        assert not np.allclose(a[name]["close"], c[name]["close"])
    # a Generator gives the same market as its seed
    d = generate_market(seed=np.random.default_rng(3), n_days=400)
    assert_frame_equal(a["kelp_oil"], d["kelp_oil"], check_exact=True)


def test_generate_market_subset_matches_full_market():
    full = generate_market(seed=5, n_days=300)
    part = generate_market(seed=5, n_days=300, instruments=("kelp_oil",))
    assert list(part) == ["kelp_oil"]
    assert_frame_equal(part["kelp_oil"], full["kelp_oil"], check_exact=True)


def test_frames_have_the_price_frame_shape(market):
    assert list(market.frames) == list(INSTRUMENTS) and len(INSTRUMENTS) >= 3
    for frame in market.frames.values():
        assert list(frame.columns) == COLUMNS
        assert frame.dtypes.eq(np.float64).all()
        assert len(frame) == 3000 and frame.index.name == "date"
        assert str(frame.index.dtype) == "datetime64[us]"
        assert (frame.index.day_of_week < 5).all() and frame.index.is_monotonic_increasing
        # about 12 years of business days (common practice: ~252 trading days a year)
        assert 11 <= (frame.index[-1] - frame.index[0]).days / 365.25 <= 12.5
        assert (frame["volume"] > 0).all() and (frame["implied_vol"] > 0).all()


@pytest.mark.parametrize("seed", [0, 1, 2, 3, 4, 7])
def test_every_generated_frame_passes_check_prices(seed):
    for name, frame in generate_market(seed=seed).items():
        assert check_prices(frame) == [], name
        # OHLC consistency, written out: high >= max(open, close) >= min(open, close) >= low > 0
        assert (frame["high"] >= frame[["open", "close"]].max(axis=1)).all()
        assert (frame["low"] <= frame[["open", "close"]].min(axis=1)).all()
        assert (frame["low"] > 0).all() and (frame["high"] > frame["low"]).all()


def test_write_market_csv_files_load_back_to_the_same_frames(tmp_path, market):
    paths = write_market_csv(tmp_path / "data", seed=7)
    assert sorted(paths) == sorted(INSTRUMENTS)
    for name, path in paths.items():
        assert path == tmp_path / "data" / f"{name}.csv"
        assert path.read_text().splitlines()[0] == "date," + ",".join(COLUMNS)
        data = load_prices(path, min_rows=2000)
        assert data.dropped == ()
        assert_frame_equal(data.frame, market.frames[name], check_exact=True)


def test_squared_returns_are_autocorrelated_volatility_clustering(market):
    # Cont (2001), stylised fact "volatility clustering": the autocorrelation of squared returns is
    # clearly positive over several lags. 2.58 / sqrt(n) is the 1% band of an uncorrelated series.
    for name, frame in market.frames.items():
        r2 = log_returns(frame) ** 2
        rho = acf(r2, nlags=5)[1:]
        assert (rho > max(0.08, 2.58 / np.sqrt(len(r2)))).all(), (name, rho)


@pytest.mark.parametrize("seed", range(10))
def test_index_volatility_clusters_for_every_seed(seed):
    # the index over ten seeds: each lag 1..5 above 0.05 (smallest seen over seeds 0..15: 0.09)
    frame = generate_market(seed=seed, instruments=("harbor_index",))["harbor_index"]
    rho = acf(log_returns(frame) ** 2, nlags=5)[1:]
    assert (rho > 0.05).all(), rho


@pytest.mark.parametrize("seed", [0, 1, 2, 3, 4])
def test_mcleod_li_test_finds_arch_effects(seed):
    # McLeod and Li (1983): Ljung-Box on squared returns; statsmodels computes the statistic
    for name, frame in generate_market(seed=seed).items():
        pvalue = acorr_ljungbox(log_returns(frame) ** 2, lags=[5])["lb_pvalue"].iloc[0]
        assert pvalue < 1e-3, (name, pvalue)


def test_returns_have_heavy_tails_and_little_linear_autocorrelation(market):
    for name, frame in market.frames.items():
        r = log_returns(frame)
        # Cont (2001): absence of linear autocorrelation (beyond intraday scales) ...
        assert np.abs(acf(r, nlags=5)[1:]).max() < 0.08, name
        # ... and heavy tails: kurtosis well above the normal law's 3 (scipy.stats.kurtosis)
        assert stats.kurtosis(r, fisher=False) > 5, name


def test_regimes_are_present_slow_and_change_the_variance(market):
    regimes = market.regimes.to_numpy()
    share = np.bincount(regimes, minlength=len(REGIMES)) / regimes.size
    assert (share > 0.02).all(), share
    # slow switching: spells last weeks to months (expected 250, 125 and 67 days by construction)
    spells = np.diff(np.r_[0, np.flatnonzero(np.diff(regimes)) + 1, regimes.size])
    assert spells.mean() > 40 and len(spells) >= 5
    # the index's mean squared return rises from calm to normal to stressed
    r2 = log_returns(market.frames["harbor_index"]) ** 2
    by_regime = [r2[regimes[1:] == k].mean() for k in range(len(REGIMES))]
    assert by_regime[0] < by_regime[1] < by_regime[2] and by_regime[2] > 3 * by_regime[0], by_regime


@pytest.mark.parametrize("seed", [0, 1, 2, 3, 4])
def test_all_regimes_visited_for_other_seeds(seed):
    regimes = simulate_market(seed=seed, n_days=3000, instruments=("harbor_index",)).regimes
    assert set(regimes.unique()) == {0, 1, 2}


def test_markov_chain_matches_its_transition_matrix():
    # empirical transition frequencies of a long chain against REGIME_TRANSITIONS (binomial standard errors)
    chain = scenario._markov_chain(np.random.default_rng(0), 300_000)
    P = np.asarray(REGIME_TRANSITIONS)
    counts = np.zeros((3, 3))
    np.add.at(counts, (chain[:-1], chain[1:]), 1)
    n = counts.sum(axis=1, keepdims=True)
    se = np.sqrt(P * (1 - P) / n) + 1e-12
    assert (np.abs(counts / n - P) <= 4 * se).all(), counts / n


def test_range_estimators_recover_the_intraday_variance(market):
    # Parkinson (1980): E[(ln H/L)^2] = 4 ln 2 sigma^2; Garman and Klass (1980):
    # E[0.5 (ln H/L)^2 - (2 ln 2 - 1)(ln C/O)^2] = sigma^2, for a driftless Brownian path over the session.
    for name, frame in market.frames.items():
        intraday = market.variance[name] * (1 - OVERNIGHT_SHARE)
        calm_day = market.jump_step[name] < 1          # no jump inside the session
        hl, co = np.log(frame["high"] / frame["low"]), np.log(frame["close"] / frame["open"])
        parkinson = (hl**2 / (4 * np.log(2)) / intraday)[calm_day].mean()
        garman_klass = ((0.5 * hl**2 - (2 * np.log(2) - 1) * co**2) / intraday)[calm_day].mean()
        assert 0.95 < parkinson < 1.05, (name, parkinson)
        assert 0.95 < garman_klass < 1.05, (name, garman_klass)
        # overnight gap: its variance is OVERNIGHT_SHARE of the day's on days without an overnight jump
        gap = np.log(frame["open"] / frame["close"].shift()) ** 2 / (market.variance[name] * OVERNIGHT_SHARE)
        assert 0.9 < gap[market.jump_step[name] != 0].mean() < 1.1, name


def test_step_extremes_follow_the_brownian_bridge_maximum():
    # The maximum of a standard Brownian bridge from 0 to 0 over unit time has P(M > m) = exp(-2 m^2),
    # a Rayleigh law with scale 1/2 (reflection principle; stated from memory), checked with scipy's KS test.
    rng = np.random.default_rng(1)
    path = np.zeros((20_000, 1, 2))
    high, low = scenario._step_extremes(rng, path, np.ones((20_000, 1)))
    assert stats.kstest(high.ravel(), stats.rayleigh(scale=0.5).cdf).pvalue > 0.01
    assert stats.kstest(-low.ravel(), stats.rayleigh(scale=0.5).cdf).pvalue > 0.01


def test_exogenous_columns_carry_information(market):
    for name, frame in market.frames.items():
        future = (log_returns(frame) ** 2).rolling(22).mean().shift(-22)
        both = pd.concat([frame["implied_vol"] ** 2, future], axis=1).dropna()
        # the implied-volatility-like index forecasts the next month's realised variance
        assert both.corr().iloc[0, 1] > 0.4, name
        # volume rises with variance (common practice: volume and volatility move together)
        assert np.corrcoef(np.log(frame["volume"]), np.log(market.variance[name]))[0, 1] > 0.4, name


@pytest.mark.parametrize(("kwargs", "pattern"), [
    ({"instruments": ("harbour_index",)}, "instruments must be names from"),
    ({"instruments": ()}, "instruments must be names from"),
    ({"n_days": 1}, "n_days must be an integer >= 2"),
    ({"n_steps": 0}, "n_steps must be an integer >= 1"),
])
def test_simulate_market_rejects_bad_arguments(kwargs, pattern):
    with pytest.raises(ValueError, match=pattern):
        simulate_market(**kwargs)
