"""Read and check a daily price file: date, open, high, low, close, and optional numeric extras.

This is the one module in ``trainers/`` that opens a file. ``load_prices`` reads a CSV, checks every
row and reports every problem it finds (with the file line, header = line 1, and the date) in one
``PriceFileError``. Nothing is repaired silently: ``bad_rows="drop"`` opts into dropping bad rows, and
the dropped rows are listed in ``PriceData.dropped``. ``check_prices`` runs the row checks on a frame
that is already parsed. ``frame_to_csv_text`` and ``read_prices_csv_text`` turn a checked frame into
the text copy kept in the record and back, exactly (floats written with repr precision). The row
checks, ``Problem`` and ``PriceFileError`` are in ``_price_checks.py``; this module reads the text.

Example:
    >>> data = load_prices("prices.csv", min_rows=300)        # doctest: +SKIP
    >>> data.frame.columns.tolist()[:4]                        # doctest: +SKIP
    ['open', 'high', 'low', 'close']
"""

from __future__ import annotations

import csv
import hashlib
import io
import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from trainers.price_checks import (
    BAD_ROWS, DATE_COLUMN, DATE_UNIT, FIX_DATE, REQUIRED_COLUMNS, PriceFileError, Problem, check_min_rows,
    missing_column_problem, check_rows, size_problems, sorted_problems, check_prices,
)

__all__ = [
    "REQUIRED_COLUMNS", "DATE_COLUMN", "DATE_UNIT", "BAD_ROWS", "Problem", "PriceFileError", "PriceData",
    "load_prices", "check_prices", "read_prices_csv_text", "frame_to_csv_text", "sha256_file",
]

DATE_FORMATS = {                 # formats recognised when date_format is not given, first wins ties
    "%Y-%m-%d": "YYYY-MM-DD", "%Y/%m/%d": "YYYY/MM/DD", "%Y%m%d": "YYYYMMDD",
    "%d.%m.%Y": "DD.MM.YYYY", "%d/%m/%Y": "DD/MM/YYYY", "%m/%d/%Y": "MM/DD/YYYY", "%d-%m-%Y": "DD-MM-YYYY",
}
NUMBER_RE = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?")
NAN_WORDS = frozenset({"nan", "-nan", "+nan"})
INF_WORDS = frozenset({"inf", "+inf", "-inf", "infinity", "+infinity", "-infinity"})
MISSING_WORDS = frozenset({"na", "n/a", "#n/a", "null", "none", "nil", "-"})


@dataclass(frozen=True)
class PriceData:
    """A checked price file.

    Attributes:
        frame: DatetimeIndex named "date"; float64 columns open, high, low, close, then the file's
            other numeric columns (lower-case names) in file order.
        source: the resolved path of the file.
        sha256: SHA-256 (hex) of the file bytes.
        dropped: the problems of rows dropped under ``bad_rows="drop"`` (empty otherwise).
    """

    frame: pd.DataFrame
    source: str
    sha256: str
    dropped: tuple[Problem, ...] = field(default=())


def sha256_file(path: str | Path) -> str:
    """SHA-256 (hex) of a file's bytes."""
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def load_prices(path: str | Path, *, columns: Mapping[str, str] | None = None, bad_rows: str = "error",
                min_rows: int = 0, date_format: str | None = None,
                ignore_columns: Sequence[str] = ()) -> PriceData:
    """Read a daily price CSV and check every row.

    Args:
        path: the CSV file. Headers are matched case-insensitively after stripping spaces.
        columns: our name -> the file's header, for files that name columns otherwise, e.g.
            ``{"close": "Adj Close", "date": "Day"}``. Extra names map extra columns.
        bad_rows: "error" (raise on any problem) or "drop" (drop bad rows, list them in ``dropped``;
            problems with the file as a whole still raise).
        min_rows: fewest rows the features asked for need.
        date_format: a strptime format for the date column; by default one of ``DATE_FORMATS``,
            the same for every row.
        ignore_columns: headers of columns to leave out.

    Returns:
        PriceData with the frame, the resolved source, the file's SHA-256 and the dropped rows.

    Raises:
        PriceFileError: listing every problem found, each with its line and date.
        ValueError: for a bad argument (bad_rows, min_rows).
    """
    path = Path(path)
    source = str(path.resolve())
    if not path.is_file():
        what = "is a directory" if path.is_dir() else "does not exist"
        raise PriceFileError(source, [Problem(f"the path {what}", "give the path of a CSV price file")])
    raw = path.read_bytes()
    frame, dropped = _parse_bytes(raw, source, columns=columns, bad_rows=bad_rows, min_rows=min_rows,
                                  date_format=date_format, ignore_columns=ignore_columns)
    return PriceData(frame=frame, source=source, sha256=hashlib.sha256(raw).hexdigest(), dropped=dropped)


