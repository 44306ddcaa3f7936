"""When the walk-forward decides: the rebalance dates and each date's estimation window."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from ..errors import InputError
from .data import RealTimePanel
from .settings import CONFIG_KEYS, BacktestSettings

__all__ = ["estimation_windows", "rebalance_dates", "rebalance_schedule"]


def rebalance_schedule(dates: pd.PeriodIndex, *, rebalance: str = "quarterly",
                       first: pd.Period | None = None) -> pd.PeriodIndex:
    """Rebalance dates among ``dates``: quarter ends (months 3, 6, 9, 12) or every month,
    from ``first`` on, leaving at least one period to hold the last overlay.  With
    quarterly dates every date is a quarter end, so both choices rebalance every quarter."""
    if rebalance not in ("quarterly", "monthly"):
        raise InputError(f"{CONFIG_KEYS['rebalance']} = '{rebalance}' is not a rebalance "
                         "frequency.", fix="use 'quarterly' or 'monthly'.")
    cand = dates[:-1]
    if rebalance == "quarterly" and dates.freqstr == "M":
        cand = cand[np.asarray(cand.month) % 3 == 0]
    if first is not None:
        cand = cand[cand >= first]
    return pd.PeriodIndex(cand, name="date")


def rebalance_dates(panel: RealTimePanel, settings: BacktestSettings) -> pd.PeriodIndex:
    """The schedule from the first date with ``beta_min_obs`` periods of real-time factors
    for the book and every instrument (or ``start``, when later).  Counts are cumulative,
    so nothing after a date decides whether that date qualifies."""
    key, unit, s = CONFIG_KEYS, settings.unit, settings
    periods = panel.periods
    valid = (panel.returns.notna().to_numpy() & panel.known[:, None]).cumsum(axis=0)
    ready = (valid >= s.beta_min_obs).all(axis=1)
    if not ready.any():
        raise InputError(
            f"no date has {s.beta_min_obs} {unit} of real-time factors for the book and every "
            f"instrument after a first VAR fit on {s.min_periods} {unit} "
            f"({key['min_periods']} = {s.min_periods}, {key['beta_min_obs']} = "
            f"{s.beta_min_obs}).",
            fix=f"use a longer sample, or lower {key['min_periods']} or {key['beta_min_obs']}.")
    earliest = periods[int(np.argmax(ready))]
    first = earliest if s.start is None else _start(s, periods, earliest)
    dates = rebalance_schedule(periods, rebalance=s.rebalance, first=first)
    if len(dates) == 0:
        what = (f"{key['start']} = '{s.start}'" if s.start is not None
                else f"the first date with enough history, {earliest},")
        raise InputError(f"there is no {s.rebalance} rebalance date between {what} and "
                         f"{periods[-2]}, the last date that leaves one {s.one} to hold the "
                         "overlay.",
                         fix=(f"start earlier ({key['start']}) or use a longer sample."
                              if s.start is not None else
                              f"use a longer sample, or lower {key['min_periods']} or "
                              f"{key['beta_min_obs']}."))
    return dates


def _start(s: BacktestSettings, periods: pd.PeriodIndex, earliest: pd.Period) -> pd.Period:
    key = CONFIG_KEYS
    first = _to_period(s.start, periods.freqstr, "start")
    if first > periods[-1]:
        raise InputError(f"{key['start']} = '{s.start}' is after the last date {periods[-1]}.",
                         fix=f"start between {earliest} and {periods[-2]}, or leave "
                             f"{key['start']} out.")
    if first < earliest:
        raise InputError(f"{key['start']} = '{s.start}' comes before the first date with "
                         f"enough history, {earliest} (a first VAR fit on {s.min_periods} "
                         f"{s.unit}, then {s.beta_min_obs} {s.unit} of betas).",
                         fix=f"start at {earliest} or later, or leave {key['start']} out.")
    return first


def _to_period(value: Any, freq: str, what: str) -> pd.Period:
    try:
        return pd.Period(value, freq=freq)
    except (TypeError, ValueError):
        example = "YYYYQn, e.g. '2005Q1'" if freq.startswith("Q") else "YYYY-MM, e.g. '2005-03'"
        raise InputError(f"{CONFIG_KEYS.get(what, what)} = '{value}' is not a date.",
                         fix=f"write it as {example}.") from None


def estimation_windows(panel: RealTimePanel, dates: pd.PeriodIndex, beta_window: int | None
                       ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """For each date τ the window ``[start, end)`` in the rows with real-time factors
    (returned first): ``end`` counts the factor rows dated <= τ, so no later row enters any
    estimate made at τ; ``start`` is 0 (expanding) or ``end - beta_window``."""
    rows = np.flatnonzero(panel.known)
    at = panel.periods.get_indexer(dates)
    ends = np.searchsorted(rows, at, side="right")
    starts = np.zeros_like(ends) if beta_window is None else np.maximum(ends - int(beta_window), 0)
    return rows, starts, ends
