"""One wide time-series file: ``date`` then one numeric column per series.

Read, dated, converted to decimals (``[data] units``), checked for plausibility by the kind
of each column (:mod:`.checks`), put on the run's frequency (rows absent inside the span
become blank rows and are recorded), and, in a quarterly run, monthly files aggregated
(:mod:`.aggregate`).
"""

from __future__ import annotations

from collections.abc import Collection, Mapping, Sequence
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError, quoted
from . import checks
from .aggregate import monthly_to_quarterly
from .dates import FREQ, PERIODS_PER_YEAR, parse_dates
from .tables import read_numeric
from .units import Units, resolve_units


def read_series(path: Path, what: str, *, frequency: str = "monthly", units: str | Mapping = "decimal",
                file_key: str | None = None, returns: Sequence[str] | None = None,
                levels: Sequence[str] = (), accept: Mapping[str, Collection[str]] | None = None,
                config_file: str = "configuration") -> pd.DataFrame:
    """A wide time series on a ``PeriodIndex`` named ``date`` at the run's ``frequency``.

    ``returns`` / ``levels``: the columns checked as returns and as levels (``returns=None``:
    every column not in ``levels``). ``units`` and ``accept`` are the ``[data]`` settings.
    The frame's ``attrs`` carry ``file``, ``absent`` (periods with no row inside the span),
    ``notes`` and ``warnings`` (lists of text).
    """
    name = str(path)
    key = file_key or what
    dates, columns, values, lines = read_numeric(path, what)
    first_name = str(dates.name) if dates.name is not None else ""
    if first_name.lower() != "date":
        raise InputError(f"the first column must be 'date' (found {quoted(first_name)}).", file=name,
                         row=1, column=first_name or None, fix="put a 'date' column first, with dates like 2024-03.")
    if not columns:
        raise InputError(f"{what} file has a date column but no series.", file=name, row=1)
    if len(dates) == 0:
        raise InputError(f"{what} file has a header but no rows.", file=name)
    index, step = parse_dates(dates, name, frequency, lines)
    del dates
    _check_order(index, lines, name)
    inf = np.isinf(values)
    if inf.any():
        i = int(np.flatnonzero(inf.any(axis=1))[0])
        j = int(np.flatnonzero(inf[i])[0])
        raise InputError("value is infinite.", file=name, row=int(lines[i]), column=columns[j],
                         fix="replace it by the true value or leave the cell blank.")
    del inf
    empty = np.isnan(values).all(axis=0)
    if empty.any():
        raise InputError("column is blank in every row.", file=name, column=columns[int(np.flatnonzero(empty)[0])],
                         fix="fill it or delete the column.")
    unit = resolve_units(units, key, columns, config_file=config_file)
    if (unit.divisors != 1.0).any():
        values /= unit.divisors[None, :]
    warnings = _plausible(values, columns, lines, name, unit, key, returns, levels, accept or {},
                          config_file, PERIODS_PER_YEAR["monthly" if step == "M" else frequency])
    out = pd.DataFrame(values, index=index, columns=columns, copy=False)
    absent = pd.PeriodIndex([], freq=index.freq, name="date")
    notes: list[str] = []
    if step in ("M", "Q"):
        full = pd.period_range(index.min(), index.max(), freq=step, name="date")
        if len(full) != len(out):
            absent = full.difference(index)
            out = out.reindex(full)
    if frequency == "quarterly" and step == "M":
        is_return = np.array([_is_return(c, returns, levels) for c in columns], dtype=bool)
        out = monthly_to_quarterly(out, is_return)
        absent = absent.asfreq("Q").unique() if len(absent) else pd.PeriodIndex([], freq="Q", name="date")
        notes.append(f"{name}: monthly rows aggregated to quarters (returns compounded, "
                     "(1+r1)(1+r2)(1+r3)-1, a quarter with a missing month left missing; levels at the "
                     "quarter's last month).")
    out.index.name = "date"
    out.attrs.update(file=name, first_date=str(out.index[0]), absent=absent, notes=notes, warnings=warnings)
    return out


def _is_return(column: str, returns: Sequence[str] | None, levels: Sequence[str]) -> bool:
    return column not in levels if returns is None else column in returns


def _plausible(values: np.ndarray, columns: list[str], lines: np.ndarray, name: str, unit: Units, key: str,
               returns: Sequence[str] | None, levels: Sequence[str], accept: Mapping[str, Collection[str]],
               config_file: str, periods_per_year: int) -> list[str]:
    ok = checks.accepted(accept, key, columns, config_file)
    ret = np.array([_is_return(c, returns, levels) for c in columns], dtype=bool)
    lev = np.array([c in levels for c in columns], dtype=bool)
    kw = dict(file=name, units=unit, accept=ok, periods_per_year=periods_per_year)
    if ret.all():
        checks.check_returns(values, columns, lines, **kw)
    elif ret.any():
        cols = np.flatnonzero(ret)
        checks.check_returns(values[:, cols], [columns[j] for j in cols], lines, **kw)
    if lev.any():
        cols = np.flatnonzero(lev)
        return checks.check_levels(values[:, cols], [columns[j] for j in cols], lines, **kw)
    return []


def _check_order(index: pd.PeriodIndex, lines: np.ndarray, name: str) -> None:
    dup = index.duplicated()
    if dup.any():
        i = int(np.flatnonzero(dup)[0])
        first = int(np.flatnonzero(index == index[i])[0])
        raise InputError(f"date {index[i]} appears twice (the period of row {int(lines[first])} too).", file=name,
                         row=int(lines[i]), column="date",
                         fix="keep one row per period (a day inside a month means that month).")
    order = np.asarray(index.asi8)
    back = np.flatnonzero(np.diff(order) < 0)
    if back.size:
        i = int(back[0]) + 1
        raise InputError(f"date {index[i]} comes after {index[i - 1]}: dates are out of order.", file=name,
                         row=int(lines[i]), column="date", fix="sort the rows by date, oldest first.")


__all__ = ["FREQ", "PERIODS_PER_YEAR", "read_series"]