def read_prices_csv_text(text: str, *, source: str = "<text>", **kwargs) -> pd.DataFrame:
    """Parse and check price CSV text (the record's copy of rows); the inverse of ``frame_to_csv_text``.

    Args:
        text: CSV text as written by ``frame_to_csv_text`` (or any price file's text).
        source: the name used in error messages.
        **kwargs: as for ``load_prices`` (columns, bad_rows, min_rows, date_format, ignore_columns).

    Returns:
        The checked frame, as ``load_prices(...).frame``.

    Raises:
        PriceFileError: listing every problem.
    """
    frame, _ = _parse_bytes(text.encode("utf-8"), source, **kwargs)
    return frame


def frame_to_csv_text(frame: pd.DataFrame) -> str:
    """Write a price frame as CSV text: "date" first (YYYY-MM-DD), floats at repr precision, "\\n" ends.

    Raises:
        ValueError: if the index is not a DatetimeIndex of whole days.
    """
    index = frame.index
    if not isinstance(index, pd.DatetimeIndex):
        raise ValueError(f"frame index must be a DatetimeIndex, got {type(index).__name__}; "
                         "set the dates as the index (frame.set_index('date'))")
    if index.hasnans or (index != index.normalize()).any():
        raise ValueError("frame index must hold whole days without NaT; daily prices have no time of day")
    out = frame.copy()
    out.index = out.index.rename(DATE_COLUMN)
    return out.to_csv(float_format=None, date_format="%Y-%m-%d", lineterminator="\n")


def _decode(raw: bytes) -> tuple[str | None, list[Problem]]:
    if not raw.strip():
        return None, [Problem("the file is empty", "write a header line and daily rows into it")]
    if raw[:4] == b"PK\x03\x04":
        return None, [Problem("the file is a zip archive (perhaps a spreadsheet), not CSV text",
                              "export the sheet as comma-separated values (CSV)")]
    if b"\x00" in raw:
        return None, [Problem("the file holds binary data (NUL bytes), not CSV text",
                              "give a comma-separated text file")]
    try:
        return raw.decode("utf-8-sig"), []
    except UnicodeDecodeError as err:
        return None, [Problem(f"the file is not UTF-8 text (byte {raw[err.start]:#04x} at offset {err.start})",
                              "save the file as UTF-8 CSV")]


def _read_rows(text: str) -> list[tuple[int, list[str]]]:
    """CSV records with the file line on which each starts; blank lines skipped."""
    reader = csv.reader(io.StringIO(text, newline=""))
    rows, last = [], 0
    for record in reader:
        start, last = last + 1, reader.line_num
        if record and any(cell.strip() for cell in record):
            rows.append((start, [cell.strip() for cell in record]))
    return rows


def _parse_dates(texts: list[str], date_format: str | None):
    """Dates (NaT where bad), per-row problems as (i, message), and a whole-file problem or None."""
    s = pd.Series(texts, dtype=object)
    formats = [date_format] if date_format else list(DATE_FORMATS)
    parsed = {}
    for f in formats:   # stop at the first format that reads every date (the common case)
        parsed[f] = pd.to_datetime(s, format=f, errors="coerce")
        if parsed[f].notna().all() and f != "%d/%m/%Y":
            break
    if "%d/%m/%Y" in parsed and "%m/%d/%Y" not in parsed and not date_format:
        parsed["%m/%d/%Y"] = pd.to_datetime(s, format="%m/%d/%Y", errors="coerce")
    counts = {f: int(p.notna().sum()) for f, p in parsed.items()}
    best = max(parsed, key=lambda f: counts[f])   # max keeps the first of equal counts
    filled = [t for t in texts if t]
    if counts[best] == 0 and filled:
        fmt = f"date_format={date_format!r}" if date_format else "a known format"
        return None, [], Problem(f"no value of the date column is a date in {fmt} (first: {filled[0]!r})",
                                 f"check the date column; {FIX_DATE}", column=DATE_COLUMN)
    if not date_format and best == "%d/%m/%Y" and counts["%m/%d/%Y"] == counts[best]:
        return None, [], Problem("dates could be day/month or month/day (no day above 12)",
                                 "write dates as YYYY-MM-DD or pass date_format=", column=DATE_COLUMN)
    label = DATE_FORMATS.get(best, best)
    row_problems = []
    for i in np.flatnonzero(parsed[best].isna().to_numpy()):
        t = texts[i]
        other = [f for f in DATE_FORMATS if f != best and not pd.isna(pd.to_datetime(t, format=f, errors="coerce"))]
        if not t:
            row_problems.append((i, "missing date"))
        elif other and not date_format:
            row_problems.append((i, f"date {t!r} is {DATE_FORMATS[other[0]]}, the rest of the file {label} "
                                    "(mixed date formats)"))
        else:
            row_problems.append((i, f"unparseable date {t!r} (expected {label})"))
    return pd.DatetimeIndex(parsed[best]).as_unit(DATE_UNIT), row_problems, None


