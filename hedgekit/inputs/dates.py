"""Dates of a time-series file, read at the run's frequency.

Accepted forms (docs/interface.md):

* ``YYYY-MM`` or ``YYYY-MM-DD`` (a day inside a month means that month in monthly and
  quarterly runs; daily runs need the day);
* ``YYYYQn`` or ``YYYY-Qn`` quarter labels (e.g. ``1949Q1``), in quarterly runs only.

Refused with the fix: ``1948.12`` or ``194812`` (write ``1948-12``), impossible days, quarter
labels in a monthly run, rows three months apart without ``frequency = "quarterly"``, several
days of one month without ``frequency = "daily"``, and month-only dates in a daily run.

In a quarterly run a file whose rows are months (two or more rows in one quarter) is read at
monthly frequency and aggregated afterwards (:mod:`.aggregate`).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..errors import InputError, quoted

FREQ = {"monthly": "M", "quarterly": "Q", "daily": "D"}
PERIODS_PER_YEAR = {"monthly": 12, "quarterly": 4, "daily": 252}
_DATE_RE = r"^\s*(\d{4})-(\d{1,2})(?:-(\d{1,2}))?\s*$"
_QUARTER_RE = r"^\s*(\d{4})-?[Qq]([1-4])\s*$"
_DOTTED_RE = r"^\s*(\d{4})[./]?(\d{2})\s*$"


def _fail(value: object, file: str, row: int, fix: str, why: str = "is not a date of the form "
          "YYYY-MM or YYYY-MM-DD") -> InputError:
    return InputError(f"date {quoted(value)} {why}.", file=file, row=row, column="date", fix=fix)


def parse_dates(values: pd.Series, file: str, frequency: str, lines: np.ndarray) -> tuple[pd.PeriodIndex, str]:
    """The dates as periods and the file's own step (``"M"``, ``"Q"`` or ``"D"``).

    For ``frequency = "quarterly"`` a file of months comes back at monthly frequency with step
    ``"M"``: the caller aggregates it to quarters. ``lines`` are the file's line numbers.
    """
    fast = _fast_fields(values)
    if fast is not None:  # one plain form throughout: no per-cell text work (tall files)
        years, months, days, has_day = fast
        is_quarter = np.zeros(len(values), dtype=bool)
    else:
        years, months, days, has_day, is_quarter = _text_fields(values, file, frequency, lines)
    if frequency == "daily" and (~has_day).any():
        i = int(np.flatnonzero(~has_day)[0])
        raise _fail(values.iloc[i], file, int(lines[i]), 'write full dates (2024-03-28) for daily data, or set '
                    'frequency = "monthly" in [data].', why="has no day, but the run is daily")
    bad_month = ~((months >= 1) & (months <= 12))
    if bad_month.any():
        i = int(np.flatnonzero(bad_month)[0])
        raise _fail(values.iloc[i], file, int(lines[i]), "write dates like 2024-03 or 2024-03-31.")
    monthly = pd.PeriodIndex.from_fields(year=years.astype(int), month=months.astype(int), freq="M")
    month_len = np.asarray(monthly.days_in_month)
    bad_day = has_day & ~((days >= 1) & (days <= month_len))
    if bad_day.any():
        i = int(np.flatnonzero(bad_day)[0])
        raise _fail(values.iloc[i], file, int(lines[i]), "write dates like 2024-03 or 2024-03-31.",
                    why="is not a day of the calendar")
    if frequency == "daily":
        index = pd.PeriodIndex.from_fields(year=years.astype(int), month=months.astype(int),
                                           day=days.astype(int), freq="D")
        step = "D"
    elif frequency == "quarterly":
        quarters = monthly.asfreq("Q")
        step = "M" if (quarters.duplicated() & ~is_quarter).any() else "Q"
        index = monthly if step == "M" else quarters
    else:
        index = monthly
        step = "M"
        _looks_other(index, has_day, values, file, lines)
    index = pd.PeriodIndex(index, name="date")
    return index, step


def _fast_fields(values: pd.Series) -> tuple[np.ndarray, ...] | None:
    """Year, month, day and has-day arrays when every date is ``YYYY-MM-DD`` or every one is
    ``YYYY-MM`` (or the column is already dates); None sends the column to the cell-by-cell path."""
    if pd.api.types.is_datetime64_any_dtype(values):
        stamps = pd.DatetimeIndex(values)
        if stamps.isna().any():
            return None
        return (stamps.year.to_numpy(), stamps.month.to_numpy(), stamps.day.to_numpy(),
                np.ones(len(stamps), dtype=bool))
    for fmt, with_day in (("%Y-%m-%d", True), ("%Y-%m", False)):
        try:
            stamps = pd.DatetimeIndex(pd.to_datetime(values, format=fmt, errors="coerce"))
        except (ValueError, TypeError, OverflowError):
            continue
        if len(stamps) and not stamps.isna().any():
            days = stamps.day.to_numpy() if with_day else np.full(len(stamps), np.nan)
            return stamps.year.to_numpy(), stamps.month.to_numpy(), days, np.full(len(stamps), with_day)
    return None


def _text_fields(values: pd.Series, file: str, frequency: str, lines: np.ndarray) -> tuple[np.ndarray, ...]:
    """Year, month, day, has-day and is-quarter arrays read cell by cell; refuses unknown forms."""
    text = values.astype("string").fillna("")
    parts = text.str.extract(_DATE_RE)
    quarter = text.str.extract(_QUARTER_RE)
    is_month = parts[0].notna().to_numpy()
    is_quarter = quarter[0].notna().to_numpy()
    has_day = parts[2].notna().to_numpy()
    unknown = ~(is_month | is_quarter)
    if unknown.any():
        i = int(np.flatnonzero(unknown)[0])
        raw = values.iloc[i]
        if text.iloc[i].strip() and pd.Series([text.iloc[i]]).str.fullmatch(_DOTTED_RE).iloc[0]:
            t = text.iloc[i].strip()
            raise _fail(raw, file, int(lines[i]), f"write it as {t[:4]}-{t[-2:]} (year, hyphen, month); "
                        "a decimal year-month is ambiguous (1948.1 is October or January).")
        raise _fail(raw, file, int(lines[i]), "write dates like 2024-03 or 2024-03-31 (2024Q1 for quarters).")
    if is_quarter.any() and frequency != "quarterly":
        i = int(np.flatnonzero(is_quarter)[0])
        raise _fail(values.iloc[i], file, int(lines[i]), 'set frequency = "quarterly" in [data] for quarterly '
                    "files.", why="is a quarter label, but the run is " + frequency)
    years = pd.to_numeric(parts[0], errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    months = pd.to_numeric(parts[1], errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    days = pd.to_numeric(parts[2], errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    if is_quarter.any():
        q_years = pd.to_numeric(quarter[0], errors="coerce").to_numpy(dtype=float, na_value=np.nan)
        q_num = pd.to_numeric(quarter[1], errors="coerce").to_numpy(dtype=float, na_value=np.nan)
        years = np.where(is_quarter, q_years, years)
        months = np.where(is_quarter, q_num * 3, months)
    return years, months, days, has_day, is_quarter


def _looks_other(index: pd.PeriodIndex, has_day: np.ndarray, values: pd.Series, file: str,
                 lines: np.ndarray) -> None:
    """Monthly run: name the likely cause when the file is quarterly or daily."""
    n = len(index)
    unique = index.unique()
    if n >= 8 and has_day.all() and len(unique) * 1.5 < n:
        i = int(np.flatnonzero(index.duplicated())[0])
        raise InputError(f"the file holds {n} daily rows in {len(unique)} months: daily data in a monthly run.",
                         file=file, row=int(lines[i]), column="date",
                         fix='set frequency = "daily" in [data], or export month-end rows only.')
    if n >= 4 and not index.duplicated().any():
        steps = np.diff(np.sort(np.asarray(index.asi8)))
        if steps.size and steps.min() == 3 and (steps % 3 == 0).all():
            raise InputError(f"rows are 3 months apart ({index[0]}, {index[1]}, ...): the file looks quarterly, "
                             "but the run is monthly.", file=file, row=int(lines[1]), column="date",
                             fix='set frequency = "quarterly" in [data] (every file then counts quarters).')
