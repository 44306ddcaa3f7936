"""The readers of each input file. Files are only read, never modified."""

from __future__ import annotations

import difflib
from collections.abc import Collection, Iterable, Mapping
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import InputError, quoted
from .series import read_series
from .tables import BIDI, check_file, check_name, header_names, read_table
from .units import resolve_units

SHEET_COLUMNS = ["instrument", "multiplier", "price", "cost_bps", "min_weight", "max_weight"]


def read_states(path: Path, order: Iterable[str] | None, market: str | None, *, frequency: str = "monthly",
                units: str | Mapping = "decimal", accept: Mapping[str, Collection[str]] | None = None,
                config_file: str | None = None) -> pd.DataFrame:
    """The states file: market excess return then state-variable levels, in the configured order.

    The market column is checked as a return, the others as levels (:mod:`.checks`). The
    frame's ``attrs["raw"]`` keeps the file's whole span (before the cut to full rows) for
    the coverage records.
    """
    name = str(path)
    cfg = config_file or name
    header = _peek_columns(path)
    cols = header[1:]
    order = list(order) if order else cols
    market = market or (order[0] if order else None)
    for v in order:
        if v not in cols:
            raise InputError(f"state variable {quoted(v)} from [states] order is not a column of the file "
                             f"(columns: {', '.join(cols[:20])}).", file=name, row=1, column=v,
                             fix="correct [states] order or rename the column.")
    dup = [v for i, v in enumerate(order) if v in order[:i]]
    if dup:
        raise InputError(f"[states] order lists {dup[0]!r} twice.", file=cfg, fix="name each state variable once.")
    if market not in order:
        raise InputError(f"the market column {market!r} ([states] market) is not in [states] order.",
                         file=cfg, fix="put the market column first in order.")
    if order[0] != market:
        raise InputError(f"[states] order starts with {order[0]!r}, but the market {market!r} must come first.",
                         file=cfg, fix=f"move {market!r} to the front of order.")
    raw = read_series(path, "states", frequency=frequency, units=units, returns=[market], levels=order[1:],
                      accept=accept, config_file=cfg)
    frame = raw[order]
    valid = frame.notna().all(axis=1)
    if not valid.any():
        raise InputError("no row has every state variable filled.", file=name,
                         fix="fill the state columns; blanks are allowed only at the start or end.")
    first, last = valid.idxmax(), valid[::-1].idxmax()
    inner = frame.loc[first:last]
    holes = inner.isna().to_numpy()
    if holes.any():
        i, j = (int(x[0]) for x in np.nonzero(holes))
        absent = inner.index[i] in raw.attrs["absent"]
        why = "has no row" if absent else "is blank"
        raise InputError(f"state variables need an unbroken history, but {inner.index[i]} {why}.", file=name,
                         row=f"date {inner.index[i]}", column=str(inner.columns[j]),
                         fix="fill the gap from the source, or start the sample after it "
                             "(the VAR needs every period between the first and the last).")
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
    out.attrs.update(raw.attrs)
    out.attrs["raw"] = raw
    return out


def _peek_columns(path: Path) -> list[str]:
    """The header of a CSV (or the columns of a Parquet file) without reading the rows."""
    check_file(path, "states")
    if path.suffix.lower() in (".parquet", ".pq"):
        return [str(c) for c in read_table(path, "states")[0].columns]
    return header_names(path, "states")


def read_returns(path: Path, what: str, *, frequency: str = "monthly", units: str | Mapping = "decimal",
                 file_key: str | None = None, accept: Mapping[str, Collection[str]] | None = None,
                 config_file: str = "configuration") -> pd.DataFrame:
    """A file of period returns (assets, instruments, portfolio returns, factors)."""
    return read_series(path, what, frequency=frequency, units=units, file_key=file_key or what,
                       accept=accept, config_file=config_file)


