"""The walk-forward's inputs on one calendar: real-time factors, the book and the instruments.

Row t of the real-time factors is the one-step forecast error of the VAR fitted through
t-1, orthogonalised with that fit's M (:func:`hedgekit.states.realtime_innovations`); the
book's and the instruments' returns are put on the same periods.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import InputError
from ..hedge import HedgeSpec
from ..states import realtime_innovations
from .settings import CONFIG_KEYS, BacktestSettings

__all__ = ["BOOK", "RealTimePanel", "real_time_panel"]

#: Column of the book in the panel of returns (the instruments follow).
BOOK = "__book__"


@dataclass(frozen=True)
class RealTimePanel:
    """Real-time ``factors`` (period x factor, NaN before the first VAR fit), the ``book``'s
    and the ``instruments``' returns on the same periods, ``known`` (the periods with every
    real-time factor) and the VAR's lag order ``lags``."""

    factors: pd.DataFrame
    book: pd.Series
    instruments: pd.DataFrame
    known: np.ndarray
    lags: int

    @property
    def periods(self) -> pd.PeriodIndex:
        return self.factors.index

    @property
    def factor_names(self) -> tuple[str, ...]:
        return tuple(str(c) for c in self.factors.columns)

    @property
    def instrument_names(self) -> list[str]:
        return list(self.instruments.columns)

    @property
    def returns(self) -> pd.DataFrame:
        """The book (column ``BOOK``) then the instruments."""
        return pd.concat([self.book.rename(BOOK), self.instruments], axis=1)


def real_time_panel(state_data: pd.DataFrame, book_returns: pd.Series | pd.DataFrame,
                    instrument_returns: pd.DataFrame, spec: HedgeSpec,
                    settings: BacktestSettings) -> tuple[RealTimePanel, list[str]]:
    """Check the inputs, re-estimate the VAR date by date and align the returns to it."""
    if not isinstance(instrument_returns, pd.DataFrame) or instrument_returns.shape[1] == 0:
        raise InputError("instrument returns must be a non-empty table.", file="instruments",
                         fix="one column of excess returns per hedge instrument.")
    state_data = _market_first(state_data, settings.market, spec)
    _check_first_fit(state_data, settings)
    rt = realtime_innovations(state_data, lags=settings.lags, min_window=settings.min_periods,
                              window=settings.window)
    warnings = list(rt.warnings)
    factors = rt.factors()
    freq = factors.index.freqstr
    warnings += _frequency_notes(freq, settings)
    book = _as_series(book_returns)
    if not isinstance(instrument_returns.index, pd.PeriodIndex) or \
            instrument_returns.index.freqstr != freq:
        raise InputError(f"instrument returns must be indexed by a PeriodIndex at the state "
                         f"data's frequency ({freq}).", file="instruments",
                         fix=f"index them with pd.PeriodIndex(..., freq='{freq}').")
    if book.index.freqstr != freq:
        raise InputError(f"the book's returns are not at the state data's frequency ({freq}).",
                         file="portfolio_returns", fix="use one frequency for every input.")
    inst = instrument_returns.apply(pd.to_numeric, errors="coerce").astype(float)
    inst = inst.reindex(factors.index)
    inst.columns = [str(c) for c in inst.columns]
    panel = RealTimePanel(factors=factors, book=book.reindex(factors.index), instruments=inst,
                          known=factors.notna().all(axis=1).to_numpy(), lags=rt.lags)
    return panel, warnings


def _check_first_fit(state_data: pd.DataFrame, settings: BacktestSettings) -> None:
    """Enough complete periods for a first VAR fit and one forecast."""
    if not isinstance(state_data, pd.DataFrame):
        return
    key, unit = CONFIG_KEYS, settings.unit
    have = int(state_data.notna().all(axis=1).sum())
    first_fit = int(settings.window if settings.window is not None else settings.min_periods)
    need = first_fit + (settings.lags if isinstance(settings.lags, int) else 1) + 1
    if have < need:
        which = key["window"] if settings.window is not None else key["min_periods"]
        raise InputError(f"{which} = {first_fit}: the state data have only {have} complete "
                         f"{unit}, fewer than the {need} a first VAR fit on {first_fit} "
                         f"{unit} and one forecast need.",
                         file=state_data.attrs.get("file", "states"),
                         fix=f"lower {which} or use a longer sample.")


def _frequency_notes(freq: str, settings: BacktestSettings) -> list[str]:
    notes = []
    ppy = settings.periods_per_year
    expected = {"M": 12, "Q": 4}.get(freq[:1])
    if expected is not None and expected != ppy:
        notes.append(f"the data are {'monthly' if freq[:1] == 'M' else 'quarterly'} but "
                     f"periods_per_year is {ppy}: annualised figures use {ppy}.")
    if freq[:1] == "Q" and settings.rebalance == "monthly":
        notes.append(f"the data are quarterly: {CONFIG_KEYS['rebalance']} = 'monthly' "
                     "rebalances every quarter.")
    return notes


def _as_series(book_returns: pd.Series | pd.DataFrame) -> pd.Series:
    if isinstance(book_returns, pd.DataFrame):
        if book_returns.shape[1] != 1:
            raise InputError("the book's returns must be one series (a one-column table).",
                             file="portfolio_returns",
                             fix="pass the portfolio's own returns, or assets @ holdings.")
        book_returns = book_returns.iloc[:, 0]
    if not isinstance(book_returns, pd.Series) or not isinstance(book_returns.index,
                                                                  pd.PeriodIndex):
        raise InputError("the book's returns must be a Series indexed by a PeriodIndex.",
                         file="portfolio_returns", fix="index it with pd.PeriodIndex(..., freq='M').")
    return pd.to_numeric(book_returns, errors="coerce").astype(float)


def _market_first(state_data: pd.DataFrame, market: str | None, spec: HedgeSpec) -> pd.DataFrame:
    """Put the market column first; refuse state data without the market or a hedged factor.

    The walk-forward re-fits the VAR on the state data at every date, so the market and
    every factor the hedge names must be columns of that data (a factors file is not
    enough: its factors cannot be re-estimated date by date).
    """
    if not isinstance(state_data, pd.DataFrame):
        return state_data
    cols = [str(c) for c in state_data.columns]
    where = state_data.attrs.get("file", "states")
    why = ("The walk-forward re-estimates the VAR at every date, so it needs the states file "
           "with the market excess return and the state variables; a factors file cannot "
           "stand in for it.")
    if market is not None:
        if str(market) not in cols:
            raise InputError(f"the market column '{market}' is not in the state data (columns: "
                             f"{', '.join(cols)}). {why}", file=where,
                             fix=f"add the market excess return '{market}' to the states "
                                 "file, or run without the backtest.")
        if cols[0] != str(market):
            pos = cols.index(str(market))
            order = [pos] + [i for i in range(len(cols)) if i != pos]
            state_data = state_data.iloc[:, order]
            cols = [cols[i] for i in order]
    named = list(dict.fromkeys([*spec.neutralise, *spec.keep, *spec.targets]))
    missing = [f for f in named if f not in cols]
    if missing:
        raise InputError(f"the hedge names the factor(s) {', '.join(missing)}, which are not "
                         f"columns of the state data (columns: {', '.join(cols)}). {why}",
                         file=where, fix="add those columns to the states file, or change "
                                         "[hedge] neutralise / keep / targets.")
    return state_data
