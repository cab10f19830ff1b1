"""Tests of trainers/price_checks.py: `Problem`, `PriceFileError` and the checks of a parsed price frame.

Outside references: arch's bundled S&P 500 daily prices (arch.data.sp500, 5031 rows, 1999-2018) as a
real frame that passes every check and in which planted faults are found at their rows; Python's difflib
for the nearest header; the bounds of a daily bar (high >= max(open, close), low <= min(open, close),
prices > 0: common practice).
"""

import difflib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from trainers.data import load_prices
from trainers.price_checks import (
    FIX_DATE, MAX_LISTED, PriceFileError, Problem, check_min_rows, check_prices, check_rows, missing_column_problem,
    size_problems, sorted_problems,
)

FIXTURES = Path(__file__).resolve().parents[1] / "fixtures" / "prices"


def frame_of(rows, dates=None) -> pd.DataFrame:
    """A price frame from (open, high, low, close) rows on business days from 2021-01-04."""
    index = pd.DatetimeIndex(dates) if dates is not None else pd.bdate_range("2021-01-04", periods=len(rows))
    return pd.DataFrame(rows, columns=["open", "high", "low", "close"], index=index.rename("date"), dtype=float)


@pytest.fixture(scope="module")
def sp500() -> pd.DataFrame:
    data = pytest.importorskip("arch.data.sp500").load()
    frame = data.rename(columns=str.lower)
    frame.index = pd.DatetimeIndex(frame.index).rename("date")
    return frame.astype(float)


# ---------------------------------------------------------------- moved from test_data.py


def test_check_prices_on_a_frame():
    frame = load_prices(FIXTURES / "good_small.csv").frame
    assert check_prices(frame) == []
    bad = frame.copy()
    bad.iloc[2, 1] = 100.0          # high below open 101.6 on the third row (line 4)
    bad.iloc[5, 3] = np.nan         # close NaN on the sixth row (line 7)
    problems = check_prices(bad, min_rows=20)
    assert [str(p).split(":")[0] for p in problems] == [
        "only 8 rows, fewer than min_rows=20 that the features asked for need; fix",
        "line 4 (date 2021-01-06), column high", "line 7 (date 2021-01-11), column close"]
    assert check_prices(bad, lines=range(10, 18))[0].line == 12


def test_problem_str_is_one_line():
    p = Problem("high 1.0 below max(open, close) = 2.0", "correct high", 14, "2021-03-04", "high")
    assert str(p) == "line 14 (date 2021-03-04), column high: high 1.0 below max(open, close) = 2.0; fix: correct high"
    assert str(Problem("the file is empty", "write rows")) == "the file is empty; fix: write rows"


# ---------------------------------------------------------------- a real frame: the S&P 500 from arch


def test_check_prices_passes_the_sp500_frame(sp500):
    assert len(sp500) == 5031
    assert check_prices(sp500, min_rows=1000) == []


def test_check_prices_finds_faults_planted_in_the_sp500_frame(sp500):
    broken = sp500.copy()
    close = broken.columns.get_loc("close")
    broken.iloc[100, broken.columns.get_loc("high")] = broken.iloc[100, close] - 1.0
    broken.iloc[200, broken.columns.get_loc("low")] = max(broken.iloc[200, close], broken.iloc[200, 0]) + 1.0
    broken.iloc[300, close] = 0.0
    broken.iloc[400, broken.columns.get_loc("volume")] = np.inf
    dates = broken.index.tolist()
    dates[600], dates[601] = dates[601], dates[600]     # two days out of order
    broken.index = pd.DatetimeIndex(dates).rename("date")
    found = [(p.line, p.column) for p in check_prices(broken)]
    # rows are file lines from 2 (header = line 1), in row order
    assert found == [(102, "high"), (202, "low"), (302, "close"), (402, "volume"), (603, "date")]
    problems = check_prices(broken)
    assert problems[0].date == sp500.index[100].strftime("%Y-%m-%d")
    assert "dates not strictly increasing: earlier than" in problems[-1].message


# ---------------------------------------------------------------- the row checks


def test_check_prices_bar_bounds_are_inclusive():
    # high equal to max(open, close) and low equal to min(open, close) are valid bars
    assert check_prices(frame_of([[10, 11, 9, 11], [10, 10, 10, 10], [11, 11, 9, 9]])) == []
    problems = check_prices(frame_of([[10, 11, 9, 11 + 1e-9], [10, 11, 10 + 1e-9, 10.5]]))
    assert [(p.line, p.column) for p in problems] == [(2, "high"), (3, "low")]
    assert problems[0].message == f"high 11.0 below max(open, close) = {11 + 1e-9!r}"


def test_check_prices_names_each_kind_of_bad_value():
    rows = [[10, 11, 9, 10], [np.nan, 11, 9, 10], [10, np.inf, 9, 10], [-1, 11, 9, 10], [10, 11, 9, 0]]
    problems = check_prices(frame_of(rows))
    assert [(p.line, p.column, p.message) for p in problems] == [
        (3, "open", "NaN value"),
        (4, "high", "infinite value (inf)"),
        (5, "open", "price not positive (-1.0)"),
        (6, "close", "price not positive (0.0)"),
    ]
    # a bad cell is reported once: no bound check on a row with a non-finite or non-positive price
    assert all("below" not in p.message and "above" not in p.message for p in problems)


