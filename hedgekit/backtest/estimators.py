"""The walk-forward's estimates at each rebalance date τ, on data dated <= τ only.

* Time-series OLS betas of the book and of each instrument on the real-time factors,
  ``b = (X'X)^{-1} X'y`` with ``X = [1, f]``, each series over its own valid periods of the
  window (the estimator of :func:`hedgekit.exposures.time_series_betas`);
* the sample covariance of the instruments, listwise, divisor n - 1,
  ``(S_zz - s_z s_z' / n) / (n - 1)`` (as :func:`hedgekit.hedge.instrument_covariance`),
  annualised by ``periods_per_year``; with the ``total`` objective the same for the book
  and the instruments together;
* Fama-MacBeth prices of risk on the test assets (:func:`hedgekit.premia.fama_macbeth`)
  when the objective prices exposures.

Betas and covariances come for every date at once from the running-window moments of
:func:`hedgekit.windows.window_moments` (one batched solve); running sums only add earlier
rows, so an estimate at τ does not depend on any later row, to the bit.  The robust
overlay (which needs HAC errors) and the Ledoit-Wolf covariance call the stage functions
on each date's window instead.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from ..errors import InputError
from ..exposures import time_series_betas
from ..hedge import HedgeSpec, instrument_covariance
from ..premia import fama_macbeth
from ..windows import window_moments
from .data import BOOK, RealTimePanel
from .settings import CONFIG_KEYS, BacktestSettings

__all__ = ["DateEstimates", "prices_of_risk", "window_betas", "window_cov"]


def window_betas(y: np.ndarray, f: np.ndarray, starts: np.ndarray, ends: np.ndarray
                 ) -> tuple[np.ndarray, np.ndarray]:
    """OLS slopes of each column of ``y`` on ``[1, f]`` over rows ``[start, end)`` of every
    date, each column over its own valid rows: ``b = (X'X)^{-1} X'y`` from the window sums.
    Returns slopes (D, N, K) (NaN where a series has fewer than K + 2 rows) and the valid
    row counts (D, N)."""
    mask = np.isfinite(y)
    x = np.column_stack([np.ones(len(f)), f])
    mom = window_moments(x, y, mask=mask, starts=starts, ends=ends)
    p = x.shape[1]
    ok = mom.count >= p + 1
    xx = np.where(ok[..., None, None], mom.sxx, np.eye(p))
    coef = np.linalg.solve(xx, mom.sxy[..., None])[..., 0]
    coef[~ok] = np.nan
    return coef[..., 1:], mom.count


def window_cov(z: np.ndarray, starts: np.ndarray, ends: np.ndarray
               ) -> tuple[np.ndarray, np.ndarray]:
    """Sample covariance (divisor n - 1) over the rows of ``[start, end)`` where every
    column is present, for every date: ``(S_zz - s_z s_z' / n) / (n - 1)``.  Returns (D, H, H)
    covariances and the counts (D,)."""
    mom = window_moments(z, mask=np.isfinite(z).all(axis=1), starts=starts, ends=ends)
    n = mom.count.astype(float)[:, None, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        cov = mom.centred_xx() / (n - 1)
    return 0.5 * (cov + np.transpose(cov, (0, 2, 1))), mom.count


def prices_of_risk(asset_returns: pd.DataFrame, factors: pd.DataFrame, *,
                   nw_lags: int | str, intercept: bool) -> pd.Series:
    """Fama-MacBeth prices of risk on the window: betas of the test assets over the window,
    then one cross-section per period (Fama and MacBeth 1973, JPE; hedgekit.premia)."""
    r = asset_returns.apply(pd.to_numeric, errors="coerce").astype(float).reindex(factors.index)
    betas = time_series_betas(r, factors).betas.dropna()
    res = fama_macbeth(r[betas.index], betas, factors=factors, intercept=intercept,
                       nw_lags=nw_lags)
    return res.lambda_


class DateEstimates:
    """The overlay's inputs at each rebalance date: batched once, read by :meth:`at`."""

    def __init__(self, panel: RealTimePanel, dates: pd.PeriodIndex, windows: tuple,
                 spec: HedgeSpec, settings: BacktestSettings,
                 asset_returns: pd.DataFrame | None) -> None:
        self.panel, self.dates, self.spec, self.settings = panel, dates, spec, settings
        self.asset_returns = asset_returns
        self.rows, self.starts, self.ends = windows
        self.instruments = panel.instrument_names
        self.factor_index = pd.Index(panel.factor_names, name="factor")
        self.per_date = spec.robust          # HAC errors per date come from the exposures stage
        returns = panel.returns.to_numpy(dtype=float)[self.rows]
        if not self.per_date:
            f = panel.factors.to_numpy(dtype=float)[self.rows]
            self.betas = self._checked_betas(*window_betas(returns, f, self.starts, self.ends))
        if settings.covariance_method == "sample":
            self.instrument_cov = self._checked_cov(returns[:, 1:])
        if spec.objective == "total":
            self.returns_cov = window_cov(returns, self.starts, self.ends)[0]

    def at(self, i: int) -> dict[str, Any]:
        """Keyword inputs of :func:`hedgekit.hedge.design_overlay` at the i-th date: the book's
        and the instruments' betas, their annualised covariance and what the objective adds."""
        rows = self.rows[self.starts[i]:self.ends[i]]
        ppy = self.settings.periods_per_year
        out: dict[str, Any] = self._betas_at(i, rows)
        if self.settings.covariance_method == "sample":
            out["cov"] = pd.DataFrame(self.instrument_cov[i] * ppy, index=self.instruments,
                                      columns=self.instruments)
        else:
            out["cov"] = instrument_covariance(self.panel.instruments.iloc[rows],
                                               periods_per_year=ppy,
                                               method=self.settings.covariance_method)
        if self.spec.objective == "total":
            c = self.returns_cov[i] * ppy
            out["book_variance"] = float(c[0, 0])
            out["book_instrument_cov"] = pd.Series(c[0, 1:], index=self.instruments)
        if self.spec.premium_weight > 0:
            out["premia"] = prices_of_risk(self.asset_returns, self.panel.factors.iloc[rows],
                                           nw_lags=self.settings.nw_lags,
                                           intercept=self.settings.premia_intercept)
        return out

    def _betas_at(self, i: int, rows: np.ndarray) -> dict[str, Any]:
        if not self.per_date:
            return {"book_betas": pd.Series(self.betas[i, 0], index=self.factor_index),
                    "instrument_betas": pd.DataFrame(self.betas[i, 1:], index=self.instruments,
                                                     columns=self.factor_index)}
        est = time_series_betas(self.panel.returns.iloc[rows], self.panel.factors.iloc[rows],
                                hac_lags=self.settings.hac_lags)
        short = est.betas.isna().any(axis=1) | (est.n_obs < self.settings.beta_min_obs)
        if short.to_numpy().any():
            who = str(est.betas.index[short.to_numpy()][0])
            raise InputError(f"no betas for '{who if who != BOOK else 'the book'}' at "
                             f"{self.dates[i]}.", row=str(self.dates[i]),
                             file="portfolio_returns" if who == BOOK else "instruments",
                             column=None if who == BOOK else who,
                             fix=f"start later ({CONFIG_KEYS['start']}) or supply more "
                                 "history for that series.")
        return {"book_betas": est.betas.loc[BOOK],
                "instrument_betas": est.betas.loc[self.instruments],
                "book_se": est.se_hac.loc[BOOK],
                "instrument_se": est.se_hac.loc[self.instruments]}

    def _checked_betas(self, coef: np.ndarray, counts: np.ndarray) -> np.ndarray:
        bad = counts < max(int(self.settings.beta_min_obs), len(self.factor_index) + 2)
        bad |= ~np.isfinite(coef).all(axis=2)
        if bad.any():
            d, j = np.argwhere(bad)[0]
            who = "the book" if j == 0 else self.instruments[j - 1]
            raise InputError(f"too few {self.settings.unit} to estimate the betas of {who} at "
                             f"{self.dates[d]}.",
                             file="portfolio_returns" if j == 0 else "instruments",
                             row=str(self.dates[d]), column=None if j == 0 else who,
                             fix=f"start later ({CONFIG_KEYS['start']}), widen "
                                 f"{CONFIG_KEYS['beta_window']} or supply more history.")
        return coef

    def _checked_cov(self, returns: np.ndarray) -> np.ndarray:
        cov, n = window_cov(returns, self.starts, self.ends)
        if (n < 2).any():
            d = int(np.flatnonzero(n < 2)[0])
            raise InputError(f"fewer than 2 {self.settings.unit} where every instrument has a "
                             f"return at {self.dates[d]}.", row=str(self.dates[d]),
                             file="instruments",
                             fix=f"start later ({CONFIG_KEYS['start']}) or fill the instrument "
                                 "returns.")
        return cov
