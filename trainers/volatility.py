"""Daily variance estimators from open, high, low and close prices.

Every estimator returns one value per day, in squared daily log-return units (not annualised,
not in percent), as a ``pd.Series`` on the frame's index. Multiply by 252 and take the square
root for an annualised volatility (252 trading days a year is common practice).

Zero and negative values:
    * ``close_to_close`` is exactly 0 on a day whose close equals the previous close.
    * ``parkinson`` is exactly 0 on a day with ``high == low``.
    * ``rogers_satchell`` is exactly 0 when ``high == low``, and also on a day that opens at its
      low and closes at its high (or the reverse): both products in its formula vanish.
    * ``garman_klass`` is never negative on a consistent bar. With ``u = ln(H/L)`` and
      ``c = ln(C/O)``, open and close inside ``[low, high]`` give ``|c| <= u``, so
      ``0.5 u^2 - (2 ln 2 - 1) c^2 >= (0.5 - 0.386) u^2 >= 0``; it is 0 only when ``high == low``.
      It turns negative only on a bar that breaks ``low <= open, close <= high``
      (``trainers.data.check_prices`` reports such rows).
    * ``yang_zhang`` is a sum of non-negative terms, 0 only on a window of flat days.

So a log transform of any proxy must floor it first (``FeatureConfig.floor`` in
``trainers.features`` does).

Example:
    >>> v = daily_variance(frame, "garman_klass")
    >>> annual_vol = float(np.sqrt(252 * v.mean()))
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = [
    "TRADING_DAYS",
    "ESTIMATORS",
    "close_to_close",
    "daily_variance",
    "garman_klass",
    "log_returns",
    "parkinson",
    "rogers_satchell",
    "yang_zhang",
]

TRADING_DAYS = 252  # annualisation: sqrt(252 x daily variance) is annual volatility (common practice)
ESTIMATORS = ("close_to_close", "parkinson", "garman_klass", "rogers_satchell", "yang_zhang")
PRICE_COLUMNS = ("open", "high", "low", "close")
LN2 = float(np.log(2.0))


def _prices(frame: pd.DataFrame, columns: tuple[str, ...] = PRICE_COLUMNS) -> dict[str, np.ndarray]:
    """Check the price columns an estimator needs and return them as float arrays.

    Raises:
        TypeError: ``frame`` is not a DataFrame.
        ValueError: a column is missing, not numeric, or holds a price <= 0.
    """
    if not isinstance(frame, pd.DataFrame):
        raise TypeError(
            f"frame must be a pandas DataFrame with columns {list(columns)}, got {type(frame).__name__}; "
            "load the file with trainers.data.load_prices(path).frame"
        )
    missing = [c for c in columns if c not in frame.columns]
    if missing:
        raise ValueError(
            f"price frame is missing column(s) {missing}; it has {list(frame.columns)}; "
            "rename the columns to lower-case open, high, low, close (load_prices(columns=...) does this)"
        )
    out = {}
    for c in columns:
        try:
            values = frame[c].to_numpy(dtype=np.float64)
        except (TypeError, ValueError) as exc:
            raise ValueError(
                f"price column {c!r} is not numeric (dtype {frame[c].dtype}); convert it to float first"
            ) from exc
        bad = ~np.isnan(values) & ~((values > 0) & np.isfinite(values))  # NaN rows give NaN
        if bad.any():
            first = int(np.flatnonzero(bad)[0])
            raise ValueError(
                f"price column {c!r} has {int(bad.sum())} value(s) <= 0 or infinite, first at "
                f"{frame.index[first]!s} ({values[first]!r}); log prices need positive finite prices; "
                "drop or correct those rows (load_prices(bad_rows='drop'))"
            )
        out[c] = values
    return out


def _series(values: np.ndarray, frame: pd.DataFrame, name: str) -> pd.Series:
    return pd.Series(values, index=frame.index, name=name, dtype=np.float64)


def log_returns(frame: pd.DataFrame) -> pd.Series:
    """Daily log close-to-close return ``r_t = ln(C_t / C_{t-1})``.

    Args:
        frame: price frame with a ``close`` column, rows in date order.

    Returns:
        Series on ``frame.index`` named ``"return"``; the first row is NaN.
    """
    close = _prices(frame, ("close",))["close"]
    r = np.full(close.shape, np.nan)
    r[1:] = np.log(close[1:] / close[:-1])
    return _series(r, frame, "return")


def close_to_close(frame: pd.DataFrame) -> pd.Series:
    """Squared log close-to-close return, not demeaned: ``sigma_t^2 = r_t^2``.

    The classical one-observation variance proxy (for example Andersen and Bollerslev (1998),
    "Answering the skeptics", use ``r_t^2`` as the daily proxy that range and realised measures
    improve on). The mean is not subtracted: daily means are negligible next to daily volatility
    (common practice).

    Returns:
        Series named ``"close_to_close"``; the first row is NaN.
    """
    r = log_returns(frame).to_numpy()
    return _series(r * r, frame, "close_to_close")


def parkinson(frame: pd.DataFrame) -> pd.Series:
    """Parkinson (1980) range estimator.

    Parkinson, M. (1980), "The extreme value method for estimating the variance of the rate of
    return", Journal of Business 53(1), 61-65:

        sigma_t^2 = (ln(H_t / L_t))^2 / (4 ln 2)

    Unbiased for a driftless Brownian log price observed continuously between open and close;
    it ignores the overnight move. Exactly 0 on a day with ``high == low``.

    Returns:
        Series named ``"parkinson"``.
    """
    p = _prices(frame, ("high", "low"))
    u = np.log(p["high"] / p["low"])
    return _series(u * u / (4.0 * LN2), frame, "parkinson")


def garman_klass(frame: pd.DataFrame) -> pd.Series:
    """Garman and Klass (1980) estimator (their practical "sigma_5").

    Garman, M. B. and Klass, M. J. (1980), "On the estimation of security price volatilities
    from historical data", Journal of Business 53(1), 67-78:

        sigma_t^2 = 0.5 (ln(H_t / L_t))^2 - (2 ln 2 - 1) (ln(C_t / O_t))^2

    Non-negative whenever ``low <= open, close <= high`` (see the module docstring); 0 when
    ``high == low``. Ignores the overnight move.

    Returns:
        Series named ``"garman_klass"``.
    """
    p = _prices(frame)
    u = np.log(p["high"] / p["low"])
    c = np.log(p["close"] / p["open"])
    return _series(0.5 * u * u - (2.0 * LN2 - 1.0) * c * c, frame, "garman_klass")


def rogers_satchell(frame: pd.DataFrame) -> pd.Series:
    """Rogers and Satchell (1991) drift-independent estimator.

    Rogers, L. C. G. and Satchell, S. E. (1991), "Estimating variance from high, low and closing
    prices", Annals of Applied Probability 1(4), 504-512:

        sigma_t^2 = ln(H_t / C_t) ln(H_t / O_t) + ln(L_t / C_t) ln(L_t / O_t)

    Unbiased for a Brownian log price with any constant drift. Both products are >= 0 on a
    consistent bar; the value is 0 when ``high == low`` and on a day that opens at one extreme
    and closes at the other.

    Returns:
        Series named ``"rogers_satchell"``.
    """
    p = _prices(frame)
    h, lo, o, c = (np.log(p[k]) for k in ("high", "low", "open", "close"))
    rs = (h - c) * (h - o) + (lo - c) * (lo - o)
    return _series(rs, frame, "rogers_satchell")


def _yang_zhang_k(window: int) -> float:
    """Yang and Zhang's weight ``k = 0.34 / (1.34 + (n + 1) / (n - 1))``."""
    return 0.34 / (1.34 + (window + 1) / (window - 1))


