"""The walk-forward loop: at each rebalance date τ, estimate on data dated <= τ, then decide.

The overlay (:func:`hedgekit.hedge.design_overlay`) re-solves one compiled
:class:`hedgekit.hedge.OverlayProblem` at every date, trading from the overlay held before;
the estimates come batched from :class:`.estimators.DateEstimates`.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import InputError
from ..hedge import HedgeSpec, OverlayProblem, design_overlay
from .data import real_time_panel
from .estimators import DateEstimates
from .evaluate import evaluate, hold
from .result import BacktestResult
from .schedule import estimation_windows, rebalance_dates
from .settings import CONFIG_KEYS, BacktestSettings

__all__ = ["DecisionPath", "run_walk_forward"]

Progress = Callable[[int, int], None] | None


@dataclass(frozen=True)
class DecisionPath:
    """What was decided at each rebalance date: ``positions`` (date x instrument, weights of
    NAV), the predicted tracking error, turnover and cost of the trade, the status, the
    in-sample exposures before and after, and the prices of risk and premium given up when
    the objective prices exposures."""

    positions: pd.DataFrame
    predicted_te: pd.Series
    turnover: pd.Series
    cost: pd.Series
    status: pd.Series
    book_betas: pd.DataFrame
    hedged_betas: pd.DataFrame
    premia: pd.DataFrame | None
    premium_given_up: pd.Series | None


def run_walk_forward(state_data: pd.DataFrame, book_returns: pd.Series | pd.DataFrame,
                     instrument_returns: pd.DataFrame, sheet: pd.DataFrame, *,
                     spec: HedgeSpec, settings: BacktestSettings,
                     asset_returns: pd.DataFrame | None = None,
                     progress: Progress = None) -> BacktestResult:
    """Walk-forward re-estimation and hedge with ``settings``; see :mod:`hedgekit.backtest`."""
    if spec.premium_weight > 0 and asset_returns is None:
        key = CONFIG_KEYS["premium_weight"]
        raise InputError(f"{key} = {spec.premium_weight:g} prices the exposures, but no "
                         "test-asset returns were given to estimate the prices of risk at "
                         "each date.", fix=f"give [data] assets or set {key} = 0.")
    panel, warnings = real_time_panel(state_data, book_returns, instrument_returns, spec,
                                      settings)
    dates = rebalance_dates(panel, settings)
    windows = estimation_windows(panel, dates, settings.beta_window)
    estimates = DateEstimates(panel, dates, windows, spec, settings, asset_returns)
    path = decide(estimates, sheet, spec, settings, progress)
    unreachable = _unreachable_warning(path.status, settings.closest)
    held = hold(path, panel, settings, warnings)
    ev = evaluate(held, panel.factor_names, spec, settings, warnings)
    return BacktestResult(
        rebalance_dates=dates, decisions=path.positions, status=path.status,
        predicted_te_path=path.predicted_te, turnover_path=path.turnover,
        cost_path=path.cost, book_betas_path=path.book_betas,
        hedged_betas_path=path.hedged_betas, premia_path=path.premia,
        premium_given_up_path=path.premium_given_up, series=held,
        factors=panel.factor_names, neutralised=ev.neutralised,
        realised_exposure=ev.exposure, realised_exposure_se=ev.exposure_se,
        confidence=settings.confidence, effectiveness=ev.effectiveness,
        effectiveness_neutralised=ev.effectiveness_neutralised,
        effectiveness_by_factor=ev.effectiveness_by_factor,
        variance_reduction=ev.variance_reduction,
        realised_tracking_error=ev.realised_tracking_error,
        predicted_tracking_error=ev.predicted_tracking_error,
        turnover=float(path.turnover.sum()),
        turnover_annual=float(path.turnover.sum() / ev.years),
        costs_paid=float(path.cost.sum()), costs_paid_annual=float(path.cost.sum() / ev.years),
        nav=float(settings.nav), n_months=ev.n_periods,
        periods_per_year=int(settings.periods_per_year), n_periods=ev.n_periods,
        period_label=settings.unit, n_unreachable=int((path.status == "unreachable").sum()),
        settings=_settings_record(settings, spec, panel.lags, dates, held.index),
        warnings=tuple(unreachable + warnings), effectiveness_note=ev.effectiveness_note,
        sample=ev.sample,
    )


def decide(estimates: DateEstimates, sheet: pd.DataFrame, spec: HedgeSpec,
           settings: BacktestSettings, progress: Progress = None) -> DecisionPath:
    """One overlay per rebalance date, h_τ = argmin of the hedge program given the
    estimates at τ and the overlay h_τ- held before (one solver call per date)."""
    dates, instruments = estimates.dates, estimates.instruments
    factors = list(estimates.factor_index)
    problem = OverlayProblem.for_inputs(instruments, spec, sheet)
    n = len(dates)
    pos, before, after = (np.zeros((n, len(instruments))), np.zeros((n, len(factors))),
                          np.zeros((n, len(factors))))
    te, cost, given_up = np.zeros(n), np.zeros(n), np.full(n, np.nan)
    status: list[str] = []
    premia: list[pd.Series] = []
    h_prev = pd.Series(0.0, index=instruments)
    for i, tau in enumerate(dates):   # one solver call per rebalance; estimates are batched
        inputs = estimates.at(i)
        if "premia" in inputs:
            premia.append(inputs["premia"].rename(tau))
        res = design_overlay(inputs.pop("book_betas"), inputs.pop("instrument_betas"),
                             inputs.pop("cov"), sheet, nav=settings.nav, spec=spec,
                             current=h_prev, closest=settings.closest,
                             periods_per_year=settings.periods_per_year, problem=problem,
                             **inputs)
        h_prev = res.positions.reindex(instruments).fillna(0.0)
        pos[i], te[i] = h_prev.to_numpy(), res.tracking_error
        status.append(res.status)
        # the backtest holds the continuous weights h, so it pays the cost of that trade
        # (the hedge stage's ``cost`` is the whole-contract trade's; common practice here)
        unrounded = getattr(res, "cost_unrounded", None)
        cost[i] = res.cost if unrounded is None else unrounded
        before[i] = res.exposure_before.reindex(factors).to_numpy()
        after[i] = res.exposure_after.reindex(factors).to_numpy()
        if res.premium_given_up is not None:
            given_up[i] = res.premium_given_up
        if progress is not None:
            progress(i + 1, n)
    trades = np.abs(np.diff(pos, axis=0, prepend=0.0)).sum(axis=1)   # from zero at first
    return DecisionPath(
        positions=pd.DataFrame(pos, index=dates,
                               columns=pd.Index(instruments, name="instrument")),
        predicted_te=pd.Series(te, index=dates, name="predicted_tracking_error"),
        turnover=pd.Series(trades, index=dates, name="turnover"),
        cost=pd.Series(cost, index=dates, name="cost"),
        status=pd.Series(status, index=dates, name="status"),
        book_betas=pd.DataFrame(before, index=dates, columns=factors),
        hedged_betas=pd.DataFrame(after, index=dates, columns=factors),
        premia=pd.DataFrame(premia).rename_axis("date") if premia else None,
        premium_given_up=(pd.Series(given_up, index=dates, name="premium_given_up")
                          if np.isfinite(given_up).any() else None),
    )


def _unreachable_warning(status: pd.Series, closest: bool) -> list[str]:
    """First in the warnings: the run does not show the hedge that was asked for."""
    bad = status == "unreachable"
    if not bad.any():
        return []
    held = ("the closest reachable overlay was held" if closest
            else "no overlay was held at those dates")
    return [f"{int(bad.sum())} of {len(status)} rebalances could not reach the targets; "
            f"{held} (see status by date). The first was {status.index[bad.to_numpy()][0]}."]


def _settings_record(s: BacktestSettings, spec: HedgeSpec, lags: int,
                     dates: pd.PeriodIndex, oos: pd.PeriodIndex) -> dict[str, object]:
    return {
        "lags": lags, "min_periods": int(s.min_periods), "min_window": int(s.min_periods),
        "window": s.window, "beta_window": s.beta_window, "beta_min_obs": int(s.beta_min_obs),
        "rebalance": s.rebalance, "first_rebalance": str(dates[0]),
        "covariance_method": s.covariance_method, "objective": spec.objective,
        "closest": bool(s.closest),
        "first_month": str(oos[0]), "last_month": str(oos[-1]),
        "first_period": str(oos[0]), "last_period": str(oos[-1]),
        "periods_per_year": int(s.periods_per_year), "period_label": s.unit,
    }