def _to_number(cell: str) -> tuple[float, str | None]:
    """A cell's value and, if it is not a finite number, what is wrong (NaN/inf left to the row checks)."""
    low = cell.lower()
    if not cell or low in MISSING_WORDS:
        return math.nan, "missing value" + (f" ({cell!r})" if cell else "")
    if low in NAN_WORDS:
        return math.nan, None
    if low in INF_WORDS:
        return (-math.inf if low.startswith("-") else math.inf), None
    if NUMBER_RE.fullmatch(cell):
        return float(cell), None
    return math.nan, f"non-numeric value {cell!r}"


def _to_numbers(column: list[str], skip: np.ndarray) -> list[tuple[float, str | None]]:
    """``_to_number`` for a column; a fast path when every cell is a plain number."""
    if not skip.any() and "_" not in "".join(column):
        try:
            return [(float(c), None) for c in column]
        except ValueError:
            pass
    return [(math.nan, None) if skip[i] else _to_number(c) for i, c in enumerate(column)]


def _resolve_header(header: list[str], header_line: int, columns, ignore_columns):
    """Our column name -> field position, and the problems of the header itself."""
    keys = [h.lower() for h in header]
    structural: list[Problem] = []
    seen = {}
    for k in keys:
        if k in seen:
            structural.append(Problem(f"the header names {k!r} twice", "give each column its own name",
                                      header_line, column=k))
        seen[k] = True
    mapping = {str(ours).lower(): str(theirs).strip().lower() for ours, theirs in (columns or {}).items()}
    ignored = {str(c).strip().lower() for c in ignore_columns}
    position = {}
    for name in (DATE_COLUMN, *REQUIRED_COLUMNS):
        wanted = mapping.get(name, name)
        if wanted in keys:
            position[name] = keys.index(wanted)
        else:
            structural.append(missing_column_problem(name, header, _mapped_header(columns, name)))
    for ours, theirs in mapping.items():
        if ours not in position and ours not in REQUIRED_COLUMNS + (DATE_COLUMN,) and theirs not in keys:
            structural.append(missing_column_problem(ours, header, _mapped_header(columns, ours)))
    if len(set(mapping.values())) < len(mapping):
        structural.append(Problem(f"columns maps two names to one header: {dict(columns)!r}",
                                  "map each header once", column=None))
    taken = {mapping.get(n, n) for n in (DATE_COLUMN, *REQUIRED_COLUMNS)}
    reverse = {theirs: ours for ours, theirs in mapping.items()}
    for j, k in enumerate(keys):
        if k in taken or k in ignored or (k == "" and DATE_COLUMN not in position):
            continue     # an unnamed column while the date is missing: reported as the missing date
        ours = reverse.get(k, k)
        if ours in position:
            structural.append(Problem(f"column {header[j]!r} clashes with {ours!r} taken from "
                                      f"{header[position[ours]]!r}",
                                      f"map it to another name, e.g. columns={{'{ours}_file': {header[j]!r}}}",
                                      header_line, column=header[j]))
        else:
            position[ours] = j
    return position, structural