def _names(frame: pd.DataFrame, name: str, column: str, lines: np.ndarray, what: str) -> pd.Series:
    ids = frame.iloc[:, 0].astype("string").str.strip()
    blank = ids.isna() | (ids == "")
    if blank.any():
        i = int(np.flatnonzero(blank.to_numpy())[0])
        raise InputError(f"{what} name is blank.", file=name, row=int(lines[i]), column=column)
    hostile = ids.str.contains(BIDI.pattern, regex=True).to_numpy(dtype=bool)
    if hostile.any():
        i = int(np.flatnonzero(hostile)[0])
        check_name(str(ids.iloc[i]), name, int(lines[i]), column, f"{what} name")
    dup = ids.duplicated()
    if dup.any():
        i = int(np.flatnonzero(dup.to_numpy())[0])
        raise InputError(f"{what} {quoted(ids.iloc[i])} is listed twice.", file=name, row=int(lines[i]),
                         column=column, fix="merge the rows into one weight.")
    return ids


def read_holdings(path: Path, assets: pd.DataFrame | None, *, units: str | Mapping = "decimal",
                  config_file: str = "configuration") -> tuple[pd.Series, list[str]]:
    """``asset,weight`` rows (weights of NAV). Returns weights and warnings."""
    name = str(path)
    frame, lines = read_table(path, "holdings")
    cols = [c.lower() for c in frame.columns]
    if cols[:2] != ["asset", "weight"]:
        raise InputError(f"holdings need the columns asset,weight (found {quoted(','.join(frame.columns))}).",
                         file=name, row=1, fix="name the header row asset,weight.")
    if len(frame) == 0:
        raise InputError("holdings file has no rows.", file=name)
    names = _names(frame, name, "asset", lines, "asset")
    weights = pd.to_numeric(frame.iloc[:, 1].str.strip(), errors="coerce")
    bad = weights.isna() | ~np.isfinite(weights.to_numpy(dtype=float, na_value=np.nan))
    if bad.any():
        i = int(np.flatnonzero(bad.to_numpy())[0])
        raise InputError(f"weight {quoted(frame.iloc[i, 1])} is not a number.", file=name, row=int(lines[i]),
                         column="weight", fix="give weights as fractions of NAV, e.g. 0.05 for 5 %.")
    unit = resolve_units(units, "holdings", ["weight"], config_file=config_file)
    series = pd.Series(weights.to_numpy(dtype=float) / unit.divisors[0],
                       index=pd.Index(names.to_numpy(), name="asset"), name="weight")
    if assets is not None:
        missing = [a for a in series.index if a not in assets.columns]
        if missing:
            i = int(np.flatnonzero(series.index == missing[0])[0])
            near = difflib.get_close_matches(missing[0], list(assets.columns), n=1)
            hint = f"did you mean {near[0]!r}? " if near else ""
            raise InputError(f"asset {quoted(missing[0])} is not a column of the assets file "
                             f"({assets.attrs.get('file', 'assets')}); {len(missing)} holding(s) affected.",
                             file=name, row=int(lines[i]), column="asset",
                             fix=f"{hint}add its returns to the assets file or correct the name.")
    total = float(series.sum())
    warnings = []
    if 90 < total < 110 and not unit.is_percent("weight"):
        raise InputError(f"weights sum to {total:g}: they look like percent.", file=name, column="weight",
                         fix='give weights as fractions of NAV (divide by 100), or set '
                             'units = { holdings = "percent" } in [data].')
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
    frame, lines = read_table(path, "instrument sheet")
    missing = [c for c in SHEET_COLUMNS if c not in frame.columns]
    if missing:
        raise InputError(f"instrument sheet lacks the column {missing[0]!r}.", file=name, row=1, column=missing[0],
                         fix=f"the header must be {','.join(SHEET_COLUMNS)}.")
    extra = [c for c in frame.columns if c not in SHEET_COLUMNS]
    if extra:
        near = difflib.get_close_matches(extra[0], SHEET_COLUMNS, n=1)
        raise InputError(f"unknown column {quoted(extra[0])} in the instrument sheet.", file=name, row=1,
                         column=extra[0],
                         fix=(f"did you mean {near[0]!r}? " if near else "") + f"columns: {','.join(SHEET_COLUMNS)}.")
    if len(frame) == 0:
        raise InputError("instrument sheet has no rows.", file=name)
    frame = frame[SHEET_COLUMNS]
    ids = _names(frame, name, "instrument", lines, "instrument")
    out = pd.DataFrame(index=pd.Index(ids.to_numpy(), name="instrument"))
    for col in SHEET_COLUMNS[1:]:
        raw = frame[col]
        num = pd.to_numeric(raw.str.strip(), errors="coerce")
        bad = num.isna() & raw.notna() & (raw.str.strip() != "")
        if bad.any():
            i = int(np.flatnonzero(bad.to_numpy())[0])
            raise InputError(f"value {quoted(raw.iloc[i])} is not a number.", file=name, row=int(lines[i]),
                             column=col)
        out[col] = num.to_numpy(dtype=float, na_value=np.nan)
    for col in ("multiplier", "price"):
        bad = ~(out[col] > 0) | ~np.isfinite(out[col])
        if bad.any():
            i = int(np.flatnonzero(bad.to_numpy())[0])
            cell = frame[col].iloc[i]
            text = "a blank cell" if pd.isna(cell) else quoted(str(cell).strip())
            raise InputError(f"{col} must be a positive finite number (found {text}).", file=name,
                             row=int(lines[i]), column=col, fix="give the contract multiplier and the current price.")
    out["cost_bps"] = out["cost_bps"].fillna(0.0)
    bad = (out["cost_bps"] < 0) | np.isinf(out["cost_bps"])
    if bad.any():
        i = int(np.flatnonzero(bad.to_numpy())[0])
        raise InputError("cost_bps must be a finite number of at least 0.", file=name, row=int(lines[i]),
                         column="cost_bps")
    crossed = out["min_weight"] > out["max_weight"]
    if crossed.any():
        i = int(np.flatnonzero(crossed.to_numpy())[0])
        raise InputError("min_weight is above max_weight.", file=name, row=int(lines[i]), column="min_weight",
                         fix="swap the two bounds.")
    if instruments is not None:
        no_row = [c for c in instruments.columns if c not in out.index]
        if no_row:
            raise InputError(f"instrument {quoted(no_row[0])} has returns in "
                             f"{instruments.attrs.get('file', 'instruments')} but no row in the instrument sheet.",
                             file=name, column="instrument",
                             fix="add a row with its multiplier, price, cost_bps and bounds.")
        no_ret = [c for c in out.index if c not in instruments.columns]
        if no_ret:
            i = int(np.flatnonzero(out.index == no_ret[0])[0])
            raise InputError(f"instrument {quoted(no_ret[0])} has a sheet row but no returns column in "
                             f"{instruments.attrs.get('file', 'the instruments file')}.", file=name,
                             row=int(lines[i]), column="instrument", fix="add its returns or delete the row.")
        out = out.loc[list(instruments.columns)]
    return out


