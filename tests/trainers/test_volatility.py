"""Variance estimators against their published formulas, worked numbers and S&P 500 data."""

import math

import numpy as np
import pandas as pd
import pytest

from trainers.volatility import (
    ESTIMATORS,
    close_to_close,
    daily_variance,
    garman_klass,
    log_returns,
    parkinson,
    rogers_satchell,
    yang_zhang,
)

# Toy bars given as log prices relative to 100, so every log ratio in the formulas is a short
# decimal and the arithmetic below can be done by hand.
#            ln O    ln H    ln L    ln C
TOY_LOGS = [(0.000, 0.020, -0.010, 0.005),
            (0.010, 0.030, 0.000, 0.020),
            (0.010, 0.025, -0.005, 0.000),
            (0.005, 0.020, -0.010, 0.015),
            (0.020, 0.030, 0.010, 0.025)]
LN2 = 0.6931471806  # ln 2 to 10 digits; 4 ln 2 = 2.7725887, 2 ln 2 - 1 = 0.3862944


def toy_frame() -> pd.DataFrame:
    logs = np.array(TOY_LOGS)
    dates = pd.DatetimeIndex(pd.bdate_range("2020-01-06", periods=len(logs)), name="date")
    return pd.DataFrame(100.0 * np.exp(logs), index=dates, columns=["open", "high", "low", "close"])


@pytest.fixture(scope="module")
def sp500() -> pd.DataFrame:
    # Open dataset shipped by the arch package: S&P 500 daily bars 1999-01-04 .. 2018-12-31.
    arch_data = pytest.importorskip("arch.data.sp500")
    raw = arch_data.load()
    frame = raw[["Open", "High", "Low", "Close"]].rename(columns=str.lower).astype(float)
    frame.index = pd.DatetimeIndex(frame.index, name="date")
    return frame


def test_close_to_close_worked_numbers():
    # r_t = ln C_t - ln C_{t-1}: 0.020-0.005 = 0.015, 0.000-0.020 = -0.020, 0.015-0.000 = 0.015,
    # 0.025-0.015 = 0.010; squared, not demeaned: 2.25e-4, 4e-4, 2.25e-4, 1e-4; row 0 has no
    # previous close.
    v = close_to_close(toy_frame())
    assert np.isnan(v.iloc[0])
    np.testing.assert_allclose(v.iloc[1:], [2.25e-4, 4.0e-4, 2.25e-4, 1.0e-4], rtol=1e-9)
    np.testing.assert_allclose(log_returns(toy_frame()).iloc[1:], [0.015, -0.020, 0.015, 0.010], rtol=1e-9)


def test_parkinson_worked_numbers():
    # Parkinson (1980): (ln H/L)^2 / (4 ln 2). Rows 0-3: ln H/L = 0.030 -> 0.0009 / 2.7725887
    # = 3.2460638e-4; row 4: ln H/L = 0.020 -> 0.0004 / 2.7725887 = 1.4426950e-4.
    v = parkinson(toy_frame())
    np.testing.assert_allclose(v, [3.2460638e-4] * 4 + [1.4426950e-4], rtol=1e-7)


def test_garman_klass_worked_numbers():
    # Garman and Klass (1980): 0.5 (ln H/L)^2 - (2 ln 2 - 1)(ln C/O)^2.
    # row 0: 0.5*0.0009 - 0.3862944*0.005^2 = 0.00045 - 0.0000096574 = 4.4034264e-4
    # rows 1-3: |ln C/O| = 0.010: 0.00045 - 0.3862944*0.0001 = 0.00045 - 0.0000386294 = 4.1137056e-4
    # row 4: 0.5*0.0004 - 0.3862944*0.000025 = 0.0002 - 0.0000096574 = 1.9034264e-4
    v = garman_klass(toy_frame())
    np.testing.assert_allclose(v, [4.4034264e-4] + [4.1137056e-4] * 3 + [1.9034264e-4], rtol=1e-7)


def test_rogers_satchell_worked_numbers():
    # Rogers and Satchell (1991): ln(H/C) ln(H/O) + ln(L/C) ln(L/O).
    # row 0: 0.015*0.020 + (-0.015)(-0.010) = 0.00030 + 0.00015 = 4.5e-4
    # row 1: 0.010*0.020 + (-0.020)(-0.010) = 0.00020 + 0.00020 = 4.0e-4
    # row 2: 0.025*0.015 + (-0.005)(-0.015) = 0.000375 + 0.000075 = 4.5e-4
    # row 3: 0.005*0.015 + (-0.025)(-0.015) = 0.000075 + 0.000375 = 4.5e-4
    # row 4: 0.005*0.010 + (-0.015)(-0.010) = 0.00005 + 0.00015 = 2.0e-4
    v = rogers_satchell(toy_frame())
    np.testing.assert_allclose(v, [4.5e-4, 4.0e-4, 4.5e-4, 4.5e-4, 2.0e-4], rtol=1e-9)


