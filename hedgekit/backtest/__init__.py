"""Walk-forward check of the overlay hedge, with no look-ahead (methods.md section 5).

The package along its seams: :mod:`.settings` (one frozen record of every setting),
:mod:`.data` (real-time factors and returns on one calendar), :mod:`.schedule` (rebalance
dates and estimation windows), :mod:`.estimators` (betas, covariances and prices of risk
at each date, from :mod:`hedgekit.windows`), :mod:`.walk` (the loop of decisions),
:mod:`.evaluate` (holding and out-of-sample evaluation), :mod:`.result`.

At each rebalance date τ (quarter ends by default, or every month) and with data dated
≤ τ only:

1. real-time factors f_t = [market excess return, ũ_2, ..., ũ_K] for t ≤ τ, where row t
   is the one-step forecast error of the VAR fitted through t-1, orthogonalised with that
   fit's M (:func:`hedgekit.states.realtime_innovations`);
2. time-series OLS betas of the book and of each instrument on those factors (expanding,
   or the last ``beta_window`` factor periods), each series on its own valid periods, and the
   annualised sample covariance of the instruments (listwise, divisor n - 1).  These come
   for every rebalance date at once from the running-window moments of
   :func:`hedgekit.windows.window_moments` (a batched solve; the tests check them against
   :func:`hedgekit.exposures.time_series_betas` and
   :func:`hedgekit.hedge.instrument_covariance` on each window).  The robust overlay (which
   needs HAC errors) and the Ledoit-Wolf covariance call those stage functions per date.
   When the objective prices exposures, Fama-MacBeth prices of risk on the test assets
   (:func:`hedgekit.premia.fama_macbeth`) are re-estimated at each date too;
3. the overlay (:func:`hedgekit.hedge.design_overlay`) re-solving one compiled
   :class:`hedgekit.hedge.OverlayProblem`, trading from the overlay held before.

The overlay h_τ (weights of NAV, held constant over the holding period, a common practice
simplification) earns h_τ' r_{H,t} over τ+1 .. next rebalance; the cost of the trade is
paid in period τ+1.  "Period" is a month for monthly data and a quarter for quarterly data
(``periods_per_year`` 12 or 4); every window length (``min_periods``, ``window``,
``beta_window``, ``beta_min_obs``) counts periods, and the result's ``period_label`` says
which word applies.  Every estimate at τ is computed on data sliced at τ, so changing any
value dated after τ cannot change the decision made at τ (the tests check this to the bit).

Evaluation, on the out-of-sample periods (after the first rebalance):

* realised exposures: OLS of the unhedged and hedged returns (book + overlay, gross of
  costs) on the real-time factors of those periods, HAC errors (Newey and West 1987,
  Econometrica), normal intervals at ``confidence`` (the spec's by default);
* hedge effectiveness on the state-driven P&L b' f_t:
  ``1 - b_h' S_f b_h / b_u' S_f b_u`` with S_f the sample covariance of the out-of-sample
  factors and b_u, b_h the realised exposures; ``effectiveness_neutralised`` restricts b
  and S_f to the neutralised factors (the figure a hedge of those factors should move);
* realised tracking error sd(h' r_H) × sqrt(periods_per_year) against the predicted one,
  sqrt(mean over held periods of h_τ' Σ_H h_τ) (annualised);
* ``effectiveness_by_factor``: 1 - b_h,f^2 / b_u,f^2 for each neutralised factor f; null,
  with the reason in ``effectiveness_note``, where the denominator is near zero: the
  unhedged realised exposure lies within :data:`NEAR_ZERO_T` (1) standard error of zero
  (|b_u,f| <= se(b_u,f), HAC), so there was no exposure to reduce and a percentage would
  be noise (common practice).  A negative figure (the hedge made that exposure larger out
  of sample) is called out in ``warnings`` naming the factor;
  ``variance_reduction``: 1 - var(hedged) / var(unhedged) of the realised returns;
* turnover sum |h_τ - h_τ-| (the first build from zero included) and costs paid
  sum_j c_j |h_τ,j - h_τ-,j|, in total and per year, as fractions of NAV.

Targets a rebalance cannot reach (``status`` "unreachable") are counted in
``n_unreachable`` and reported first in ``warnings``: the run then shows the closest
reachable overlay (``closest=True``) or none, not the hedge that was asked for.

Messages about settings name the configuration key as the user writes it
(``[backtest] start``, ``[exposures] window``, ...; :data:`CONFIG_KEYS`).
"""

from __future__ import annotations

from collections.abc import Callable

import pandas as pd

from ..hedge import HedgeSpec
from ..inference import DEFAULT_CONFIDENCE
from .evaluate import NEAR_ZERO_T
from .result import BacktestResult
from .schedule import rebalance_schedule
from .settings import CONFIG_KEYS, BacktestSettings, period_words
from .walk import run_walk_forward

__all__ = ["CONFIG_KEYS", "NEAR_ZERO_T", "BacktestResult", "BacktestSettings", "period_words",
           "rebalance_schedule", "run_walk_forward", "walk_forward"]


def walk_forward(state_data: pd.DataFrame, book_returns: pd.Series | pd.DataFrame,
                 instrument_returns: pd.DataFrame, sheet: pd.DataFrame, *, spec: HedgeSpec,
                 asset_returns: pd.DataFrame | None = None,
                 progress: Callable[[int, int], None] | None = None,
                 confidence: float | None = None, min_window: int | None = None,
                 **settings: object) -> BacktestResult:
    """Walk-forward re-estimation and hedge: :func:`run_walk_forward` with the settings as
    keywords (the fields of :class:`BacktestSettings`: ``nav``, ``lags``, ``min_periods``,
    ``window``, ``beta_window``, ``beta_min_obs``, ``rebalance``, ``start``,
    ``periods_per_year``, ``covariance_method``, ``hac_lags``, ``nw_lags``,
    ``premia_intercept``, ``closest``, ``market``).

    ``state_data``: market excess return then state levels (orthogonalisation order),
    PeriodIndex; ``market`` names the market column, moved first.  ``min_window`` is
    ``min_periods`` under its earlier name.  ``confidence`` defaults to the spec's level (else
    0.95).  ``asset_returns`` (test assets) are needed when ``spec.premium_weight > 0``.
    ``progress(i, n)`` is called after each decision.
    """
    if min_window is not None:
        settings["min_periods"] = min_window
    level = getattr(spec, "confidence", DEFAULT_CONFIDENCE) if confidence is None else confidence
    return run_walk_forward(state_data, book_returns, instrument_returns, sheet, spec=spec,
                            settings=BacktestSettings(confidence=level, **settings),
                            asset_returns=asset_returns, progress=progress)