def yang_zhang(frame: pd.DataFrame, window: int = 22) -> pd.Series:
    """Yang and Zhang (2000) estimator over a rolling window of ``n`` days.

    Yang, D. and Zhang, Q. (2000), "Drift-independent volatility estimation based on high, low,
    open, and close prices", Journal of Business 73(3), 477-491:

        sigma_t^2 = sigma_o^2 + k sigma_c^2 + (1 - k) sigma_rs^2,
        k = 0.34 / (1.34 + (n + 1) / (n - 1)),

    where, over the ``n`` days ``t-n+1 .. t``, ``sigma_o^2`` is the sample variance (demeaned,
    divisor ``n - 1``) of the overnight return ``ln(O_i / C_{i-1})``, ``sigma_c^2`` the sample
    variance of the open-to-close return ``ln(C_i / O_i)``, and ``sigma_rs^2`` the mean of the
    Rogers-Satchell values. The value at ``t`` uses days up to ``t`` only.

    Args:
        frame: price frame, rows in date order.
        window: ``n``, the number of days in each window, at least 2.

    Returns:
        Series named ``"yang_zhang"``; the first ``window`` rows are NaN (the first overnight
        return needs a previous close).

    Raises:
        ValueError: ``window`` is not an integer >= 2.
    """
    if isinstance(window, bool) or not isinstance(window, (int, np.integer)) or window < 2:
        raise ValueError(
            f"yang_zhang window must be an integer >= 2 (it divides by n - 1), got {window=!r}; "
            "use the default 22 (about one trading month)"
        )
    window = int(window)
    p = _prices(frame)
    overnight = np.full(p["open"].shape, np.nan)
    overnight[1:] = np.log(p["open"][1:] / p["close"][:-1])
    open_close = pd.Series(np.log(p["close"] / p["open"]))
    rs = pd.Series(rogers_satchell(frame).to_numpy())
    var_o = pd.Series(overnight).rolling(window).var(ddof=1)
    var_c = open_close.rolling(window).var(ddof=1)
    mean_rs = rs.rolling(window).mean()
    k = _yang_zhang_k(window)
    values = (var_o + k * var_c + (1.0 - k) * mean_rs).to_numpy()
    # pandas' rolling variance can return tiny negatives from round-off on flat windows
    values = np.where(values < 0.0, 0.0, values)
    return _series(values, frame, "yang_zhang")


_FUNCTIONS = {
    "close_to_close": close_to_close,
    "parkinson": parkinson,
    "garman_klass": garman_klass,
    "rogers_satchell": rogers_satchell,
    "yang_zhang": yang_zhang,
}


def daily_variance(frame: pd.DataFrame, estimator: str, **kwargs) -> pd.Series:
    """Daily variance proxy by estimator name.

    Args:
        frame: price frame (DatetimeIndex ``date``, columns open, high, low, close).
        estimator: one of ``ESTIMATORS``.
        **kwargs: options of that estimator; only ``yang_zhang`` takes one (``window``).

    Returns:
        Series on ``frame.index`` named after the estimator, squared daily log-return units.

    Raises:
        ValueError: unknown estimator, or options it does not take.
    """
    if estimator not in _FUNCTIONS:
        raise ValueError(
            f"unknown variance estimator {estimator!r}; choose one of {', '.join(ESTIMATORS)}"
        )
    allowed = {"yang_zhang": {"window"}}.get(estimator, set())
    extra = sorted(set(kwargs) - allowed)
    if extra:
        takes = f"takes only {sorted(allowed)}" if allowed else "takes no options"
        raise ValueError(
            f"variance estimator {estimator!r} {takes}, got {extra}; remove them "
            "(window is for yang_zhang only)"
        )
    return _FUNCTIONS[estimator](frame, **kwargs)