def _parse_bytes(raw: bytes, source: str, *, columns=None, bad_rows="error", min_rows=0, date_format=None,
                 ignore_columns=()) -> tuple[pd.DataFrame, tuple[Problem, ...]]:
    if bad_rows not in BAD_ROWS:
        raise ValueError(f"bad_rows must be one of {BAD_ROWS}, got {bad_rows=!r}")
    check_min_rows(min_rows)
    text, problems = _decode(raw)
    if text is None:
        raise PriceFileError(source, problems)
    try:
        rows = _read_rows(text)
    except csv.Error as err:
        raise PriceFileError(source, [Problem(f"the file is not readable as CSV ({err})",
                                              "give a comma-separated text file")]) from None
    if not rows:
        raise PriceFileError(source, [Problem("the file is empty", "write a header line and daily rows into it")])
    header_line, header = rows[0]
    body = rows[1:]
    if len(header) == 1:
        for sep, name in ((";", "semicolons"), ("\t", "tabs"), ("|", "bars")):
            if sep in header[0]:
                raise PriceFileError(source, [Problem(
                    f"the header is one field separated by {name}, not commas: {header[0][:60]!r}",
                    "save the file with commas as separators", header_line)])
    position, structural = _resolve_header(header, header_line, columns, ignore_columns)
    n_fields = len(header)
    lines = np.array([ln for ln, _ in body], dtype=int)
    cells = [r + [""] * (n_fields - len(r)) for _, r in body]
    row_problems: list[Problem] = []
    date_texts = [r[position[DATE_COLUMN]] if DATE_COLUMN in position else "" for r in cells]
    misfit = np.array([len(r) != n_fields for _, r in body], dtype=bool)   # not parsed further
    for i in np.flatnonzero(misfit):
        row_problems.append(Problem(f"the row has {len(body[i][1])} fields, the header {n_fields}",
                                    "give every row one value per header", int(lines[i]), date_texts[i] or None))
    dates = None
    if DATE_COLUMN in position and body:
        dates, date_rows, whole = _parse_dates(date_texts, date_format)
        if whole is not None:
            structural.append(whole)
        if dates is not None:
            dates = dates.where(~misfit, pd.NaT)
        for i, message in date_rows:
            if misfit[i]:
                continue
            row_problems.append(Problem(message, FIX_DATE, int(lines[i]), date_texts[i] or None, DATE_COLUMN))
    values, bad = {}, {}
    for name, j in position.items():
        if name == DATE_COLUMN:
            continue
        parsed = _to_numbers([r[j] for r in cells], misfit)
        errors = [(i, e) for i, (_, e) in enumerate(parsed) if e]
        if name not in REQUIRED_COLUMNS and errors and all(not e.startswith("missing") for _, e in errors) \
                and len(errors) == len(cells):
            structural.append(Problem(f"column {header[j]!r} is not numeric (line {lines[0]}: "
                                      f"{cells[0][j]!r})",
                                      f"remove the column from the file or pass ignore_columns=[{header[j]!r}]",
                                      column=header[j]))
            continue
        values[name] = np.array([v for v, _ in parsed], dtype=float)
        bad[name] = misfit.copy()
        for i, e in errors:
            bad[name][i] = True
            fix = "fill in a number or drop the row"
            if name not in REQUIRED_COLUMNS:
                fix += f", or pass ignore_columns=[{header[j]!r}]"
            row_problems.append(Problem(e, fix, int(lines[i]), date_texts[i] or None, name))
    if structural or not body:   # the row problems found so far are listed too
        raise PriceFileError(source, sorted_problems(structural + row_problems + ([] if body else size_problems(0, 0))))
    row_problems += check_rows(dates, values, bad, lines, date_texts)
    order = [c for c in REQUIRED_COLUMNS] + [c for c in values if c not in REQUIRED_COLUMNS]
    frame = pd.DataFrame({c: values[c] for c in order}, index=pd.DatetimeIndex(dates, name=DATE_COLUMN))
    dropped: tuple[Problem, ...] = ()
    if bad_rows == "drop" and row_problems:
        drop = {p.line for p in row_problems}
        frame = frame[~np.isin(lines, list(drop))]
        dropped, row_problems = tuple(sorted_problems(row_problems)), []
    size = size_problems(len(frame), min_rows)
    if bad_rows == "drop" and size and len(frame) == 0 and dropped:
        size = [Problem(f"every row has a problem ({len(dropped)} found; first: {dropped[0]})",
                        "correct the rows, or check that the file holds daily prices")]
    problems = sorted_problems(size + row_problems)
    if problems:
        raise PriceFileError(source, problems)
    return frame, dropped


def _mapped_header(columns, name):
    """The file header ``columns`` maps ``name`` to (keys matched case-insensitively), or None."""
    for ours, theirs in (columns or {}).items():
        if str(ours).lower() == name:
            return str(theirs)
    return None
