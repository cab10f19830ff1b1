"""The checks of daily prices: `Problem`, `PriceFileError`, and every row and size check.

`trainers.data` reads files and runs these; `check_prices` runs them on a frame already parsed.
"""

from __future__ import annotations

import difflib
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

__all__ = [
    "BAD_ROWS", "DATE_COLUMN", "DATE_UNIT", "FIX_DATE", "MAX_LISTED", "REQUIRED_COLUMNS", "PriceFileError", "Problem",
    "check_min_rows", "check_prices", "check_rows", "missing_column_problem", "size_problems", "sorted_problems",
]

REQUIRED_COLUMNS = ("open", "high", "low", "close")
DATE_COLUMN = "date"
BAD_ROWS = ("error", "drop")
DATE_UNIT = "us"                 # resolution of every DatetimeIndex trainers.data returns
MAX_LISTED = 10                  # problems shown in str(PriceFileError)
FIX_DATE = "write every date as YYYY-MM-DD (or pass date_format=...)"


@dataclass(frozen=True)
class Problem:
    """One thing wrong with a price file or frame.

    Attributes:
        message: what is wrong, with the value received.
        fix: how to put it right.
        line: 1-based line in the file (header = line 1), or None for the whole file.
        date: the row's date as written, when known.
        column: the column concerned, when one is.
    """

    message: str
    fix: str
    line: int | None = None
    date: str | None = None
    column: str | None = None

    def __str__(self) -> str:
        where = []
        if self.line is not None:
            where.append(f"line {self.line}" + (f" (date {self.date})" if self.date else ""))
        if self.column is not None:
            where.append(f"column {self.column}")
        head = ", ".join(where)
        return f"{head + ': ' if head else ''}{self.message}; fix: {self.fix}"


class PriceFileError(ValueError):
    """A price file (or frame) failed its checks; ``problems`` lists every problem found.

    Attributes:
        source: the file named in the message.
        problems: every problem, in file order, structural ones first.
    """

    def __init__(self, source: str, problems: Sequence[Problem]):
        self.source = str(source)
        self.problems = list(problems)
        super().__init__(self._text())

    def _head(self) -> str:
        n = len(self.problems)
        return f"price file {self.source} has {n} problem{'s' if n != 1 else ''}"

    def _text(self) -> str:
        lines = [self._head()] + [f"  {p}" for p in self.problems[:MAX_LISTED]]
        if len(self.problems) > MAX_LISTED:
            lines.append(f"  ... and {len(self.problems) - MAX_LISTED} more")
        return "\n".join(lines)

    def summary(self) -> str:
        """One line for the CLI: the file, the count and the first problem."""
        first = f"; first: {self.problems[0]}" if self.problems else ""
        more = len(self.problems) - 1
        rest = f" (and {more} more)" if more > 0 else ""
        return f"{self._head()}{first}{rest}"


def check_prices(frame: pd.DataFrame, *, min_rows: int = 0, lines: Sequence[int] | None = None) -> list[Problem]:
    """Check a parsed price frame; return every problem (an empty list when it is clean).

    Args:
        frame: DatetimeIndex; columns open, high, low, close (lower case) and optional numeric extras.
        min_rows: fewest rows the features asked for need.
        lines: the file line of each row; by default row i is line i + 2 (as ``frame_to_csv_text``
            writes it, header = line 1).

    Returns:
        Problems in row order, whole-frame problems first.
    """
    check_min_rows(min_rows)
    problems = []
    missing = [c for c in REQUIRED_COLUMNS if c not in frame.columns]
    if missing:
        return [missing_column_problem(c, [str(h) for h in frame.columns], None) for c in missing]
    if not isinstance(frame.index, pd.DatetimeIndex):
        return [Problem(f"the index is {type(frame.index).__name__}, not dates",
                        "set a DatetimeIndex of the trading days")]
    n = len(frame)
    line_no = np.arange(2, n + 2) if lines is None else np.asarray(lines)
    dates = frame.index.as_unit(DATE_UNIT)
    values, bad = {}, {}
    for col in frame.columns:
        s = frame[col]
        if not (pd.api.types.is_numeric_dtype(s) and not pd.api.types.is_bool_dtype(s)):
            problems.append(Problem(f"column is not numeric (dtype {s.dtype})",
                                    "drop the column or convert it to numbers", column=str(col)))
            continue
        values[str(col)] = s.to_numpy(dtype=float)
        bad[str(col)] = np.zeros(n, bool)
    if any(c not in values for c in REQUIRED_COLUMNS):
        return problems
    for i in np.flatnonzero(dates.isna()):
        problems.append(Problem("missing date (NaT)", FIX_DATE, int(line_no[i])))
    problems += size_problems(n, min_rows)
    problems += check_rows(dates, values, bad, line_no, None)
    return sorted_problems(problems)