def test_check_prices_dates_duplicate_unsorted_and_missing():
    dates = ["2021-01-04", "2021-01-05", "2021-01-05", "2021-01-04", None, "2021-01-08"]
    problems = check_prices(frame_of([[10, 11, 9, 10]] * 6, dates=pd.to_datetime(dates)))
    assert [(p.line, p.message) for p in problems] == [
        (4, "duplicate date, also on line 3"),
        (5, "duplicate date, also on line 2"),
        (6, "missing date (NaT)"),
    ]
    assert problems[2].fix == FIX_DATE
    unsorted = check_prices(frame_of([[10, 11, 9, 10]] * 3, dates=pd.to_datetime(["2021-01-05", "2021-01-07",
                                                                                  "2021-01-06"])))
    assert [(p.line, p.message) for p in unsorted] == [
        (4, "dates not strictly increasing: earlier than 2021-01-07 on line 3")]


def test_check_prices_structural_problems_come_alone():
    frame = frame_of([[10, 11, 9, 10]]).drop(columns=["close"])
    (missing,) = check_prices(frame)
    assert (missing.column, missing.line) == ("close", None)
    plain = frame_of([[10, 11, 9, 10]]).reset_index(drop=True)
    assert [p.message for p in check_prices(plain)] == ["the index is RangeIndex, not dates"]
    text = frame_of([[10, 11, 9, 10]]).assign(sector=["harbour"])
    assert [(p.column, p.message) for p in check_prices(text)][0][0] == "sector"
    flags = frame_of([[10, 11, 9, 10]]).assign(open=[True])
    assert [p.column for p in check_prices(flags)] == ["open"]


def test_check_rows_skips_cells_already_reported_and_uses_dates_as_written():
    values = {"open": np.array([10.0, np.nan]), "high": np.array([11.0, 11.0]), "low": np.array([9.0, 9.0]),
              "close": np.array([10.0, 10.0])}
    bad = {k: np.zeros(2, bool) for k in values}
    dates = pd.DatetimeIndex(["2021-01-04", "2021-01-05"])
    (problem,) = check_rows(dates, values, bad, np.array([2, 3]), ["04/01/2021", "05/01/2021"])
    assert (problem.line, problem.date, problem.column) == (3, "05/01/2021", "open")
    bad["open"][1] = True  # the reader reported this cell already (e.g. as text that is not a number)
    assert check_rows(dates, values, bad, np.array([2, 3]), None) == []


def test_size_problems_and_min_rows():
    assert size_problems(0, 0)[0].message == "there are no data rows, only a header"
    assert size_problems(5, 6)[0].message == "only 5 rows, fewer than min_rows=6 that the features asked for need"
    assert size_problems(6, 6) == []
    check_min_rows(np.int64(3))
    for bad in (-1, 1.5, True, "3", None):
        with pytest.raises(ValueError, match="min_rows must be an integer >= 0"):
            check_min_rows(bad)


def test_sorted_problems_puts_whole_file_problems_first_then_lines_in_order():
    problems = [Problem("b", "f", 7), Problem("whole", "f"), Problem("a", "f", 3), Problem("c", "f", 7)]
    assert [p.message for p in sorted_problems(problems)] == ["whole", "a", "b", "c"]


def test_missing_column_problem_suggests_the_nearest_header():
    headers = ["Date", "Open", "Hgh", "Low", "Clsoe"]
    problem = missing_column_problem("close", headers, None)
    # difflib's closest match among the lower-cased headers, shown as written
    assert difflib.get_close_matches("close", [h.lower() for h in headers], n=1, cutoff=0.5) == ["clsoe"]
    assert problem.message == "missing required column 'close'; nearest header found: 'Clsoe'"
    assert problem.fix == "rename the header to 'close' or pass columns={'close': 'clsoe'}"
    mapped = missing_column_problem("close", headers, "Last")
    # "last" and "date" share half their letters: difflib's ratio 0.5 meets the 0.5 cutoff
    assert difflib.SequenceMatcher(None, "last", "date").ratio() == 0.5
    assert mapped.message == "columns maps 'close' to 'Last', which is not in the header; nearest header found: 'Date'"
    assert missing_column_problem("close", headers, "Zz").message == \
        "columns maps 'close' to 'Zz', which is not in the header"
    blank = missing_column_problem("date", ["", "open", "high", "low", "close"], None)
    assert blank.message == "missing required column 'date'; column 1 has no header"


# ---------------------------------------------------------------- the error


def test_price_file_error_lists_ten_problems_then_a_count_and_sums_up_in_one_line():
    problems = [Problem("NaN value", "fill in the value or drop the row", line, None, "close")
                for line in range(2, 2 + MAX_LISTED + 3)]
    err = PriceFileError("prices.csv", problems)
    lines = str(err).splitlines()
    assert lines[0] == "price file prices.csv has 13 problems"
    assert len(lines) == 1 + MAX_LISTED + 1 and lines[-1] == "  ... and 3 more"
    assert err.summary() == ("price file prices.csv has 13 problems; first: line 2, column close: NaN value; "
                             "fix: fill in the value or drop the row (and 12 more)")
    assert isinstance(err, ValueError) and err.source == "prices.csv" and err.problems == problems
    one = PriceFileError("p.csv", problems[:1])
    assert str(one).splitlines()[0] == "price file p.csv has 1 problem" and "(and" not in one.summary()
