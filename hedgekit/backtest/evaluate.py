"""Holding the decisions and judging them on the periods after the first rebalance.

The overlay h_τ (weights of NAV, held constant over the holding period, a common practice
simplification) earns h_τ' r_{H,t} over τ+1 .. next rebalance; the cost of the trade is
paid in period τ+1.  On the out-of-sample periods:

* realised exposures b_u, b_h: OLS of the unhedged and hedged returns (book + overlay,
  gross of costs) on the real-time factors, HAC errors (Newey and West 1987, Econometrica);
* effectiveness on the state-driven P&L b' f_t: ``1 - b_h' S_f b_h / b_u' S_f b_u`` with
  S_f the sample covariance of the factors; ``effectiveness_neutralised`` restricts b and
  S_f to the neutralised factors;
* ``effectiveness_by_factor``: ``1 - b_h,f^2 / b_u,f^2`` for each neutralised factor, null
  (with the reason) where |b_u,f| <= :data:`NEAR_ZERO_T` se(b_u,f);
* realised tracking error sd(h' r_H) x sqrt(periods_per_year) against the predicted one,
  sqrt(mean over held periods of h_τ' Σ_H h_τ).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from ..errors import InputError
from ..exposures import time_series_betas
from ..hedge import HedgeSpec
from .data import RealTimePanel
from .settings import CONFIG_KEYS, BacktestSettings

if TYPE_CHECKING:
    from .walk import DecisionPath

__all__ = ["NEAR_ZERO_T", "Evaluation", "evaluate", "hold"]

#: An unhedged realised exposure within this many standard errors of zero has no
#: effectiveness percentage (``effectiveness_note`` says why); common practice.
NEAR_ZERO_T = 1.0


def hold(path: DecisionPath, panel: RealTimePanel, settings: BacktestSettings,
         warnings: list[str]) -> pd.DataFrame:
    """The period-by-period series after the first rebalance: ``book``, ``overlay``
    (h_τ' r_t, τ the last rebalance before t), ``cost`` (paid in τ+1), ``hedged``,
    ``hedged_net``, ``decision_date``, ``predicted_tracking_error`` and ``factor.<name>``."""
    periods, dates = panel.periods, path.positions.index

    def held(x: pd.DataFrame | pd.Series) -> pd.DataFrame | pd.Series:
        return x.reindex(periods).ffill().shift(1).loc[oos]

    oos = periods[periods > dates[0]]
    h, te_held = held(path.positions), held(path.predicted_te)
    decision_date = held(pd.Series(dates, index=dates))
    r_h = panel.instruments.loc[oos]
    missing_leg = (h.to_numpy() != 0) & ~np.isfinite(r_h.to_numpy())
    if missing_leg.any():
        k = int(missing_leg.any(axis=1).sum())
        warnings.append(f"{k} {settings.one if k == 1 else settings.unit} with a held "
                        "instrument's return missing: that leg counts as zero return.")
    overlay = (h * r_h.fillna(0.0)).sum(axis=1)
    cost = path.cost.reindex(periods).shift(1).reindex(oos).fillna(0.0)
    book = panel.book.loc[oos]
    series = pd.DataFrame({
        "book": book, "overlay": overlay, "cost": cost, "hedged": book + overlay,
        "hedged_net": book + overlay - cost, "decision_date": decision_date,
        "predicted_tracking_error": te_held,
    }, index=oos)
    series = pd.concat([series, panel.factors.loc[oos].add_prefix("factor.")], axis=1)
    series.index.name = "date"
    return series


@dataclass(frozen=True)
class Evaluation:
    """The out-of-sample figures of :func:`evaluate` (see the module docstring)."""

    exposure: pd.DataFrame
    exposure_se: pd.DataFrame
    effectiveness: float
    effectiveness_neutralised: float | None
    effectiveness_by_factor: pd.Series
    effectiveness_note: dict[str, str]
    neutralised: tuple[str, ...]
    variance_reduction: float
    realised_tracking_error: float
    predicted_tracking_error: float
    n_periods: int
    years: float
    sample: dict[str, Any]


def evaluate(series: pd.DataFrame, factors: tuple[str, ...], spec: HedgeSpec,
             settings: BacktestSettings, warnings: list[str]) -> Evaluation:
    """Realised exposures, effectiveness and tracking error on the held series."""
    f = series[[f"factor.{c}" for c in factors]].set_axis(list(factors), axis=1)
    use = series["book"].notna() & f.notna().all(axis=1)
    n = int(use.sum())
    if n < len(factors) + 2:
        raise InputError(f"only {n} out-of-sample {settings.one if n == 1 else settings.unit} "
                         f"to evaluate the hedge; {len(factors) + 2} are needed.",
                         fix=f"start earlier ({CONFIG_KEYS['start']}) or use a longer sample.")
    sides = pd.DataFrame({"unhedged": series["book"][use], "hedged": series["hedged"][use]})
    real = time_series_betas(sides, f[use], hac_lags=settings.hac_lags)
    b, se = real.betas.loc[["unhedged", "hedged"]], real.se_hac.loc[["unhedged", "hedged"]]
    bu, bh = b.loc["unhedged"].to_numpy(), b.loc["hedged"].to_numpy()
    s_f = np.cov(f[use].to_numpy().T, ddof=1)
    neutral = tuple(c for c in spec.neutralise if c in factors)
    j = [factors.index(c) for c in neutral]
    by_factor, note = effectiveness_by_factor(neutral, factors, bu, bh,
                                              se.loc["unhedged"].to_numpy())
    warnings += _negative_effectiveness(by_factor, factors, bu, bh)
    ppy = settings.periods_per_year
    te_held = series["predicted_tracking_error"].to_numpy()
    return Evaluation(
        exposure=b.rename_axis(None), exposure_se=se.rename_axis(None),
        effectiveness=_effectiveness(bu, bh, s_f),
        effectiveness_neutralised=(_effectiveness(bu[j], bh[j], s_f[np.ix_(j, j)])
                                   if neutral else None),
        effectiveness_by_factor=by_factor, effectiveness_note=note, neutralised=neutral,
        variance_reduction=1.0 - float(sides["hedged"].var(ddof=1)
                                       / sides["unhedged"].var(ddof=1)),
        realised_tracking_error=float(series["overlay"].std(ddof=1) * math.sqrt(ppy)),
        predicted_tracking_error=float(np.sqrt(np.mean(te_held ** 2))),
        n_periods=n, years=len(series) / ppy,
        sample={"first": str(sides.index[0]), "last": str(sides.index[-1]), "periods": n},
    )


def _effectiveness(bu: np.ndarray, bh: np.ndarray, s_f: np.ndarray) -> float:
    """``1 - b_h' S b_h / b_u' S b_u``: the share of state-driven P&L variance removed."""
    return 1.0 - float(bh @ s_f @ bh) / float(bu @ s_f @ bu)


def effectiveness_by_factor(neutral: tuple[str, ...], factors: tuple[str, ...],
                            bu: np.ndarray, bh: np.ndarray, se_u: np.ndarray
                            ) -> tuple[pd.Series, dict[str, str]]:
    """``1 - b_h,f^2 / b_u,f^2`` for each neutralised factor; NaN with a reason where the
    unhedged exposure is within ``NEAR_ZERO_T`` standard errors of zero."""
    j = [factors.index(f) for f in neutral]
    u, h, s = bu[j], bh[j], se_u[j]
    near_zero = ~(np.abs(u) > NEAR_ZERO_T * np.where(np.isfinite(s), s, np.inf))
    with np.errstate(divide="ignore", invalid="ignore"):
        eff = np.where(near_zero, np.nan, 1.0 - h ** 2 / u ** 2)
    note = {f: (f"the unhedged exposure out of sample ({u[k]:.4f}, se {s[k]:.4f}) is within "
                f"{NEAR_ZERO_T:g} standard error of zero: there was no exposure to reduce, so "
                "no percentage is given.")
            for k, f in enumerate(neutral) if near_zero[k]}
    return pd.Series(eff, index=list(neutral), name="effectiveness", dtype=float), note


def _negative_effectiveness(eff: pd.Series, factors: tuple[str, ...], bu: np.ndarray,
                            bh: np.ndarray) -> list[str]:
    """A warning for each neutralised factor the hedge made worse out of sample."""
    return [f"out of sample the hedge of {f} made that exposure larger: effectiveness "
            f"{100 * e:.1f} % (unhedged {bu[factors.index(f)]:.4f}, hedged "
            f"{bh[factors.index(f)]:.4f})." for f, e in eff.items() if e < 0]