def test_yang_zhang_worked_numbers():
    # Yang and Zhang (2000) with n = 3: k = 0.34 / (1.34 + 4/2) = 0.34 / 3.34 = 0.1017964.
    # overnight ln(O_t/C_{t-1}), rows 1-4: 0.005, -0.010, 0.005, 0.005
    # open-to-close ln(C_t/O_t), rows 1-4: 0.010, -0.010, 0.010, 0.005
    # row 3 (rows 1-3): sigma_o^2: mean 0, (25+100+25)e-6 / 2 = 7.5e-5
    #   sigma_c^2: mean 0.01/3, (3e-4 - 3 (0.01/3)^2) / 2 = (3e-4 - 0.3333e-4) / 2 = 1.3333333e-4
    #   sigma_rs^2: (4.0 + 4.5 + 4.5)e-4 / 3 = 4.3333333e-4
    #   7.5e-5 + 0.1017964*1.3333333e-4 + 0.8982036*4.3333333e-4
    #   = 7.5e-5 + 1.3572854e-5 + 3.8922156e-4 = 4.7779441e-4
    # row 4 (rows 2-4): sigma_o^2 = 7.5e-5 again (-0.010, 0.005, 0.005)
    #   sigma_c^2: mean 0.005/3, (2.25e-4 - 3 (0.005/3)^2) / 2 = (2.25e-4 - 0.0833e-4) / 2 = 1.0833333e-4
    #   sigma_rs^2: (4.5 + 4.5 + 2.0)e-4 / 3 = 3.6666667e-4
    #   7.5e-5 + 1.1027944e-5 + 3.2934132e-4 = 4.1536926e-4
    v = yang_zhang(toy_frame(), window=3)
    assert v.iloc[:3].isna().all()  # first n rows NaN
    np.testing.assert_allclose(v.iloc[3:], [4.7779441e-4, 4.1536926e-4], rtol=1e-7)


@pytest.mark.parametrize("estimator", ESTIMATORS)
def test_daily_variance_matches_functions_and_keeps_index(estimator):
    frame = toy_frame()
    kwargs = {"window": 3} if estimator == "yang_zhang" else {}
    v = daily_variance(frame, estimator, **kwargs)
    direct = {"close_to_close": close_to_close, "parkinson": parkinson, "garman_klass": garman_klass,
              "rogers_satchell": rogers_satchell, "yang_zhang": yang_zhang}[estimator](frame, **kwargs)
    pd.testing.assert_series_equal(v, direct)
    assert v.index.equals(frame.index) and v.name == estimator


def test_zero_values_on_flat_and_trending_bars():
    # A flat bar (H = L) gives 0 for Parkinson, GK and RS: every log ratio in their formulas is 0.
    # A bar opening at its low and closing at its high gives RS = 0*ln(H/L) + ln(L/H)*0 = 0
    # (Rogers and Satchell (1991) formula), while Parkinson and GK stay > 0.
    frame = pd.DataFrame({"open": [100.0, 100.0], "high": [100.0, 102.0], "low": [100.0, 100.0],
                          "close": [100.0, 102.0]},
                         index=pd.DatetimeIndex(["2020-01-06", "2020-01-07"], name="date"))
    assert parkinson(frame).iloc[0] == 0.0 and garman_klass(frame).iloc[0] == 0.0
    assert rogers_satchell(frame).iloc[0] == 0.0 and rogers_satchell(frame).iloc[1] == 0.0
    assert parkinson(frame).iloc[1] > 0 and garman_klass(frame).iloc[1] > 0


def test_garman_klass_nonnegative_on_consistent_bars_negative_only_on_broken_ones():
    rng = np.random.default_rng(0)
    n = 20_000
    # Random consistent bars: open and close anywhere inside [low, high]; |ln C/O| <= ln H/L
    # then gives GK >= (0.5 - 0.3862944) (ln H/L)^2 >= 0 (from the Garman-Klass formula).
    low = 100.0 * np.exp(rng.normal(0, 0.01, n))
    high = low * np.exp(rng.exponential(0.02, n))
    open_ = low + rng.uniform(0, 1, n) * (high - low)
    close = low + rng.uniform(0, 1, n) * (high - low)
    frame = pd.DataFrame({"open": open_, "high": high, "low": low, "close": close})
    assert garman_klass(frame).min() >= 0.0
    # A broken bar (close above the high): u = ln(101/100) = 0.00995, c = ln(110/100) = 0.09531,
    # 0.5*0.0000990 - 0.3862944*0.0090840 < 0.
    broken = pd.DataFrame({"open": [100.0], "high": [101.0], "low": [100.0], "close": [110.0]})
    assert garman_klass(broken).iloc[0] < 0.0


