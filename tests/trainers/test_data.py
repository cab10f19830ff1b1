"""Tests for trainers/data.py: reading and checking daily price files.

The fixtures in tests/fixtures/prices/ are tiny invented prices; each malformed file has one known
fault at a known line (header = line 1). The checks on a parsed frame (trainers/price_checks.py) are
tested in tests/trainers/test_price_checks.py. Outside references: pandas.read_csv for the values of the good
file, hashlib for the SHA-256, and arch's bundled S&P 500 file (arch.data.sp500) as real OHLC data.
"""

import hashlib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from pandas.testing import assert_frame_equal

from trainers.data import (
    REQUIRED_COLUMNS, PriceFileError, check_prices, frame_to_csv_text, load_prices, read_prices_csv_text,
    sha256_file,
)

FIXTURES = Path(__file__).resolve().parents[1] / "fixtures" / "prices"

# file, load_prices kwargs, expected line (None = whole file), column, pattern in the one-line summary
MALFORMED = [
    ("bad_date.csv", {}, 4, "date", r"unparseable date '2021-02-30'"),
    ("mixed_date_formats.csv", {}, 5, "date", r"'07/01/2021' is DD/MM/YYYY.*mixed date formats"),
    ("unsorted.csv", {}, 6, "date", r"not strictly increasing: earlier than 2021-01-08 on line 5"),
    ("duplicate_date.csv", {}, 4, "date", r"duplicate date, also on line 3"),
    ("missing_close_column.csv", {}, None, "close", r"missing required column 'close'.*nearest header found: 'clsoe'"),
    ("missing_date_column.csv", {}, None, "date", r"missing required column 'date'; column 1 has no header"),
    ("non_numeric.csv", {}, 3, "high", r"non-numeric value 'abc'"),
    ("empty_value.csv", {}, 4, "open", r"missing value"),
    ("nan_value.csv", {}, 3, "close", r"NaN value"),
    ("inf_value.csv", {}, 5, "low", r"infinite value \(inf\)"),
    ("zero_price.csv", {}, 3, "open", r"price not positive \(0\.0\)"),
    ("negative_price.csv", {}, 6, "close", r"price not positive \(-99\.5\)"),
    ("high_below_close.csv", {}, 7, "high", r"high 100\.0 below max\(open, close\) = 100\.1"),
    ("low_above_open.csv", {}, 3, "low", r"low 101\.0 above min\(open, close\) = 100\.8"),
    ("too_few_rows.csv", {"min_rows": 30}, None, None, r"only 3 rows, fewer than min_rows=30"),
    ("empty.csv", {}, None, None, r"the file is empty"),
    ("header_only.csv", {}, None, None, r"no data rows, only a header"),
    ("binary.csv", {}, None, None, r"binary data"),
    ("not_utf8.csv", {}, None, None, r"not UTF-8 text \(byte 0xe9"),
    ("semicolon_separated.csv", {}, 1, None, r"separated by semicolons, not commas"),
    ("wrong_field_count.csv", {}, 6, None, r"the row has 4 fields, the header 6"),
    ("non_numeric_extra_column.csv", {}, None, "sector", r"column 'sector' is not numeric.*ignore_columns"),
    ("duplicate_header.csv", {}, 1, "close", r"the header names 'close' twice"),
    ("ambiguous_date_format.csv", {}, None, "date", r"day/month or month/day"),
]


@pytest.mark.parametrize(("name", "kwargs", "line", "column", "pattern"), MALFORMED, ids=[m[0] for m in MALFORMED])
def test_load_prices_names_the_fault_of_each_malformed_fixture(name, kwargs, line, column, pattern):
    with pytest.raises(PriceFileError) as info:
        load_prices(FIXTURES / name, **kwargs)
    err = info.value
    # each fixture has exactly one fault, reported once, at its line and column
    assert len(err.problems) == 1, str(err)
    problem = err.problems[0]
    assert (problem.line, problem.column) == (line, column), str(problem)
    summary = err.summary()
    assert "\n" not in summary
    assert summary.startswith(f"price file {FIXTURES / name} has 1 problem;")
    assert pd.Series([summary]).str.contains(pattern).item(), summary
    if line is not None:
        assert f"line {line}" in summary
    assert "; fix: " in summary


