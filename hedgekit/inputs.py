"""Input layer: every file hedgekit reads goes through here.

Validates at the boundary and hands the stages plain pandas objects on a
``PeriodIndex`` named ``date``. Every problem raises :class:`InputError` naming the
file, the row (as numbered in the file, header = row 1) or date, the column, and the fix.
Files are only read, never modified.
"""

from __future__ import annotations

import hashlib
import re
from collections.abc import Iterable
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd

from .config import Config
from .errors import InputError

FREQ = {"monthly": "M", "quarterly": "Q"}
PERIODS_PER_YEAR = {"monthly": 12, "quarterly": 4}
SHEET_COLUMNS = ["instrument", "multiplier", "price", "cost_bps", "min_weight", "max_weight"]
_DATE_RE = r"^\s*(\d{4})-(\d{1,2})(?:-(\d{1,2}))?\s*$"
_QUARTER_RE = r"^\s*(\d{4})-?Q([1-4])\s*$"


@dataclass(frozen=True)
class Dataset:
    """Everything read for one run, validated and aligned to periods."""

    states: pd.DataFrame | None = None
    assets: pd.DataFrame | None = None
    holdings: pd.Series | None = None
    portfolio_returns: pd.Series | None = None
    instruments: pd.DataFrame | None = None
    sheet: pd.DataFrame | None = None
    factors: pd.DataFrame | None = None
    current_positions: pd.Series | None = None
    frequency: str = "monthly"
    periods_per_year: int = 12
    warnings: tuple[str, ...] = ()
    hashes: dict[str, str] = field(default_factory=dict)

    def as_of(self, date: str | pd.Period) -> Dataset:
        """The same data cut at ``date`` (inclusive): a run as it would have been made then."""
        freq = FREQ[self.frequency]
        text = str(date).strip()
        m = re.fullmatch(r"(\d{4})-(\d{1,2})(?:-(\d{1,2}))?", text)
        q = re.fullmatch(r"(\d{4})-?Q([1-4])", text, flags=re.I)
        if m and 1 <= int(m.group(2)) <= 12:
            cut = pd.Period(year=int(m.group(1)), month=int(m.group(2)), freq="M").asfreq(freq)
        elif q:  # a quarter means its last month
            cut = pd.Period(year=int(q.group(1)), quarter=int(q.group(2)), freq="Q").asfreq("M", "end").asfreq(freq)
        else:
            raise InputError(f"--as-of {text!r} is not a period.", fix="write it like 2025-09 (a month) or 2025Q3.")
        frame0 = self.states if self.states is not None else self.factors
        if frame0 is None:
            frame0 = self.assets
        if frame0 is not None:
            last = frame0.dropna(how="all").index[-1]
            if cut > last:
                raise InputError(f"--as-of {cut} is after the last period of the data ({last}).",
                                 file=frame0.attrs.get("file"), fix=f"use {last} or earlier.")
        frames = {}
        for name in ("states", "assets", "instruments", "factors", "portfolio_returns"):
            frame = getattr(self, name)
            if frame is not None:
                attrs = dict(frame.attrs)
                frame = frame.loc[frame.index <= cut]
                frame.attrs.update(attrs)
                if frame.dropna(how="all").empty:
                    raise InputError(f"no {name} data on or before {cut}.", file=attrs.get("file"),
                                     fix="choose a later --as-of date.")
            frames[name] = frame
        hashes = dict(self.hashes, as_of=str(cut))
        return replace(self, hashes=hashes, **frames)

    def summary(self) -> dict:
        """A short description for the terminal and the report."""
        out: dict = {"frequency": self.frequency}
        for name in ("states", "assets", "instruments", "factors"):
            frame = getattr(self, name)
            if frame is not None:
                valid = frame.dropna(how="all")
                out[name] = {"columns": list(map(str, frame.columns)),
                             "start": str(valid.index[0]) if len(valid) else None,
                             "end": str(valid.index[-1]) if len(valid) else None,
                             "periods": int(len(valid)),
                             "missing_cells": int(frame.loc[valid.index].isna().sum().sum())}
        if self.holdings is not None:
            out["holdings"] = {"assets": len(self.holdings), "weight_sum": float(self.holdings.sum())}
        if self.portfolio_returns is not None:
            out["portfolio_returns"] = {"name": str(self.portfolio_returns.name),
                                        "periods": int(self.portfolio_returns.notna().sum())}
        out["warnings"] = list(self.warnings)
        return out