def test_estimators_unbiased_on_simulated_brownian_days():
    # Parkinson (1980), Garman-Klass (1980), Rogers-Satchell (1991) are unbiased for the
    # open-to-close variance of a Brownian log price; Yang-Zhang (2000) and the squared close-to-
    # close return for the whole day's variance (overnight + open-to-close).
    rng = np.random.default_rng(0)
    n_days, n_steps, sigma, sigma_night = 2000, 1000, 0.01, 0.005
    paths = np.cumsum(rng.normal(0.0, sigma / math.sqrt(n_steps), (n_days, n_steps)), axis=1)
    paths = np.concatenate([np.zeros((n_days, 1)), paths], axis=1)
    level = np.cumsum(paths[:, -1] + rng.normal(0.0, sigma_night, n_days))  # close-to-close walk
    open_log = level - paths[:, -1]
    frame = pd.DataFrame({"open": np.exp(open_log), "high": np.exp(open_log + paths.max(axis=1)),
                          "low": np.exp(open_log + paths.min(axis=1)), "close": np.exp(level)})
    intraday, whole_day = sigma**2, sigma**2 + sigma_night**2
    # The maximum of a 1000-step walk falls short of the continuous one by about
    # 0.5826 sigma sqrt(1/1000) (Broadie, Glasserman and Kou, 1997), so range estimators read a
    # few percent low; the band allows that and about 4 standard errors of the 2000-day mean.
    for name in ("parkinson", "garman_klass", "rogers_satchell"):
        ratio = daily_variance(frame, name).mean() / intraday
        assert 0.88 < ratio < 1.04, (name, ratio)
    for name in ("close_to_close", "yang_zhang"):
        ratio = daily_variance(frame, name).mean() / whole_day
        assert 0.88 < ratio < 1.12, (name, ratio)


def _reference_estimates(frame: pd.DataFrame) -> dict[str, np.ndarray]:
    # Independent vectorised numpy versions of the published formulas, written apart from the
    # module: Parkinson (1980), Garman-Klass (1980), Rogers-Satchell (1991), Yang-Zhang (2000).
    o, h, l, c = (frame[k].to_numpy() for k in ("open", "high", "low", "close"))
    r = np.r_[np.nan, np.diff(np.log(c))]
    hl, co = np.log(h / l), np.log(c / o)
    rs = np.log(h / c) * np.log(h / o) + np.log(l / c) * np.log(l / o)
    n = 22
    k = 0.34 / (1.34 + (n + 1) / (n - 1))
    night = np.r_[np.nan, np.log(o[1:] / c[:-1])]
    yz = np.full(len(c), np.nan)
    for t in range(n, len(c)):
        w = slice(t - n + 1, t + 1)
        yz[t] = np.var(night[w], ddof=1) + k * np.var(co[w], ddof=1) + (1 - k) * rs[w].mean()
    return {"close_to_close": r**2, "parkinson": hl**2 / (4 * np.log(2)),
            "garman_klass": 0.5 * hl**2 - (2 * np.log(2) - 1) * co**2, "rogers_satchell": rs,
            "yang_zhang": yz}


def test_estimators_match_independent_formulas_on_sp500(sp500):
    reference = _reference_estimates(sp500)
    for name in ESTIMATORS:
        np.testing.assert_allclose(daily_variance(sp500, name).to_numpy(), reference[name],
                                   rtol=1e-9, atol=1e-16, equal_nan=True, err_msg=name)


def test_sp500_annualised_levels_and_ordering(sp500):
    vol = {name: math.sqrt(252 * daily_variance(sp500, name).mean()) for name in ESTIMATORS}
    # Common practice: the S&P 500's long-run annualised volatility is about 15-25%; the
    # 1999-2018 sample includes 2000-02 and 2008, so allow 10-30% for every estimator.
    for name, v in vol.items():
        assert 0.10 < v < 0.30, (name, v)
    # The range estimators see only the open-to-close move and miss the overnight one (the
    # motivation of Yang and Zhang, 2000), so their mean variance sits below close-to-close.
    for name in ("parkinson", "garman_klass", "rogers_satchell"):
        assert vol[name] < vol["close_to_close"], (name, vol)
    # They estimate the same open-to-close variance, so their means are close: within 30%.
    ranged = [vol[n] ** 2 for n in ("parkinson", "garman_klass", "rogers_satchell")]
    assert max(ranged) / min(ranged) < 1.3, vol


def test_bad_input_messages():
    frame = toy_frame()
    with pytest.raises(ValueError, match="unknown variance estimator 'garch'.*parkinson"):
        daily_variance(frame, "garch")
    with pytest.raises(ValueError, match="takes no options"):
        daily_variance(frame, "parkinson", window=5)
    with pytest.raises(ValueError, match="window must be an integer >= 2"):
        yang_zhang(frame, window=1)
    with pytest.raises(ValueError, match=r"missing column\(s\) \['high'\]"):
        parkinson(frame.drop(columns="high"))
    bad = frame.copy()
    bad.iloc[2, bad.columns.get_loc("low")] = 0.0
    with pytest.raises(ValueError, match="'low' has 1 value.*2020-01-08"):
        garman_klass(bad)
    bad.iloc[2, bad.columns.get_loc("low")] = np.inf
    with pytest.raises(ValueError, match="'low' has 1 value.*infinite"):
        garman_klass(bad)
    # A missing price is not an error: that day's value is NaN (build_dataset drops the row).
    gap = frame.copy()
    gap.iloc[2, gap.columns.get_loc("high")] = np.nan
    assert parkinson(gap).isna().tolist() == [False, False, True, False, False]
    with pytest.raises(TypeError, match="DataFrame"):
        parkinson(frame.to_numpy())