def test_fixture_directory_holds_at_least_fifteen_malformed_files():
    names = {p.name for p in FIXTURES.glob("*.csv")} - {"good_small.csv"}
    assert len(names) >= 15
    assert {m[0] for m in MALFORMED} <= names


def test_load_prices_good_file_matches_pandas_read_csv():
    path = FIXTURES / "good_small.csv"
    data = load_prices(path)
    # reference: pandas' own reader on the same file (headers lower-cased as load_prices promises)
    ref = pd.read_csv(path, index_col=0, parse_dates=True).astype(float)
    ref.columns = [c.lower() for c in ref.columns]
    ref.index = ref.index.rename("date").as_unit("us")
    assert_frame_equal(data.frame, ref)
    assert list(data.frame.columns[:4]) == list(REQUIRED_COLUMNS)
    assert data.frame.dtypes.eq(np.float64).all()
    # reference: hashlib over the file bytes
    assert data.sha256 == hashlib.sha256(path.read_bytes()).hexdigest() == sha256_file(path)
    assert data.source == str(path.resolve())
    assert data.dropped == ()


def test_load_prices_reports_every_problem_not_only_the_first():
    with pytest.raises(PriceFileError) as info:
        load_prices(FIXTURES / "many_problems.csv")
    found = [(p.line, p.column) for p in info.value.problems]
    assert found == [(3, "high"), (5, "close"), (7, "low"), (9, "date")]
    text = str(info.value).splitlines()
    assert text[0] == f"price file {FIXTURES / 'many_problems.csv'} has 4 problems"
    assert text[1].strip() == "line 3 (date 2021-01-05), column high: non-numeric value 'abc'; " \
                              "fix: fill in a number or drop the row"
    assert len(text) == 5


def test_price_file_error_lists_ten_problems_then_a_count(tmp_path):
    rows = [f"2021-02-{d:02d},100,101,99,abc" for d in range(1, 16)]
    path = tmp_path / "fifteen.csv"
    path.write_text("date,open,high,low,close\n" + "\n".join(rows) + "\n")
    with pytest.raises(PriceFileError) as info:
        load_prices(path)
    lines = str(info.value).splitlines()
    assert lines[0].endswith("has 15 problems")
    assert len(lines) == 1 + 10 + 1 and lines[-1].strip() == "... and 5 more"
    assert info.value.summary().endswith("(and 14 more)")
    assert isinstance(info.value, ValueError)


def test_load_prices_drop_returns_the_dropped_rows():
    data = load_prices(FIXTURES / "many_problems.csv", bad_rows="drop")
    assert [p.line for p in data.dropped] == [3, 5, 7, 9]
    # lines 3, 5, 7, 9 are data rows 1, 3, 5, 7 of 8: four rows remain
    assert data.frame.index.strftime("%Y-%m-%d").tolist() == ["2021-01-04", "2021-01-06", "2021-01-08", "2021-01-12"]
    assert check_prices(data.frame) == []


def test_load_prices_drop_still_raises_on_structural_problems():
    with pytest.raises(PriceFileError, match="missing required column 'close'"):
        load_prices(FIXTURES / "missing_close_column.csv", bad_rows="drop")
    with pytest.raises(PriceFileError, match="fewer than min_rows=7"):
        load_prices(FIXTURES / "many_problems.csv", bad_rows="drop", min_rows=7)