def check_min_rows(min_rows) -> None:
    if isinstance(min_rows, bool) or not isinstance(min_rows, (int, np.integer)) or min_rows < 0:
        raise ValueError(f"min_rows must be an integer >= 0, got {min_rows=!r}")


def sorted_problems(problems: list[Problem]) -> list[Problem]:
    return sorted(problems, key=lambda p: -1 if p.line is None else p.line)


def size_problems(n: int, min_rows: int) -> list[Problem]:
    if n == 0:
        return [Problem("there are no data rows, only a header", "add rows of daily prices below the header")]
    if n < min_rows:
        return [Problem(f"only {n} rows, fewer than min_rows={min_rows} that the features asked for need",
                        "use a longer price history, or shorter HAR windows / horizons / lags")]
    return []


def check_rows(dates, values: dict, bad: dict, line_no, texts: list[str] | None) -> list[Problem]:
    """Non-finite, non-positive, OHLC bound and date order problems; ``bad`` marks cells reported already.

    ``texts`` holds the dates as written in the file; None writes them from ``dates``.
    """
    out = []
    dates = pd.DatetimeIndex(dates)

    def text(i):
        if texts is not None:
            return texts[i] or None
        return None if pd.isna(dates[i]) else dates[i].strftime("%Y-%m-%d")

    def add(i, message, fix, column=None):
        out.append(Problem(message, fix, int(line_no[i]), text(i), column))

    for col, v in values.items():
        fresh = ~bad[col]
        for i in np.flatnonzero(np.isnan(v) & fresh):
            add(i, "NaN value", "fill in the value or drop the row", col)
        for i in np.flatnonzero(np.isinf(v) & fresh):
            add(i, f"infinite value ({float(v[i])!r})", "fill in a finite value or drop the row", col)
    o, h, lo, c = (values[k] for k in REQUIRED_COLUMNS)
    with np.errstate(invalid="ignore"):
        for col in REQUIRED_COLUMNS:
            for i in np.flatnonzero(values[col] <= 0):
                add(i, f"price not positive ({float(values[col][i])!r})", "correct the price or drop the row", col)
        ok = np.isfinite(o) & np.isfinite(h) & np.isfinite(lo) & np.isfinite(c) & (o > 0) & (h > 0)
        ok &= (lo > 0) & (c > 0)
        top, bottom = np.maximum(o, c), np.minimum(o, c)
        for i in np.flatnonzero(ok & (h < top)):
            add(i, f"high {float(h[i])!r} below max(open, close) = {float(top[i])!r}",
                "correct high (high >= open, close) or drop the row", "high")
        for i in np.flatnonzero(ok & (lo > bottom)):
            add(i, f"low {float(lo[i])!r} above min(open, close) = {float(bottom[i])!r}",
                "correct low (low <= open, close) or drop the row", "low")
    keys = dates.asi8
    known = ~dates.isna()
    if known.all() and (np.diff(keys) > 0).all():
        return out
    first_seen, latest, latest_i = {}, None, None
    nat = pd.NaT.value
    for i, key in enumerate(keys.tolist()):
        if key == nat:
            continue
        d = key
        if key in first_seen:
            add(i, f"duplicate date, also on line {int(line_no[first_seen[key]])}",
                "keep one row per date", DATE_COLUMN)
        elif latest is not None and d < latest:
            add(i, f"dates not strictly increasing: earlier than {text(latest_i)} on line "
                   f"{int(line_no[latest_i])}", "sort the file by date, oldest first", DATE_COLUMN)
        if key not in first_seen:
            first_seen[key] = i
        if latest is None or d > latest:
            latest, latest_i = d, i
    return out


def missing_column_problem(name: str, headers: list[str], mapped: str | None) -> Problem:
    asked = mapped if mapped is not None else name
    near = difflib.get_close_matches(asked.lower(), [h.lower() for h in headers], n=1, cutoff=0.5)
    found = f"; nearest header found: {headers[[h.lower() for h in headers].index(near[0])]!r}" if near else ""
    if mapped is not None:
        return Problem(f"columns maps {name!r} to {mapped!r}, which is not in the header{found}",
                       "give in columns= a header the file has", column=name)
    hint = near[0] if near else "YOUR_HEADER"
    if name == DATE_COLUMN and "" in headers:
        return Problem(f"missing required column {name!r}; column {headers.index('') + 1} has no header",
                       f"name that column {name!r} in the header, or pass columns={{{name!r}: ''}}", column=name)
    return Problem(f"missing required column {name!r}{found}",
                   f"rename the header to {name!r} or pass columns={{{name!r}: {hint!r}}}", column=name)