# --------------------------------------------------------------------------- low level

def file_hash(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def _read_table(path: Path, what: str) -> pd.DataFrame:
    """Read a CSV or Parquet file as it is, with clear errors for the common mistakes."""
    name = str(path)
    if not path.exists():
        raise InputError(f"{what} file not found.", file=name,
                         fix="check the path in [data] (paths are relative to the config file).")
    if path.is_dir():
        raise InputError(f"{what} path is a folder, not a file.", file=name)
    if path.stat().st_size == 0:
        raise InputError(f"{what} file is empty.", file=name, fix="export the table again with a header row.")
    if path.suffix.lower() in (".parquet", ".pq"):
        try:
            frame = pd.read_parquet(path)
        except ImportError:
            raise InputError("reading Parquet needs pyarrow.", file=name,
                             fix="pip install pyarrow, or export the table as CSV.") from None
        except Exception as exc:  # noqa: BLE001 - any parquet failure is a bad file
            raise InputError(f"cannot read Parquet file ({exc}).", file=name) from None
        if isinstance(frame.index, pd.DatetimeIndex | pd.PeriodIndex) or frame.index.name == "date":
            frame = frame.reset_index()
        frame.columns = [str(c) for c in frame.columns]
        return frame
    try:
        with open(path, encoding="utf-8-sig") as fh:
            header = fh.readline()
    except UnicodeDecodeError:
        raise InputError("is not UTF-8 text.", file=name, fix="save the file as UTF-8 CSV.") from None
    if not header.strip():
        raise InputError(f"{what} file has an empty first line; the header must be row 1.", file=name,
                         row=1, fix="remove blank lines above the header.")
    if header.count(",") == 0:
        for sep, label in ((";", "semicolons"), ("\t", "tabs"), ("|", "pipes")):
            if sep in header:
                raise InputError(f"columns are separated by {label}, not commas.", file=name, row=1,
                                 fix="save the file as comma-separated CSV.")
    try:
        frame = pd.read_csv(path, sep=",", encoding="utf-8-sig", skip_blank_lines=True,
                            na_values=["", "NA", "NaN", "nan", "null", "NULL", "#N/A"], keep_default_na=False)
    except pd.errors.ParserError as exc:
        m = re.search(r"line (\d+)", str(exc))
        row = int(m.group(1)) if m else None
        raise InputError(f"malformed CSV ({str(exc).strip()}).", file=name, row=row,
                         fix="every row needs the same number of comma-separated fields as the header.") from None
    except pd.errors.EmptyDataError:
        raise InputError(f"{what} file has no header or rows.", file=name) from None
    except UnicodeDecodeError:
        raise InputError("is not UTF-8 text.", file=name, fix="save the file as UTF-8 CSV.") from None
    frame.columns = [str(c).strip() for c in frame.columns]
    names = pd.Index([c.strip().strip('"') for c in header.rstrip("\r\n").split(",")])
    dupes = names[names.duplicated()].tolist()
    if dupes:
        raise InputError("column name appears twice.", file=name, row=1, column=dupes[0],
                         fix="give every column a unique name.")
    unnamed = [c for c in frame.columns if c.startswith("Unnamed:") or c == ""]
    if unnamed:
        raise InputError("a column has no name in the header.", file=name, row=1,
                         fix="name every column (or delete the trailing comma).")
    return frame


def _parse_dates(values: pd.Series, name: str, freq: str) -> pd.PeriodIndex:
    """Dates ``YYYY-MM`` or ``YYYY-MM-DD`` (a day means that month); ``YYYY-Qn`` for quarterly."""
    if pd.api.types.is_datetime64_any_dtype(values):
        return pd.PeriodIndex(values, freq=freq, name="date")
    text = values.astype("string").fillna("")
    parts = text.str.extract(_DATE_RE)
    ok = parts[0].notna()
    years = pd.to_numeric(parts[0], errors="coerce")
    months = pd.to_numeric(parts[1], errors="coerce")
    if freq == "Q":
        q = text.str.extract(_QUARTER_RE)
        qok = q[0].notna()
        years = years.where(ok, pd.to_numeric(q[0], errors="coerce"))
        months = months.where(ok, pd.to_numeric(q[1], errors="coerce") * 3)
        ok = ok | qok
    ok &= months.between(1, 12)
    days = pd.to_numeric(parts[2], errors="coerce")
    month_len = pd.Series(31, index=days.index)
    known = ok & days.notna()
    if known.any():
        month_len[known] = pd.PeriodIndex.from_fields(year=years[known].astype(int).to_numpy(),
                                                      month=months[known].astype(int).to_numpy(),
                                                      freq="M").days_in_month
    ok &= days.isna() | ((days >= 1) & (days <= month_len))
    if not ok.all():
        i = int(np.flatnonzero(~ok.to_numpy())[0])
        raise InputError(f"date {values.iloc[i]!r} is not a date of the form YYYY-MM or YYYY-MM-DD.",
                         file=name, row=i + 2, column="date", fix="write dates like 2024-03 or 2024-03-31.")
    monthly = pd.PeriodIndex.from_fields(year=years.astype(int).to_numpy(),
                                         month=months.astype(int).to_numpy(), freq="M")
    index = monthly.asfreq(freq) if freq != "M" else monthly
    index.name = "date"
    return index


def _time_series(path: Path, what: str, freq: str, *, first_column_date: bool = True) -> pd.DataFrame:
    """A wide table: ``date`` then one numeric column per series, indexed by period."""
    name = str(path)
    frame = _read_table(path, what)
    if frame.shape[1] == 0 or frame.columns[0].lower() != "date":
        raise InputError(f"the first column must be 'date' (found {frame.columns[0]!r}).", file=name,
                         row=1, column=frame.columns[0] if frame.shape[1] else None,
                         fix="put a 'date' column first, with dates like 2024-03.")
    if frame.shape[1] < 2:
        raise InputError(f"{what} file has a date column but no series.", file=name, row=1)
    if len(frame) == 0:
        raise InputError(f"{what} file has a header but no rows.", file=name)
    index = _parse_dates(frame.iloc[:, 0], name, freq)
    dup = index.duplicated()
    if dup.any():
        i = int(np.flatnonzero(dup)[0])
        raise InputError(f"date {index[i]} appears twice (the period of row {int(np.flatnonzero(index == index[i])[0]) + 2}"
                         " too).", file=name, row=i + 2, column="date",
                         fix="keep one row per period (a day inside a month means that month).")
    order = np.asarray(index.asi8)
    back = np.flatnonzero(np.diff(order) < 0)
    if back.size:
        i = int(back[0]) + 1
        raise InputError(f"date {index[i]} comes after {index[i - 1]}: dates are out of order.", file=name,
                         row=i + 2, column="date", fix="sort the rows by date, oldest first.")
    body = frame.iloc[:, 1:]
    values = np.empty(body.shape, dtype=float)
    for j, col in enumerate(body.columns):  # loop over columns only for the dtype check
        series = body[col]
        if pd.api.types.is_numeric_dtype(series) and not pd.api.types.is_bool_dtype(series):
            values[:, j] = series.to_numpy(dtype=float, na_value=np.nan)
            continue
        coerced = pd.to_numeric(series.astype("string").str.strip().str.replace(",", "", regex=False),
                                errors="coerce")
        bad = coerced.isna() & series.notna() & (series.astype("string").str.strip() != "")
        if bad.any():
            i = int(np.flatnonzero(bad.to_numpy())[0])
            raise InputError(f"value {series.iloc[i]!r} is not a number.", file=name, row=i + 2, column=col,
                             fix="use plain decimals (0.012), leave the cell blank when missing.")
        values[:, j] = coerced.to_numpy(dtype=float, na_value=np.nan)
    inf = np.isinf(values)
    if inf.any():
        i, j = (int(x[0]) for x in np.nonzero(inf))
        raise InputError("value is infinite.", file=name, row=i + 2, column=str(body.columns[j]),
                         fix="replace it by the true value or leave the cell blank.")
    empty = np.isnan(values).all(axis=0)
    if empty.any():
        col = str(body.columns[int(np.flatnonzero(empty)[0])])
        raise InputError("column is blank in every row.", file=name, column=col,
                         fix="fill it or delete the column.")
    out = pd.DataFrame(values, index=index, columns=[str(c) for c in body.columns])
    full = pd.period_range(index.min(), index.max(), freq=freq, name="date")
    if len(full) != len(out):
        out = out.reindex(full)
    out.attrs["file"] = name
    out.attrs["first_date"] = str(index[0])
    return out


def _row_of(frame: pd.DataFrame, date) -> str:
    return f"date {date}"


def _check_units(frame: pd.DataFrame, name: str, kind: str, units: str) -> pd.DataFrame:
    """Catch percent where decimals are expected; convert when ``units = "percent"``."""
    if units == "percent":
        return frame / 100.0
    values = frame.to_numpy()
    for j, col in enumerate(frame.columns):
        x = values[:, j]
        x = x[~np.isnan(x)]
        if x.size == 0:
            continue
        if kind == "returns":
            looks = np.mean(np.abs(x) > 1.0) > 0.05
        else:
            looks = np.median(np.abs(x)) > 1.0
        if looks:
            example = float(x[np.argmax(np.abs(x))])
            raise InputError(f"values look like percent (e.g. {example:g}), but hedgekit expects decimals "
                             f"({'0.012 for a 1.2 % return' if kind == 'returns' else '0.035 for 3.5 %'}).",
                             file=name, column=str(col),
                             fix="divide by 100, or set units = \"percent\" in [data].")
    return frame


def _common_months_error(name: str, need: int, have: int, what: str) -> InputError:
    return InputError(f"only {have} months in common with the factors, fewer than the {need} needed for {what}.",
                      file=name, fix="supply a longer history, or lower [exposures] window / min_obs.")


# --------------------------------------------------------------------------- readers

def read_states(path: Path, order: Iterable[str] | None, market: str | None, *, freq: str = "M",
                units: str = "decimal", config_file: str | None = None) -> pd.DataFrame:
    """The states file: market excess return then state-variable levels, in the configured order."""
    frame = _time_series(path, "states", freq)
    name = str(path)
    cols = list(frame.columns)
    order = list(order) if order else cols
    market = market or order[0]
    for v in order:
        if v not in cols:
            raise InputError(f"state variable {v!r} from [states] order is not a column of the file "
                             f"(columns: {', '.join(cols)}).", file=name, row=1, column=v,
                             fix="correct [states] order or rename the column.")
    dup = [v for i, v in enumerate(order) if v in order[:i]]
    if dup:
        raise InputError(f"[states] order lists {dup[0]!r} twice.", file=config_file or name,
                         fix="name each state variable once.")
    if market not in order:
        raise InputError(f"the market column {market!r} ([states] market) is not in [states] order.",
                         file=config_file or name, fix="put the market column first in order.")
    if order[0] != market:
        raise InputError(f"[states] order starts with {order[0]!r}, but the market {market!r} must come first.",
                         file=config_file or name, fix=f"move {market!r} to the front of order.")
    frame = frame[order]
    if units == "percent":
        frame = frame / 100.0
    else:
        _check_units(frame[[market]], name, "returns", units)
        _check_units(frame[order[1:]], name, "levels", units)
    # Leading rows may lack the return (levels start one month earlier); trailing rows may be blank.
    valid = frame.notna().all(axis=1)
    if not valid.any():
        raise InputError("no row has every state variable filled.", file=name,
                         fix="fill the state columns; blanks are allowed only at the start or end.")
    first, last = valid.idxmax(), valid[::-1].idxmax()
    inner = frame.loc[first:last]
    holes = inner.isna()
    if holes.to_numpy().any():
        i, j = (int(x[0]) for x in np.nonzero(holes.to_numpy()))
        raise InputError(f"state variables need an unbroken history, but {inner.index[i]} is missing or blank.",
                         file=name,
                         row=f"date {inner.index[i]}", column=str(inner.columns[j]),
                         fix="fill the gap (e.g. carry the last level forward) or start the sample later.")
    sd = inner.std(ddof=1)
    flat = sd[~(sd > 1e-12 * (1.0 + inner.abs().max()))]
    if len(flat):
        raise InputError("state variable has no variation (the same value in every row).", file=name,
                         column=str(flat.index[0]), fix="drop it from [states] order or check the export.")
    lead = frame.loc[:first].iloc[:-1]
    # Keep one leading row of levels without a return: the VAR's first lag.
    keep_from = first
    if len(lead) and lead.iloc[-1][order[1:]].notna().all():
        keep_from = lead.index[-1]
    out = frame.loc[keep_from:last].copy()
    out.attrs["file"] = name
    return out


def read_returns(path: Path, what: str, *, freq: str = "M", units: str = "decimal") -> pd.DataFrame:
    frame = _time_series(path, what, freq)
    file = frame.attrs["file"]
    frame = _check_units(frame, file, "returns", units)
    frame.attrs["file"] = file
    return frame


def read_holdings(path: Path, assets: pd.DataFrame | None) -> tuple[pd.Series, list[str]]:
    """``asset,weight`` rows (weights of NAV). Returns weights and warnings."""
    name = str(path)
    frame = _read_table(path, "holdings")
    cols = [c.lower() for c in frame.columns]
    if cols[:2] != ["asset", "weight"]:
        raise InputError(f"holdings need the columns asset,weight (found {','.join(frame.columns)}).", file=name,
                         row=1, fix="name the header row asset,weight.")
    if len(frame) == 0:
        raise InputError("holdings file has no rows.", file=name)
    assets_col = frame.iloc[:, 0].astype("string").str.strip()
    if assets_col.isna().any() or (assets_col == "").any():
        i = int(np.flatnonzero((assets_col.isna() | (assets_col == "")).to_numpy())[0])
        raise InputError("asset name is blank.", file=name, row=i + 2, column="asset")
    weights = pd.to_numeric(frame.iloc[:, 1], errors="coerce")
    bad = weights.isna() | ~np.isfinite(weights.to_numpy(dtype=float, na_value=np.nan))
    if bad.any():
        i = int(np.flatnonzero(bad.to_numpy())[0])
        raise InputError(f"weight {frame.iloc[i, 1]!r} is not a number.", file=name, row=i + 2, column="weight",
                         fix="give weights as fractions of NAV, e.g. 0.05 for 5 %.")
    dup = assets_col.duplicated()
    if dup.any():
        i = int(np.flatnonzero(dup.to_numpy())[0])
        raise InputError(f"asset {assets_col.iloc[i]!r} is listed twice.", file=name, row=i + 2, column="asset",
                         fix="merge the rows into one weight.")
    series = pd.Series(weights.to_numpy(dtype=float), index=pd.Index(assets_col.to_numpy(), name="asset"),
                       name="weight")
    if assets is not None:
        missing = [a for a in series.index if a not in assets.columns]
        if missing:
            i = int(np.flatnonzero(series.index == missing[0])[0])
            near = __import__("difflib").get_close_matches(missing[0], list(assets.columns), n=1)
            hint = f"did you mean {near[0]!r}? " if near else ""
            raise InputError(f"asset {missing[0]!r} is not a column of the assets file "
                             f"({assets.attrs.get('file', 'assets')}); {len(missing)} holding(s) affected.",
                             file=name, row=i + 2, column="asset",
                             fix=f"{hint}add its returns to the assets file or correct the name.")
    total = float(series.sum())
    warnings = []
    if 90 < total < 110:
        raise InputError(f"weights sum to {total:g}: they look like percent.", file=name, column="weight",
                         fix="give weights as fractions of NAV (divide by 100).")
    if abs(total - 1.0) > 1e-6:
        if total < 1:
            warnings.append(f"holdings weights sum to {total:.4f}: {1 - total:.2%} of NAV is treated as cash "
                            "(zero excess return).")
        else:
            warnings.append(f"holdings weights sum to {total:.4f}: the book is levered {total - 1:.2%} "
                            "of NAV beyond its capital.")
    return series, warnings


def read_sheet(path: Path, instruments: pd.DataFrame | None) -> pd.DataFrame:
    """The instrument sheet, indexed by instrument; blank bounds are unbounded (NaN)."""
    name = str(path)
    frame = _read_table(path, "instrument sheet")
    missing = [c for c in SHEET_COLUMNS if c not in frame.columns]
    if missing:
        raise InputError(f"instrument sheet lacks the column {missing[0]!r}.", file=name, row=1, column=missing[0],
                         fix=f"the header must be {','.join(SHEET_COLUMNS)}.")
    extra = [c for c in frame.columns if c not in SHEET_COLUMNS]
    if extra:
        near = __import__("difflib").get_close_matches(extra[0], SHEET_COLUMNS, n=1)
        raise InputError(f"unknown column {extra[0]!r} in the instrument sheet.", file=name, row=1, column=extra[0],
                         fix=(f"did you mean {near[0]!r}? " if near else "") + f"columns: {','.join(SHEET_COLUMNS)}.")
    if len(frame) == 0:
        raise InputError("instrument sheet has no rows.", file=name)
    ids = frame["instrument"].astype("string").str.strip()
    dup = ids.duplicated()
    if dup.any():
        i = int(np.flatnonzero(dup.to_numpy())[0])
        raise InputError(f"instrument {ids.iloc[i]!r} appears twice.", file=name, row=i + 2, column="instrument")
    out = pd.DataFrame(index=pd.Index(ids.to_numpy(), name="instrument"))
    for col in SHEET_COLUMNS[1:]:
        raw = frame[col]
        num = pd.to_numeric(raw, errors="coerce")
        bad = num.isna() & raw.notna() & (raw.astype("string").str.strip() != "")
        if bad.any():
            i = int(np.flatnonzero(bad.to_numpy())[0])
            raise InputError(f"value {raw.iloc[i]!r} is not a number.", file=name, row=i + 2, column=col)
        out[col] = num.to_numpy(dtype=float, na_value=np.nan)
    for col in ("multiplier", "price"):
        bad = ~(out[col] > 0)
        if bad.any():
            i = int(np.flatnonzero(bad.to_numpy())[0])
            cell = frame[col].iloc[i]
            shown = "a blank cell" if pd.isna(cell) else str(cell).strip()
            raise InputError(f"{col} must be a positive number (found {shown}).", file=name,
                             row=i + 2, column=col, fix="give the contract multiplier and the current price.")
    out["cost_bps"] = out["cost_bps"].fillna(0.0)
    if (out["cost_bps"] < 0).any():
        i = int(np.flatnonzero((out["cost_bps"] < 0).to_numpy())[0])
        raise InputError("cost_bps cannot be negative.", file=name, row=i + 2, column="cost_bps")
    crossed = out["min_weight"] > out["max_weight"]
    if crossed.any():
        i = int(np.flatnonzero(crossed.to_numpy())[0])
        raise InputError("min_weight is above max_weight.", file=name, row=i + 2, column="min_weight",
                         fix="swap the two bounds.")
    if instruments is not None:
        no_row = [c for c in instruments.columns if c not in out.index]
        if no_row:
            raise InputError(f"instrument {no_row[0]!r} has returns in {instruments.attrs.get('file', 'instruments')} "
                             "but no row in the instrument sheet.", file=name, column="instrument",
                             fix="add a row with its multiplier, price, cost_bps and bounds.")
        no_ret = [c for c in out.index if c not in instruments.columns]
        if no_ret:
            i = int(np.flatnonzero(out.index == no_ret[0])[0])
            raise InputError(f"instrument {no_ret[0]!r} has a sheet row but no returns column in "
                             f"{instruments.attrs.get('file', 'the instruments file')}.", file=name, row=i + 2,
                             column="instrument", fix="add its returns or delete the row.")
        out = out.loc[list(instruments.columns)]
    return out


def read_positions(path: Path, sheet: pd.DataFrame | None) -> pd.Series:
    """Current overlay: ``instrument,weight`` (fractions of NAV)."""
    name = str(path)
    frame = _read_table(path, "current positions")
    if [c.lower() for c in frame.columns[:2]] != ["instrument", "weight"]:
        raise InputError("current positions need the columns instrument,weight.", file=name, row=1)
    ids = frame.iloc[:, 0].astype("string").str.strip()
    blank = ids.isna() | (ids == "")
    if blank.any():
        i = int(np.flatnonzero(blank.to_numpy())[0])
        raise InputError("instrument name is blank.", file=name, row=i + 2, column="instrument")
    dup = ids.duplicated()
    if dup.any():
        i = int(np.flatnonzero(dup.to_numpy())[0])
        raise InputError(f"instrument {ids.iloc[i]!r} is listed twice.", file=name, row=i + 2, column="instrument",
                         fix="merge the rows into one weight.")
    weights = pd.to_numeric(frame.iloc[:, 1], errors="coerce")
    bad = ~np.isfinite(weights.to_numpy(dtype=float, na_value=np.nan))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        cell = frame.iloc[i, 1]
        shown = "blank" if pd.isna(cell) else f"{str(cell).strip()!r}, not a finite number"
        raise InputError(f"weight is {shown}.", file=name, row=i + 2, column="weight",
                         fix="give the overlay weight as a fraction of NAV, 0 when flat.")
    series = pd.Series(weights.to_numpy(dtype=float), index=pd.Index(ids.to_numpy(), name="instrument"))
    if sheet is not None:
        unknown = [i for i in series.index if i not in sheet.index]
        if unknown:
            raise InputError(f"instrument {unknown[0]!r} is not in the instrument sheet.", file=name,
                             column="instrument")
        series = series.reindex(sheet.index, fill_value=0.0)
    return series


# --------------------------------------------------------------------------- dataset

def load_dataset(config: Config, need: Iterable[str] | None = None) -> Dataset:
    """Read the files a command needs (``need``: data keys; ``None`` = every configured file)."""
    data = config["data"]
    freq_name = data["frequency"]
    freq = FREQ[freq_name]
    units = data["units"]
    cfg_file = str(config.path) if config.path else "configuration"
    keys = set(need) if need is not None else {k for k, v in data.items() if v is not None}
    wanted = {k for k in keys if k in data}
    paths = {k: Path(data[k]) for k in wanted if data.get(k) is not None}

    def require(key: str, why: str) -> None:
        if key not in paths:
            raise InputError(f"[data] {key} is not set, but {why} needs it.", file=cfg_file,
                             fix=f'add {key} = "{key}.csv" under [data].')

    warnings: list[str] = []
    states = factors = assets = instruments = sheet = positions = None
    holdings = portfolio = None
    if "factors" in paths:
        factors = read_returns(paths["factors"], "factors", freq=freq, units="decimal")
        inner = factors.dropna(how="all")
        holes = factors.loc[inner.index[0]:inner.index[-1]].isna()
        if holes.to_numpy().any():
            i, j = (int(x[0]) for x in np.nonzero(holes.to_numpy()))
            raise InputError("factors need an unbroken history; this cell is blank.", file=str(paths["factors"]),
                             row=f"date {holes.index[i]}", column=str(factors.columns[j]))
        factors = factors.loc[inner.index[0]:inner.index[-1]]
    elif "states" in wanted:
        require("states", "estimating the state-variable innovations")
        st = config["states"]
        states = read_states(paths["states"], st["order"], st["market"], freq=freq, units=units,
                             config_file=cfg_file)
    if "assets" in wanted:
        require("assets", "the exposures and prices of risk")
        assets = read_returns(paths["assets"], "assets", freq=freq, units=units)
    if "holdings" in paths:
        holdings, hw = read_holdings(paths["holdings"], assets)
        warnings += hw
    if "portfolio_returns" in paths:
        frame = read_returns(paths["portfolio_returns"], "portfolio returns", freq=freq, units=units)
        col = config["portfolio"]["portfolio_column"]
        if col is None:
            if frame.shape[1] > 1:
                raise InputError(f"portfolio returns have {frame.shape[1]} columns; hedgekit needs one.",
                                 file=str(paths["portfolio_returns"]), row=1,
                                 fix="keep one column, or set portfolio_column under [portfolio].")
            col = frame.columns[0]
        if col not in frame.columns:
            raise InputError(f"column {col!r} named by [portfolio] portfolio_column is not in the file.",
                             file=str(paths["portfolio_returns"]), row=1, column=col)
        portfolio = frame[col].rename(col)
    if "instruments" in wanted and "instruments" in paths:
        instruments = read_returns(paths["instruments"], "instruments", freq=freq, units=units)
    if "instrument_sheet" in wanted and "instrument_sheet" in paths:
        sheet = read_sheet(paths["instrument_sheet"], instruments)
    if "current_positions" in paths:
        positions = read_positions(paths["current_positions"], sheet)
    hashes = {k: file_hash(p) for k, p in paths.items() if p.exists()}
    return Dataset(states=states, assets=assets, holdings=holdings, portfolio_returns=portfolio,
                   instruments=instruments, sheet=sheet, factors=factors, current_positions=positions,
                   frequency=freq_name, periods_per_year=PERIODS_PER_YEAR[freq_name],
                   warnings=tuple(warnings), hashes=hashes)


def check_common_months(returns: pd.DataFrame | pd.Series, factors: pd.DataFrame, need: int, what: str) -> None:
    """Raise when no series has ``need`` valid months in common with the factors."""
    frame = returns.to_frame() if isinstance(returns, pd.Series) else returns
    common = frame.reindex(factors.index)
    have = int(common.notna().sum().max()) if common.shape[1] else 0
    if have < need:
        raise _common_months_error(returns.attrs.get("file", "returns"), need, have, what)
