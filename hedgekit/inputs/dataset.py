"""The dataset of one run: every configured file read, checked and put on one frequency."""

from __future__ import annotations

import os
import re
from collections.abc import Iterable
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd

from ..config import DATA_FILES, Config
from ..errors import InputError
from . import coverage
from .dates import FREQ, PERIODS_PER_YEAR
from .readers import read_holdings, read_positions, read_returns, read_sheet, read_states
from .tables import file_hash

SERIES = ("states", "assets", "instruments", "factors", "portfolio_returns")


@dataclass(frozen=True)
class Dataset:
    """Everything read for one run, validated and aligned to periods.

    ``coverage``: per file and column ``{file, column, first, last, periods}`` (first and
    last valid period, count of valid values). ``gaps``: every missing row
    (``column`` None) or blank stretch inside a column's span, as
    ``{file, column, first, last, periods, reason}``; :meth:`dropped` adds the stretches
    outside the sample the estimates used. Files are named as in the config.
    """

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
    coverage: tuple[dict, ...] = ()
    gaps: tuple[dict, ...] = ()
    files: dict[str, str] = field(default_factory=dict)

    def dropped(self, first: str | pd.Period | None = None, last: str | pd.Period | None = None) -> list[dict]:
        """Records ``{file, column, first, last, periods, reason}`` of data no estimate used.

        Every gap inside a column's span (``gaps``), and, when the sample the estimates used
        is given (``first``/``last``, inclusive), each file's whole rows before or after it.
        """
        freq = FREQ[self.frequency]
        lo = None if first is None else pd.Period(first, freq=freq)
        hi = None if last is None else pd.Period(last, freq=freq)
        out = list(self.gaps)
        if lo is None and hi is None:
            return out
        for key in SERIES:
            frame = getattr(self, key)
            if frame is None:
                continue
            frame = frame.attrs.get("raw", frame)
            frame = frame.to_frame() if isinstance(frame, pd.Series) else frame
            out += coverage.outside(frame, self.files.get(key, key), lo, hi)
        return out

    def overlap(self) -> dict | None:
        """``{first, last, periods}``: the stretch where every time-series file has a row with data
        (None when the files do not overlap or none is read)."""
        firsts, lasts, frames = [], [], []
        for key in SERIES:
            frame = getattr(self, key)
            if frame is None:
                continue
            valid = frame.index[frame.notna().to_numpy().reshape(len(frame), -1).any(axis=1)]
            if len(valid) == 0:
                return None
            firsts.append(valid[0])
            lasts.append(valid[-1])
            frames.append(frame)
        if not frames or max(firsts) > min(lasts):
            return None
        lo, hi = max(firsts), min(lasts)
        index = frames[0].index
        return {"first": str(lo), "last": str(hi), "periods": int(((index >= lo) & (index <= hi)).sum())}

    def as_of(self, date: str | pd.Period) -> Dataset:
        """The same data cut at ``date`` (inclusive): a run as it would have been made then."""
        freq = FREQ[self.frequency]
        text = str(date).strip()
        m = re.fullmatch(r"(\d{4})-(\d{1,2})(?:-(\d{1,2}))?", text)
        q = re.fullmatch(r"(\d{4})-?Q([1-4])", text, flags=re.I)
        try:
            if m and 1 <= int(m.group(2)) <= 12 and (self.frequency != "daily" or m.group(3)):
                day = int(m.group(3)) if m.group(3) else 1
                cut = pd.Period(year=int(m.group(1)), month=int(m.group(2)), day=day, freq="D").asfreq(freq)
            elif q and self.frequency != "daily":  # a quarter means its last month
                cut = pd.Period(year=int(q.group(1)), quarter=int(q.group(2)), freq="Q").asfreq("M", "end")
                cut = cut.asfreq(freq)
            else:
                raise ValueError
        except ValueError:
            example = "2025-09-30" if self.frequency == "daily" else "2025-09 (a month) or 2025Q3"
            raise InputError(f"--as-of {text[:60]!r} is not a period.", fix=f"write it like {example}.") from None
        frame0 = next((f for f in (self.states, self.factors, self.assets) if f is not None), None)
        if frame0 is not None:
            last = frame0.dropna(how="all").index[-1]
            if cut > last:
                raise InputError(f"--as-of {cut} is after the last period of the data ({last}).",
                                 file=frame0.attrs.get("file"), fix=f"use {last} or earlier.")
        frames = {}
        for name in SERIES:
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
        out["overlap"] = self.overlap()
        out["gaps"] = list(self.gaps)
        out["warnings"] = list(self.warnings)
        return out


def _display_name(path: Path, base: Path) -> str:
    try:
        return os.path.relpath(path, base) if path.is_relative_to(base) else str(path)
    except ValueError:
        return str(path)