def read_positions(path: Path, sheet: pd.DataFrame | None, *, units: str | Mapping = "decimal",
                   config_file: str = "configuration") -> pd.Series:
    """Current overlay: ``instrument,weight`` (fractions of NAV)."""
    name = str(path)
    frame, lines = read_table(path, "current positions")
    if [c.lower() for c in frame.columns[:2]] != ["instrument", "weight"]:
        raise InputError("current positions need the columns instrument,weight.", file=name, row=1)
    ids = _names(frame, name, "instrument", lines, "instrument")
    weights = pd.to_numeric(frame.iloc[:, 1].str.strip(), errors="coerce")
    bad = ~np.isfinite(weights.to_numpy(dtype=float, na_value=np.nan))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        cell = frame.iloc[i, 1]
        text = "blank" if pd.isna(cell) else f"{quoted(str(cell).strip())}, not a finite number"
        raise InputError(f"weight is {text}.", file=name, row=int(lines[i]), column="weight",
                         fix="give the overlay weight as a fraction of NAV, 0 when flat.")
    unit = resolve_units(units, "current_positions", ["weight"], config_file=config_file)
    series = pd.Series(weights.to_numpy(dtype=float) / unit.divisors[0],
                       index=pd.Index(ids.to_numpy(), name="instrument"))
    if sheet is not None:
        unknown = [i for i in series.index if i not in sheet.index]
        if unknown:
            i = int(np.flatnonzero(series.index == unknown[0])[0])
            raise InputError(f"instrument {quoted(unknown[0])} is not in the instrument sheet.", file=name,
                             row=int(lines[i]), column="instrument")
        series = series.reindex(sheet.index, fill_value=0.0)
    return series
