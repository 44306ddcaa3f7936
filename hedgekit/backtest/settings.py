"""The walk-forward's settings: one frozen record, checked once, with the configuration key
behind each field (messages name the key as the user writes it)."""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from ..errors import InputError
from ..inference import DEFAULT_CONFIDENCE, check_level

__all__ = ["CONFIG_KEYS", "BacktestSettings", "period_words"]

#: The configuration key behind each setting of :class:`BacktestSettings`, as messages name it.
CONFIG_KEYS: dict[str, str] = {
    "nav": "[portfolio] nav",
    "lags": "[states] lags",
    "min_periods": "[backtest] min_periods",
    "window": "[backtest] window",
    "beta_window": "[exposures] window",
    "beta_min_obs": "[exposures] min_obs",
    "rebalance": "[backtest] rebalance",
    "start": "[backtest] start",
    "premium_weight": "[hedge] premium_weight",
    "covariance_method": "[hedge] covariance",
    "confidence": "[intervals] confidence",
}


def period_words(periods_per_year: int) -> tuple[str, str]:
    """(singular, plural) word for one period: month(s) at 12 a year, quarter(s) at 4."""
    return {12: ("month", "months"), 4: ("quarter", "quarters")}.get(
        int(periods_per_year), ("period", "periods"))


def _whole(value: object) -> bool:
    return isinstance(value, int | np.integer) and not isinstance(value, bool)


@dataclass(frozen=True)
class BacktestSettings:
    """Every setting of the walk-forward (the data, the hedge spec and a progress callback
    are passed beside it).  Window lengths count periods (months for monthly data, quarters
    for quarterly; ``periods_per_year`` 12 or 4):

    ``min_periods`` periods of the first VAR fit; ``window`` the rolling VAR window (None:
    expanding); ``beta_window`` the rolling window of betas and covariance (None:
    expanding); ``beta_min_obs`` the periods of real-time factors every series needs before
    the first decision.  ``rebalance`` "quarterly" or "monthly"; ``start`` a later first
    rebalance; ``covariance_method`` of :func:`hedgekit.hedge.instrument_covariance`;
    ``hac_lags`` / ``nw_lags`` of the exposures and premia stages; ``premia_intercept``;
    ``closest`` holds the closest reachable overlay at an unreachable date; ``confidence``
    the level of every interval; ``market`` the market column of the state data.
    """

    nav: float
    lags: int | str = 1
    min_periods: int = 120
    window: int | None = None
    beta_window: int | None = None
    beta_min_obs: int = 36
    rebalance: str = "quarterly"
    start: object = None
    periods_per_year: int = 12
    covariance_method: str = "sample"
    hac_lags: int | str = "auto"
    nw_lags: int | str = "auto"
    premia_intercept: bool = True
    closest: bool = True
    confidence: float = DEFAULT_CONFIDENCE
    market: str | None = None

    def __post_init__(self) -> None:
        key = CONFIG_KEYS
        if not (_whole(self.periods_per_year) and self.periods_per_year > 0):
            raise InputError(f"periods_per_year must be a positive whole number, got "
                             f"{self.periods_per_year!r}.",
                             fix="use 12 for monthly data, 4 for quarterly.")
        unit = self.unit
        if not (isinstance(self.nav, int | float) and math.isfinite(self.nav) and self.nav > 0):
            raise InputError(f"{key['nav']} = {self.nav!r}: the NAV must be a positive number.",
                             fix="set it to the book's value in currency units.")
        for name in ("min_periods", "beta_min_obs"):
            value = getattr(self, name)
            if not _whole(value) or value < 1:
                raise InputError(f"{key[name]} = {value!r} must be a positive whole number of "
                                 f"{unit}.", fix=f"use e.g. 120 ({key['min_periods']}) or 36 "
                                                 f"({key['beta_min_obs']}).")
        if self.window is not None and (not _whole(self.window) or self.window < 1):
            raise InputError(f"{key['window']} = {self.window!r} must be a positive whole "
                             f"number of {unit}.", fix="use e.g. 120, or 'expanding'.")
        if self.beta_window is not None and (not isinstance(self.beta_window, int | np.integer)
                                             or self.beta_window < self.beta_min_obs):
            raise InputError(f"{key['beta_window']} = {self.beta_window!r} must be a whole "
                             f"number of at least {key['beta_min_obs']} = {self.beta_min_obs} "
                             f"{unit}.", fix="use e.g. 60, or 'full' for an expanding window.")
        try:
            check_level(self.confidence)
        except (TypeError, ValueError):
            raise InputError(f"{key['confidence']} = {self.confidence!r} must lie in "
                             "[0.5, 1).", fix="use for example 0.95.") from None

    @property
    def unit(self) -> str:
        """The plural word for one period ("months", "quarters")."""
        return period_words(self.periods_per_year)[1]

    @property
    def one(self) -> str:
        """The singular word for one period ("month", "quarter")."""
        return period_words(self.periods_per_year)[0]

    def as_dict(self) -> dict[str, object]:
        return asdict(self)