def load_dataset(config: Config, need: Iterable[str] | None = None) -> Dataset:
    """Read the files a command needs (``need``: data keys; ``None`` = every configured file).

    Only ``[data]`` keys that are file paths (``config.DATA_FILES``) are ever opened.
    """
    data = config["data"]
    frequency = data["frequency"]
    units = data["units"]
    accept = data["accept_extreme"]
    cfg_file = str(config.path) if config.path else "configuration"
    keys = set(need) if need is not None else set(DATA_FILES)
    wanted = {k for k in keys if k in DATA_FILES}
    paths = {k: Path(data[k]) for k in wanted if data.get(k) is not None}
    files = {k: _display_name(p, config.base) for k, p in paths.items()}

    def require(key: str, why: str) -> None:
        if key not in paths:
            raise InputError(f"[data] {key} is not set, but {why} needs it.", file=cfg_file,
                             fix=f'add {key} = "{key}.csv" under [data].')

    series_kw = dict(frequency=frequency, units=units, accept=accept, config_file=cfg_file)
    warnings: list[str] = []
    states = factors = assets = instruments = sheet = positions = None
    holdings = portfolio = None
    if "factors" in paths:
        factors = read_returns(paths["factors"], "factors", **series_kw)
        inner = factors.dropna(how="all")
        holes = factors.loc[inner.index[0]:inner.index[-1]].isna()
        if holes.to_numpy().any():
            i, j = (int(x[0]) for x in np.nonzero(holes.to_numpy()))
            raise InputError("factors need an unbroken history; this cell is blank.", file=str(paths["factors"]),
                             row=f"date {holes.index[i]}", column=str(factors.columns[j]),
                             fix="fill the gap from the source, or start the sample after it.")
        raw = factors
        factors = factors.loc[inner.index[0]:inner.index[-1]]
        factors.attrs.update(raw.attrs, raw=raw)
    elif "states" in wanted:
        require("states", "estimating the state-variable innovations")
        st = config["states"]
        states = read_states(paths["states"], st["order"], st["market"], **series_kw)
    if "assets" in wanted:
        require("assets", "the exposures and prices of risk")
        assets = read_returns(paths["assets"], "assets", **series_kw)
    if "holdings" in paths:
        holdings, hw = read_holdings(paths["holdings"], assets, units=units, config_file=cfg_file)
        warnings += hw
    if "portfolio_returns" in paths:
        frame = read_returns(paths["portfolio_returns"], "portfolio returns", file_key="portfolio_returns",
                             **series_kw)
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
        portfolio.attrs.update(frame.attrs)
    if "instruments" in paths:
        instruments = read_returns(paths["instruments"], "instruments", **series_kw)
    if "instrument_sheet" in paths:
        sheet = read_sheet(paths["instrument_sheet"], instruments)
    if "current_positions" in paths:
        positions = read_positions(paths["current_positions"], sheet, units=units, config_file=cfg_file)
    spans, gaps = [], []
    for key, frame in (("states", states), ("factors", factors), ("assets", assets),
                       ("portfolio_returns", portfolio), ("instruments", instruments)):
        if frame is None:
            continue
        raw = frame.attrs.get("raw", frame)
        raw = raw.to_frame() if isinstance(raw, pd.Series) else raw
        if key == "states":
            raw = raw[list(frame.columns)]
        spans += coverage.spans(raw, files[key])
        gaps += coverage.gaps(raw, files[key], frame.attrs.get("absent"))
        warnings += frame.attrs.get("notes", []) + frame.attrs.get("warnings", [])
    hashes = {k: file_hash(p) for k, p in sorted(paths.items())}
    return Dataset(states=states, assets=assets, holdings=holdings, portfolio_returns=portfolio,
                   instruments=instruments, sheet=sheet, factors=factors, current_positions=positions,
                   frequency=frequency, periods_per_year=PERIODS_PER_YEAR[frequency],
                   warnings=tuple(warnings), hashes=hashes, coverage=tuple(spans), gaps=tuple(gaps),
                   files=files)


def check_common_months(returns: pd.DataFrame | pd.Series, factors: pd.DataFrame, need: int, what: str) -> None:
    """Raise when no series has ``need`` valid periods in common with the factors."""
    frame = returns.to_frame() if isinstance(returns, pd.Series) else returns
    common = frame.reindex(factors.index)
    have = int(common.notna().sum().max()) if common.shape[1] else 0
    if have < need:
        unit = {"M": "months", "Q": "quarters", "D": "days"}.get(getattr(factors.index, "freqstr", "M")[:1],
                                                                  "periods")
        raise InputError(f"only {have} {unit} in common with the factors, fewer than the {need} needed for {what}.",
                         file=returns.attrs.get("file", "returns"),
                         fix="supply a longer history, or lower [exposures] window / min_obs.")
