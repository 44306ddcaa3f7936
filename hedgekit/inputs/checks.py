"""Plausibility of each column by the kind of series it holds.

Thresholds (common practice, no published source; docs/interface.md lists them):

Returns (assets, instruments, portfolio returns, the market column of states, factors):

* ``RETURN_CELL_LIMIT = 1.0``: a simple return below -100 % is impossible for a long
  position and one beyond +100 % in one period is far outside any index, sector or
  futures return at monthly, quarterly or daily frequency; such a cell is an error
  naming its row and column (a percent column, a price in place of a return, or an
  export error such as 6.2e9).
* ``RETURN_TYPICAL_LIMIT = 0.25`` per month: a column whose median absolute return (over
  at most 1,000 evenly spaced rows) is above 0.25 * sqrt(12 / periods_per_year) (25 % per
  month, 5.5 % per day, 43 % per quarter) is about 100 times a return's typical size (the
  median absolute monthly return of an equity index or sector is 0.02-0.06): read as percent.

Levels (every states column other than the market: yields, spreads, dividend yield,
short rate):

* ``LEVEL_LIMIT = 0.3``: any value beyond 0.3 (30 % a year) in absolute value is almost
  surely percent; checked on every cell, not on the median, so a default spread left in
  percent near 0.9 is caught.
* ``SHORT_RATE_PERIOD_LIMIT = 0.2``: a short-rate column (named ``rf``, ``tbill``, ``tb3m``,
  ``short_rate``...: ``SHORT_RATE_NAMES``) whose largest absolute value is below
  0.2 / periods_per_year looks like a per-period bill return (0.004 a month) rather than
  an annual rate (0.05): a warning, since rates near zero for a whole sample are possible.

A column named in ``[data] accept_extreme = { file = ["column", ...] }`` skips these
checks: genuine extremes (a biotech that tripled in a month) are never refused.
Decimal commas, non-numbers and infinite cells are refused earlier, cell by cell.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Collection, Mapping, Sequence

import numpy as np

from ..errors import InputError, quoted
from .units import Units

RETURN_CELL_LIMIT = 1.0
RETURN_TYPICAL_LIMIT = 0.25
LEVEL_LIMIT = 0.3
SHORT_RATE_PERIOD_LIMIT = 0.2
SHORT_RATE_NAMES = frozenset({"rf", "r_f", "tbill", "t_bill", "tb", "tb3m", "tb3ms", "short_rate", "shortrate",
                              "short", "risk_free", "riskfree", "cash_rate", "rrel"})
_COLUMN_BLOCK = 256  # columns per block when a statistic needs a temporary copy
_TYPICAL_ROWS = 1000

PERIOD_WORD = {12: "month", 4: "quarter", 252: "day"}


def accepted(accept: Mapping[str, Collection[str]], file_key: str, columns: Sequence[str],
             config_file: str) -> frozenset[str]:
    """The columns of ``file_key`` named in ``[data] accept_extreme``; unknown names are an error."""
    names = list(accept.get(file_key, ()))
    unknown = [c for c in names if c not in columns]
    if unknown:
        near = difflib.get_close_matches(unknown[0], list(columns), n=1)
        raise InputError(f"[data] accept_extreme.{file_key} names the column {quoted(unknown[0])}, which the "
                         f"{file_key} file does not have.", file=config_file,
                         fix=(f"did you mean {near[0]!r}?" if near else "correct the column name."))
    return frozenset(names)


def _median_abs(values: np.ndarray) -> np.ndarray:
    """Median absolute value per column over at most ``_TYPICAL_ROWS`` evenly spaced rows (enough
    to tell a factor of 100 apart, and cheap on long daily panels)."""
    out = np.full(values.shape[1], np.nan)
    step = max(1, values.shape[0] // _TYPICAL_ROWS)
    for start in range(0, values.shape[1], _COLUMN_BLOCK):  # blocks bound the temporary copy
        block = np.abs(values[::step, start:start + _COLUMN_BLOCK])
        has = ~np.isnan(block).all(axis=0)
        if has.any():
            out[start:start + _COLUMN_BLOCK][has] = np.nanmedian(block[:, has], axis=0)
    return out


def _first_cell(mask: np.ndarray) -> tuple[int, int]:
    rows = np.flatnonzero(mask.any(axis=1))
    i = int(rows[0])
    return i, int(np.flatnonzero(mask[i])[0])


def _units_fix(units: Units, column: str, accept_hint: str, *, percent_likely: bool = True) -> str:
    """The fix: declare percent (unless already declared or unlikely), else correct or accept."""
    accept = f'{accept_hint} with accept_extreme = {{ {units.file_key} = ["{column}"] }} in [data].'
    if units.is_percent(column):
        return f"the column is declared in percent already, so check the export (basis points? prices?); {accept}"
    if not percent_likely:
        return f"correct the cell from the source (a price or an export error?); {accept}"
    return (f"divide by 100, or declare percent in [data]: {units.declare(column)}, "
            f'or units = "percent" for every file; {accept}')


def check_returns(values: np.ndarray, columns: Sequence[str], lines: np.ndarray, *, file: str, units: Units,
                  accept: Collection[str], periods_per_year: int) -> None:
    """Refuse returns that cannot be decimal period returns (see the module docstring)."""
    if values.size == 0:
        return
    period = PERIOD_WORD.get(periods_per_year, "period")
    active = np.array([c not in accept for c in columns], dtype=bool)
    if not active.any():
        return
    typical_limit = RETURN_TYPICAL_LIMIT * math.sqrt(12.0 / periods_per_year)
    typical = _median_abs(values)
    big = active & (typical > typical_limit)
    if big.any():
        j = int(np.flatnonzero(big)[0])
        col = str(columns[j])
        x = values[:, j]
        i = int(np.nanargmax(np.abs(x)))
        hint = "if the values are genuine, accept them"
        raise InputError(f"values look like percent: the typical size of a return in this column is "
                         f"{typical[j]:.3g} (median absolute value, e.g. {x[i]:.4g} here), about 100 times a "
                         f"decimal {period}ly return's; hedgekit expects decimals (0.012 for a 1.2 % return).",
                         file=file, row=int(lines[i]), column=col, fix=_units_fix(units, col, hint))
    with np.errstate(invalid="ignore"):
        cell = np.abs(values) > RETURN_CELL_LIMIT
    cell &= active[None, :]
    if cell.any():
        i, j = _first_cell(cell)
        col = str(columns[j])
        x = float(values[i, j])
        what = "below -100 %, a loss beyond the whole position" if x < -1 else "beyond +100 %"
        raise InputError(f"value {x:.4g} is a return of {x * 100:,.4g} % in one {period}: {what}.",
                         file=file, row=int(lines[i]), column=col,
                         fix=_units_fix(units, col, "if it is genuine, accept it",
                                        percent_likely=abs(x) <= 100.0))


def check_levels(values: np.ndarray, columns: Sequence[str], lines: np.ndarray, *, file: str, units: Units,
                 accept: Collection[str], periods_per_year: int) -> list[str]:
    """Refuse levels beyond ``LEVEL_LIMIT``; warn on a short rate that looks like a period return."""
    if values.size == 0:
        return []
    active = np.array([c not in accept for c in columns], dtype=bool)
    with np.errstate(invalid="ignore"):
        cell = (np.abs(values) > LEVEL_LIMIT) & active[None, :]
    if cell.any():
        i, j = _first_cell(cell)
        col = str(columns[j])
        x = float(values[i, j])
        raise InputError(f"level {x:.4g} is {x * 100:,.4g} % a year: a yield, spread or dividend yield beyond "
                         f"{LEVEL_LIMIT * 100:.0f} % is almost surely in percent (hedgekit expects 0.035 for 3.5 %).",
                         file=file, row=int(lines[i]), column=col,
                         fix=_units_fix(units, col, "if the level is genuine, accept it",
                                        percent_likely=abs(x) <= 100.0))
    warnings = []
    limit = SHORT_RATE_PERIOD_LIMIT / periods_per_year
    period = PERIOD_WORD.get(periods_per_year, "period")
    for j, col in enumerate(columns):  # a handful of state columns
        if not active[j] or str(col).lower() not in SHORT_RATE_NAMES or periods_per_year <= 1:
            continue
        top = float(np.nanmax(np.abs(values[:, j]))) if np.isfinite(values[:, j]).any() else math.nan
        if top < limit:
            warnings.append(f"{file}, column '{col}': the short rate never exceeds {top:.4g}, below "
                            f"{limit:.4g} ({SHORT_RATE_PERIOD_LIMIT:.0%} a year / {periods_per_year}): it looks "
                            f"like a {period}ly bill return rather than an annual rate (0.05 for 5 %), which "
                            f"scales rate scenarios by {periods_per_year}. Give the annual rate, or ignore this "
                            f"if rates stayed this low for the whole sample.")
    return warnings