def test_load_prices_column_map_and_ignored_columns(tmp_path):
    path = tmp_path / "renamed.csv"
    path.write_text("Day,Opening,Hi,Lo,Last,Sector,Last Adj\n"
                    "2021-01-04,10,11,9,10.5,harbour,10.4\n2021-01-05,10.5,10.9,10.1,10.2,harbour,10.1\n")
    data = load_prices(path, columns={"date": "day", "open": "Opening", "high": "HI", "low": "Lo",
                                      "close": "Last"}, ignore_columns=["sector"])
    assert list(data.frame.columns) == ["open", "high", "low", "close", "last adj"]
    assert data.frame["close"].tolist() == [10.5, 10.2]
    with pytest.raises(PriceFileError, match="columns maps 'close' to 'Final', which is not in the header"):
        load_prices(path, columns={"date": "day", "close": "Final"})


def test_load_prices_map_clash_names_both_columns(tmp_path):
    path = tmp_path / "adj.csv"
    path.write_text("date,open,high,low,close,adj close\n2021-01-04,10,11,9,10.5,10.4\n")
    with pytest.raises(PriceFileError, match="column 'close' clashes with 'close' taken from 'adj close'"):
        load_prices(path, columns={"close": "Adj Close"})
    data = load_prices(path, columns={"close": "Adj Close", "close_raw": "close"})
    assert data.frame.loc["2021-01-04", ["close", "close_raw"]].tolist() == [10.4, 10.5]


def test_load_prices_line_numbers_count_blank_lines_crlf_and_bom(tmp_path):
    path = tmp_path / "crlf.csv"
    path.write_bytes("\ufeffDate,Open,High,Low,Close\r\n2021-01-04,10,11,9,10.5\r\n\r\n"
                     "2021-01-05,10,9,9,10.5\r\n".encode("utf-8"))
    with pytest.raises(PriceFileError) as info:
        load_prices(path)
    # the header is line 1, the blank line is line 3, the bad row line 4
    assert [(p.line, p.date, p.column) for p in info.value.problems] == [(4, "2021-01-05", "high")]


def test_load_prices_date_format_settles_ambiguous_dates():
    data = load_prices(FIXTURES / "ambiguous_date_format.csv", date_format="%d/%m/%Y")
    assert data.frame.index[1] == pd.Timestamp("2021-01-02")


@pytest.mark.parametrize(("kwargs", "pattern"), [({"bad_rows": "skip"}, "bad_rows"), ({"min_rows": -1}, "min_rows")])
def test_load_prices_rejects_bad_arguments(kwargs, pattern):
    with pytest.raises(ValueError, match=pattern):
        load_prices(FIXTURES / "good_small.csv", **kwargs)


def test_load_prices_missing_path_is_a_price_file_error(tmp_path):
    with pytest.raises(PriceFileError, match="the path does not exist; fix: give the path"):
        load_prices(tmp_path / "nope.csv")


def test_frame_to_csv_text_round_trip_is_exact():
    rng = np.random.default_rng(0)
    n = 50
    close = 100 * np.exp(np.cumsum(rng.normal(0, 0.02, n)))
    open_ = close * np.exp(rng.normal(0, 0.005, n))
    frame = pd.DataFrame({
        "open": open_, "high": np.maximum(open_, close) * (1 + rng.random(n) / 50),
        "low": np.minimum(open_, close) * (1 - rng.random(n) / 50), "close": close,
        "tiny": rng.normal(0, 1e-300, n), "huge": rng.normal(0, 1e20, n), "volume": rng.integers(0, 10**9, n) * 1.0,
    }, index=pd.bdate_range("2020-01-01", periods=n, name="date").as_unit("us"))
    frame.index.freq = None
    text = frame_to_csv_text(frame)
    assert text.splitlines()[0] == "date,open,high,low,close,tiny,huge,volume"
    back = read_prices_csv_text(text)
    # exact: repr floats parse back to the same doubles (check_exact, no tolerance)
    assert_frame_equal(back, frame, check_exact=True)
    assert frame_to_csv_text(back) == text


def test_read_prices_csv_text_raises_with_its_source_name():
    with pytest.raises(PriceFileError, match="price file record copy has 1 problem"):
        read_prices_csv_text("date,open,high,low,close\n2021-01-04,1,1,1,x\n", source="record copy")


def test_frame_to_csv_text_rejects_a_non_date_index():
    with pytest.raises(ValueError, match="DatetimeIndex"):
        frame_to_csv_text(pd.DataFrame({"open": [1.0]}))


def test_arch_sp500_loads_cleanly(tmp_path):
    # Open dataset: S&P 500 daily OHLC 1999-01-04..2018-12-31 shipped by the arch package
    # (arch.data.sp500, 5031 rows). Checked with this code: no row has high < max(open, close) or
    # low > min(open, close), no non-positive price, no missing value (arch.data.nasdaq likewise).
    sp500 = pytest.importorskip("arch.data.sp500").load()
    path = tmp_path / "sp500.csv"
    sp500.to_csv(path)
    data = load_prices(path, min_rows=1000)
    assert len(data.frame) == 5031
    assert data.frame.index[0] == pd.Timestamp("1999-01-04") and data.frame.index[-1] == pd.Timestamp("2018-12-31")
    assert list(data.frame.columns) == ["open", "high", "low", "close", "adj close", "volume"]
    np.testing.assert_array_equal(data.frame["close"].to_numpy(), sp500["Close"].to_numpy())
    np.testing.assert_array_equal(data.frame["volume"].to_numpy(), sp500["Volume"].to_numpy(dtype=float))
    # the checker still names a fault planted in the real data, by its line and date
    broken = sp500.copy()
    broken.iloc[100, broken.columns.get_loc("High")] = broken["Close"].iloc[100] - 1.0
    broken.to_csv(path)
    with pytest.raises(PriceFileError) as info:
        load_prices(path)
    (problem,) = info.value.problems
    assert (problem.line, problem.date, problem.column) == (102, sp500.index[100].strftime("%Y-%m-%d"), "high")


def test_load_prices_lists_row_problems_beside_structural_ones(tmp_path):
    path = tmp_path / "both.csv"
    path.write_text("date,open,high,low,close\n2021-01-04,10,11,9,x\n")
    with pytest.raises(PriceFileError) as info:
        load_prices(path, columns={"vix": "VolIdx"})
    assert [(p.line, p.column) for p in info.value.problems] == [(None, "vix"), (2, "close")]
    assert "columns maps 'vix' to 'VolIdx', which is not in the header" in str(info.value)


def test_load_prices_drop_with_every_row_bad_says_so(tmp_path):
    path = tmp_path / "allbad.csv"
    path.write_text("date,open,high,low,close\n2021-01-04,10,11,9,x\n2021-01-05,10,11,9,\n")
    with pytest.raises(PriceFileError, match=r"every row has a problem \(2 found; first: line 2"):
        load_prices(path, bad_rows="drop")


def test_load_prices_partly_text_extra_column_suggests_ignoring_it(tmp_path):
    path = tmp_path / "notes.csv"
    path.write_text("date,open,high,low,close,score\n2021-01-04,10,11,9,10,1.5\n2021-01-05,10,11,9,10,high\n")
    with pytest.raises(PriceFileError) as info:
        load_prices(path)
    (problem,) = info.value.problems
    assert (problem.line, problem.column, problem.message) == (3, "score", "non-numeric value 'high'")
    assert "ignore_columns=['score']" in problem.fix
    assert load_prices(path, ignore_columns=["Score"]).frame.columns.tolist() == ["open", "high", "low", "close"]


def test_load_prices_unreadable_csv_is_a_price_file_error(tmp_path):
    # Python's csv module refuses fields longer than csv.field_size_limit() (131072 by default)
    path = tmp_path / "long.csv"
    path.write_text("date,open,high,low,close\n2021-01-04," + "1" * 200_000 + ",11,9,10\n")
    with pytest.raises(PriceFileError, match="not readable as CSV"):
        load_prices(path)
