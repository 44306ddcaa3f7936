"""Walk-forward check of the overlay hedge, with no look-ahead (methods.md section 5).

At each rebalance date τ (quarter ends by default, or every month) and with data dated
≤ τ only:

1. real-time factors f_t = [market excess return, ũ_2, ..., ũ_K] for t ≤ τ, where row t
   is the one-step forecast error of the VAR fitted through t-1, orthogonalised with that
   fit's M (:func:`hedgekit.states.realtime_innovations`);
2. time-series OLS betas of the book and of each instrument on those factors (expanding,
   or the last ``beta_window`` factor periods), each series on its own valid periods, and the
   annualised sample covariance of the instruments (listwise, divisor n - 1).  These come
   for every rebalance date at once from running sums of cross-products (a batched solve;
   the tests check them against :func:`hedgekit.exposures.time_series_betas` and
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

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from .errors import InputError
from .exposures import time_series_betas
from .hedge import HedgeSpec, OverlayProblem, design_overlay, instrument_covariance
from .inference import DEFAULT_CONFIDENCE, check_level, interval, interval_pairs, level_label
from .jsonable import jsonable
from .premia import fama_macbeth
from .states import realtime_innovations

__all__ = ["CONFIG_KEYS", "NEAR_ZERO_T", "BacktestResult", "period_words", "rebalance_schedule",
           "walk_forward"]

_BOOK = "__book__"

#: The configuration key behind each keyword of :func:`walk_forward`, as messages name it.
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

#: An unhedged realised exposure within this many standard errors of zero has no
#: effectiveness percentage (``effectiveness_note`` says why); common practice.
NEAR_ZERO_T = 1.0


def period_words(periods_per_year: int) -> tuple[str, str]:
    """(singular, plural) word for one period: month(s) at 12 a year, quarter(s) at 4."""
    return {12: ("month", "months"), 4: ("quarter", "quarters")}.get(
        int(periods_per_year), ("period", "periods"))



def _frame_dict(frame: pd.DataFrame) -> dict[str, dict[str, Any]]:
    return {str(i): {str(c): jsonable(v) for c, v in row.items()} for i, row in frame.iterrows()}


@dataclass(frozen=True)
class BacktestResult:
    """Walk-forward decisions, the period-by-period series and their evaluation.

    ``decisions``: rebalance date × instrument (weights of NAV); ``status``,
    ``predicted_te_path`` (annualised), ``turnover_path`` and ``cost_path`` (fractions of
    NAV) by rebalance date; ``book_betas_path`` and ``hedged_betas_path`` the in-sample
    exposures at each decision; ``premia_path`` (prices of risk per period) and
    ``premium_given_up_path`` (annualised) when the objective prices exposures.  ``series``
    (period × column) holds ``book``, ``overlay``,
    ``cost``, ``hedged`` (book + overlay), ``hedged_net`` (less cost), ``decision_date`` and
    the out-of-sample factors as ``factor.<name>``.  ``realised_exposure`` and
    ``realised_exposure_se`` have rows ``unhedged`` and ``hedged``.

    ``n_periods`` is the number of out-of-sample periods evaluated and ``period_label``
    their word ("months" or "quarters", from ``periods_per_year``); ``n_months`` is the
    same count, kept under its old name for compatibility.  ``n_unreachable`` counts the
    rebalance dates whose targets could not be reached.  ``effectiveness_by_factor`` has
    one entry per neutralised factor (NaN where ``effectiveness_note`` says why there is
    no figure); ``sample`` spans the out-of-sample periods evaluated.
    """

    rebalance_dates: pd.PeriodIndex
    decisions: pd.DataFrame
    status: pd.Series
    predicted_te_path: pd.Series
    turnover_path: pd.Series
    cost_path: pd.Series
    book_betas_path: pd.DataFrame
    hedged_betas_path: pd.DataFrame
    premia_path: pd.DataFrame | None
    premium_given_up_path: pd.Series | None
    series: pd.DataFrame
    factors: tuple[str, ...]
    neutralised: tuple[str, ...]
    realised_exposure: pd.DataFrame
    realised_exposure_se: pd.DataFrame
    confidence: float
    effectiveness: float
    effectiveness_neutralised: float | None
    effectiveness_by_factor: pd.Series
    variance_reduction: float
    realised_tracking_error: float
    predicted_tracking_error: float
    turnover: float
    turnover_annual: float
    costs_paid: float
    costs_paid_annual: float
    nav: float
    n_months: int
    periods_per_year: int
    n_periods: int
    period_label: str
    n_unreachable: int
    settings: dict[str, Any]
    warnings: tuple[str, ...] = field(default_factory=tuple)
    effectiveness_note: dict[str, str] = field(default_factory=dict)
    sample: dict[str, Any] | None = None

    def interval(self, which: str = "hedged", level: float | None = None) -> pd.DataFrame:
        """Realised exposure (rows beta, se, lo, hi) at ``level`` (default ``confidence``)
        for one side, "unhedged" or "hedged"."""
        b, s = self.realised_exposure.loc[which], self.realised_exposure_se.loc[which]
        lo, hi = interval(b, s, self.confidence if level is None else level)
        return pd.DataFrame({"beta": b, "se": s, "lo": lo, "hi": hi}).T

    def conf_int(self, level: float | None = None, side: str = "hedged") -> pd.DataFrame:
        """Realised exposure interval, statsmodels-style: factors x (``low``, ``high``)."""
        ci = self.interval(side, level)
        return pd.DataFrame({"low": ci.loc["lo"], "high": ci.loc["hi"]})

    def to_frame(self) -> pd.DataFrame:
        """The period-by-period series (what ``--out`` writes as CSV)."""
        return self.series.copy()

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict: the contract keys of interface.md plus the evaluation extras."""
        dates = [str(d) for d in self.rebalance_dates]
        decisions = {str(d): {str(i): jsonable(v) for i, v in row.items()}
                     for d, row in self.decisions.iterrows()}
        series = self.series.copy()
        series["decision_date"] = series["decision_date"].astype(str).replace("NaT", None)
        intervals = {side: _frame_dict(self.interval(side).T) for side in ("unhedged", "hedged")}
        covers = {f: bool(intervals["hedged"][f]["lo"] <= 0.0 <= intervals["hedged"][f]["hi"])
                  if intervals["hedged"][f]["lo"] is not None else None for f in self.factors}
        return jsonable({
            "rebalance_dates": dates,
            "decisions": decisions,
            "effectiveness": self.effectiveness,
            "realised_tracking_error": self.realised_tracking_error,
            "predicted_tracking_error": self.predicted_tracking_error,
            "effectiveness_neutralised": self.effectiveness_neutralised,
            "effectiveness_by_factor": self.effectiveness_by_factor.to_dict(),
            "effectiveness_note": dict(self.effectiveness_note),
            "variance_reduction": self.variance_reduction,
            "factors": list(self.factors),
            "neutralised": list(self.neutralised),
            "confidence": self.confidence,
            "level_label": level_label(self.confidence),
            "sample": self.sample,
            "realised_exposure": _frame_dict(self.realised_exposure),
            "realised_exposure_se": _frame_dict(self.realised_exposure_se),
            "realised_exposure_interval": intervals,
            "realised_exposure_interval_pairs": {
                side: interval_pairs(self.realised_exposure.loc[side],
                                     self.realised_exposure_se.loc[side], self.confidence)
                for side in ("unhedged", "hedged")},
            "hedged_interval_covers_zero": covers,
            "status": {str(d): s for d, s in self.status.items()},
            "predicted_tracking_error_by_date": {str(d): v for d, v in
                                                 self.predicted_te_path.items()},
            "turnover": self.turnover,
            "turnover_annual": self.turnover_annual,
            "turnover_by_date": {str(d): v for d, v in self.turnover_path.items()},
            "costs_paid": self.costs_paid,
            "costs_paid_currency": self.costs_paid * self.nav,
            "costs_paid_annual": self.costs_paid_annual,
            "costs_by_date": {str(d): v for d, v in self.cost_path.items()},
            "book_betas_by_date": _frame_dict(self.book_betas_path),
            "hedged_betas_by_date": _frame_dict(self.hedged_betas_path),
            "premia_by_date": None if self.premia_path is None
            else _frame_dict(self.premia_path),
            "premium_given_up_by_date": None if self.premium_given_up_path is None
            else {str(d): v for d, v in self.premium_given_up_path.items()},
            "n_months": self.n_months,
            "n_periods": self.n_periods,
            "period_label": self.period_label,
            "periods_per_year": self.periods_per_year,
            "n_unreachable": self.n_unreachable,
            "n_rebalances": len(self.rebalance_dates),
            "nav": self.nav,
            "settings": self.settings,
            "series": {"dates": [str(d) for d in series.index],
                       **{str(c): series[c].tolist() for c in series.columns}},
            "warnings": list(self.warnings),
        })


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


def _to_period(value: Any, freq: str, what: str) -> pd.Period:
    try:
        return pd.Period(value, freq=freq)
    except (TypeError, ValueError):
        example = "YYYYQn, e.g. '2005Q1'" if freq.startswith("Q") else "YYYY-MM, e.g. '2005-03'"
        raise InputError(f"{CONFIG_KEYS.get(what, what)} = '{value}' is not a date.",
                         fix=f"write it as {example}.") from None


def walk_forward(state_data: pd.DataFrame, book_returns: pd.Series | pd.DataFrame,
                 instrument_returns: pd.DataFrame, sheet: pd.DataFrame, *, spec: HedgeSpec,
                 nav: float, lags: int | str = 1, min_periods: int = 120,
                 window: int | None = None, beta_window: int | None = None,
                 beta_min_obs: int = 36, rebalance: str = "quarterly",
                 start: str | pd.Period | None = None, periods_per_year: int = 12,
                 covariance_method: str = "sample", hac_lags: int | str = "auto",
                 asset_returns: pd.DataFrame | None = None, nw_lags: int | str = "auto",
                 premia_intercept: bool = True,
                 closest: bool = True, confidence: float | None = None,
                 progress: Callable[[int, int], None] | None = None,
                 market: str | None = None, min_window: int | None = None) -> BacktestResult:
    """Walk-forward re-estimation and hedge; see the module docstring for every step.

    ``state_data``: market excess return then state levels (orthogonalisation order),
    PeriodIndex; ``market`` (optional) names the market column, which is then moved first,
    and must be a column of ``state_data`` (the VAR is re-estimated at every date, so a
    factors file cannot stand in for the states).  All window lengths count periods
    (months for monthly data, quarters for quarterly; ``periods_per_year`` 12 or 4).
    ``min_periods``: periods of the first VAR fit (``[backtest] min_periods``; ``min_window``
    is the same setting under its earlier name); ``window``:
    rolling VAR window (None = expanding from ``min_periods``); ``beta_window``: rolling
    window of betas and covariance (None = expanding).  The first rebalance (default) is
    the first quarter end at which the VAR has ``min_periods`` periods and the real-time
    factors give the book and every instrument ``beta_min_obs`` periods; ``start`` moves
    it later.  ``asset_returns`` (test assets) are needed when
    ``spec.premium_weight > 0`` (Fama-MacBeth prices of risk at each date).  With
    ``closest=True`` an unreachable date holds the closest reachable overlay (status
    ``"unreachable"`` in ``status``).  ``progress(i, n)`` is called after each decision.
    """
    key = CONFIG_KEYS
    if not (isinstance(periods_per_year, int | np.integer) and periods_per_year > 0):
        raise InputError(f"periods_per_year must be a positive whole number, got "
                         f"{periods_per_year!r}.", fix="use 12 for monthly data, 4 for quarterly.")
    one, unit = period_words(periods_per_year)
    if not (isinstance(nav, int | float) and math.isfinite(nav) and nav > 0):
        raise InputError(f"{key['nav']} = {nav!r}: the NAV must be a positive number.",
                         fix="set it to the book's value in currency units.")
    if min_window is not None:
        min_periods = min_window
    for name, value in (("min_periods", min_periods), ("beta_min_obs", beta_min_obs)):
        if not isinstance(value, int | np.integer) or isinstance(value, bool) or value < 1:
            raise InputError(f"{key[name]} = {value!r} must be a positive whole number of "
                             f"{unit}.", fix=f"use e.g. 120 ({key['min_periods']}) or 36 "
                                                     f"({key['beta_min_obs']}).")
    if window is not None and (not isinstance(window, int | np.integer)
                               or isinstance(window, bool) or window < 1):
        raise InputError(f"{key['window']} = {window!r} must be a positive whole number of "
                         f"{unit}.", fix="use e.g. 120, or 'expanding'.")
    if beta_window is not None and (not isinstance(beta_window, int | np.integer)
                                    or beta_window < beta_min_obs):
        raise InputError(f"{key['beta_window']} = {beta_window!r} must be a whole number of "
                         f"at least {key['beta_min_obs']} = {beta_min_obs} {unit}.",
                         fix="use e.g. 60, or 'full' for an expanding window.")
    if not isinstance(instrument_returns, pd.DataFrame) or instrument_returns.shape[1] == 0:
        raise InputError("instrument returns must be a non-empty table.", file="instruments",
                         fix="one column of excess returns per hedge instrument.")
    if spec.premium_weight > 0 and asset_returns is None:
        raise InputError(f"{key['premium_weight']} = {spec.premium_weight:g} prices the "
                         "exposures, but no test-asset returns were given to estimate the "
                         "prices of risk at each date.",
                         fix=f"give [data] assets or set {key['premium_weight']} = 0.")
    state_data = _market_first(state_data, market, spec)
    conf = getattr(spec, "confidence", DEFAULT_CONFIDENCE) if confidence is None else confidence
    try:
        conf = check_level(conf)
    except (TypeError, ValueError):
        raise InputError(f"{key['confidence']} = {conf!r} must lie in [0.5, 1).",
                         fix="use for example 0.95.") from None
    warnings: list[str] = []

    if isinstance(state_data, pd.DataFrame):
        have = int(state_data.notna().all(axis=1).sum())
        first_fit = int(window if window is not None else min_periods)
        need = first_fit + (lags if isinstance(lags, int) else 1) + 1
        if have < need:
            which = key["window"] if window is not None else key["min_periods"]
            raise InputError(f"{which} = {first_fit}: the state data have only {have} complete "
                             f"{unit}, fewer than the {need} a first VAR fit on {first_fit} "
                             f"{unit} and one forecast need.",
                             file=state_data.attrs.get("file", "states"),
                             fix=f"lower {which} or use a longer sample.")
    rt = realtime_innovations(state_data, lags=lags, min_window=min_periods, window=window)
    warnings += list(rt.warnings)
    fac_all = rt.factors()
    factors = tuple(str(c) for c in fac_all.columns)
    freq = fac_all.index.freqstr
    months = fac_all.index
    expected_ppy = {"M": 12, "Q": 4}.get(freq[:1])
    if expected_ppy is not None and expected_ppy != periods_per_year:
        warnings.append(f"the data are {'monthly' if freq[:1] == 'M' else 'quarterly'} but "
                        f"periods_per_year is {periods_per_year}: annualised figures use "
                        f"{periods_per_year}.")
    if freq[:1] == "Q" and rebalance == "monthly":
        warnings.append(f"the data are quarterly: {key['rebalance']} = 'monthly' rebalances "
                        "every quarter.")
    book = _as_series(book_returns)
    if not isinstance(instrument_returns.index, pd.PeriodIndex) or \
            instrument_returns.index.freqstr != freq:
        raise InputError(f"instrument returns must be indexed by a PeriodIndex at the state "
                         f"data's frequency ({freq}).", file="instruments",
                         fix="index them with pd.PeriodIndex(..., freq='M').")
    if book.index.freqstr != freq:
        raise InputError(f"the book's returns are not at the state data's frequency ({freq}).",
                         file="portfolio_returns", fix="use one frequency for every input.")
    inst = instrument_returns.apply(pd.to_numeric, errors="coerce").astype(float).reindex(months)
    book = book.reindex(months)
    instruments = [str(c) for c in inst.columns]
    inst.columns = instruments
    known = fac_all.notna().all(axis=1).to_numpy()
    panel = pd.concat([book.rename(_BOOK), inst], axis=1)

    # Earliest date with enough real-time factor months for every series (cumulative, so
    # nothing after a date decides whether that date qualifies).
    valid = (panel.notna().to_numpy() & known[:, None]).cumsum(axis=0)
    ready = (valid >= beta_min_obs).all(axis=1)
    if not ready.any():
        raise InputError(
            f"no date has {beta_min_obs} {unit} of real-time factors for the book and every "
            f"instrument after a first VAR fit on {min_periods} {unit} "
            f"({key['min_periods']} = {min_periods}, {key['beta_min_obs']} = {beta_min_obs}).",
            fix=f"use a longer sample, or lower {key['min_periods']} or {key['beta_min_obs']}.")
    earliest = months[int(np.argmax(ready))]
    first = earliest
    if start is not None:
        first = _to_period(start, freq, "start")
        if first > months[-1]:
            raise InputError(f"{key['start']} = '{start}' is after the last date {months[-1]}.",
                             fix=f"start between {earliest} and {months[-2]}, or leave "
                                 f"{key['start']} out.")
        if first < earliest:
            raise InputError(f"{key['start']} = '{start}' comes before the first date with "
                             f"enough history, {earliest} (a first VAR fit on {min_periods} "
                             f"{unit}, then {beta_min_obs} {unit} of betas).",
                             fix=f"start at {earliest} or later, or leave {key['start']} out.")
    dates = rebalance_schedule(months, rebalance=rebalance, first=first)
    if len(dates) == 0:
        what = (f"{key['start']} = '{start}'" if start is not None
                else f"the first date with enough history, {earliest},")
        raise InputError(f"there is no {rebalance} rebalance date between {what} and "
                         f"{months[-2]}, the last date that leaves one {one} to hold the "
                         "overlay.",
                         fix=(f"start earlier ({key['start']}) or use a longer sample."
                              if start is not None else
                              f"use a longer sample, or lower {key['min_periods']} or "
                              f"{key['beta_min_obs']}."))

    problem = OverlayProblem.for_inputs(instruments, spec, sheet)
    n = len(dates)
    # Window [start, end) of each date in the rows with real-time factors: end counts the
    # factor rows dated <= τ, so no later row enters any estimate made at τ.
    kn_rows = np.flatnonzero(known)
    ends = np.searchsorted(kn_rows, np.array([_loc(months, d) for d in dates]), side="right")
    starts = np.zeros_like(ends) if beta_window is None else np.maximum(ends - int(beta_window), 0)
    f_known = fac_all.to_numpy(dtype=float)[kn_rows]
    per_date = spec.robust        # HAC errors per date come from the exposures stage
    if not per_date:
        coef, counts = _window_betas(panel.to_numpy(dtype=float)[kn_rows], f_known, starts, ends)
        bad = counts < max(int(beta_min_obs), len(factors) + 2)
        bad |= ~np.isfinite(coef).all(axis=2)
        if bad.any():
            d, j = np.argwhere(bad)[0]
            who = "the book" if j == 0 else instruments[j - 1]
            raise InputError(f"too few {unit} to estimate the betas of {who} at {dates[d]}.",
                             file="portfolio_returns" if j == 0 else "instruments",
                             row=str(dates[d]), column=None if j == 0 else who,
                             fix=f"start later ({key['start']}), widen {key['beta_window']} "
                                 "or supply more history.")
    if covariance_method == "sample":
        inst_cov = _window_cov(inst.to_numpy(dtype=float)[kn_rows], starts, ends)
        if (inst_cov[1] < 2).any():
            d = int(np.flatnonzero(inst_cov[1] < 2)[0])
            raise InputError(f"fewer than 2 {unit} where every instrument has a return at "
                             f"{dates[d]}.", row=str(dates[d]), file="instruments",
                             fix=f"start later ({key['start']}) or fill the instrument returns.")
    if spec.objective == "total":
        panel_cov = _window_cov(panel.to_numpy(dtype=float)[kn_rows], starts, ends)
    lam_rows: list[pd.Series] = []
    given_up = np.full(n, np.nan)
    pos = np.zeros((n, len(instruments)))
    te = np.zeros(n)
    turn = np.zeros(n)
    cost = np.zeros(n)
    status: list[str] = []
    b_path = np.zeros((n, len(factors)))
    bh_path = np.zeros((n, len(factors)))
    h_prev = pd.Series(0.0, index=instruments)
    fac_index = pd.Index(factors, name="factor")
    for i, tau in enumerate(dates):   # one solver call per rebalance; estimates are batched
        rows = kn_rows[starts[i]:ends[i]]
        f_win = fac_all.iloc[rows] if per_date or spec.premium_weight > 0 else None
        if per_date:
            est = time_series_betas(panel.iloc[rows], f_win, hac_lags=hac_lags)
            if est.betas.isna().to_numpy().any() or (est.n_obs < beta_min_obs).any():
                short = est.betas.isna().any(axis=1) | (est.n_obs < beta_min_obs)
                who = est.betas.index[short.to_numpy()][0]
                raise InputError(f"no betas for '{who if who != _BOOK else 'the book'}' at "
                                 f"{tau}.", row=str(tau),
                                 file="portfolio_returns" if who == _BOOK else "instruments",
                                 column=None if who == _BOOK else str(who),
                                 fix=f"start later ({key['start']}) or supply more history "
                                     "for that series.")
            book_b, inst_b = est.betas.loc[_BOOK], est.betas.loc[instruments]
        else:
            book_b = pd.Series(coef[i, 0], index=fac_index)
            inst_b = pd.DataFrame(coef[i, 1:], index=instruments, columns=fac_index)
        if covariance_method == "sample":
            cov = pd.DataFrame(inst_cov[0][i] * periods_per_year, index=instruments,
                               columns=instruments)
        else:
            cov = instrument_covariance(inst.iloc[rows], periods_per_year=periods_per_year,
                                        method=covariance_method)
        kw: dict[str, Any] = {}
        if spec.objective == "total":
            c = panel_cov[0][i] * periods_per_year
            kw["book_variance"] = float(c[0, 0])
            kw["book_instrument_cov"] = pd.Series(c[0, 1:], index=instruments)
        if per_date:
            kw["book_se"] = est.se_hac.loc[_BOOK]
            kw["instrument_se"] = est.se_hac.loc[instruments]
        if spec.premium_weight > 0:
            lam = _prices_of_risk(asset_returns, f_win, nw_lags=nw_lags,
                                  intercept=premia_intercept)
            lam_rows.append(lam.rename(tau))
            kw["premia"] = lam
        res = design_overlay(book_b, inst_b, cov, sheet, nav=nav,
                             spec=spec, current=h_prev, closest=closest,
                             periods_per_year=periods_per_year, problem=problem, **kw)
        h = res.positions.reindex(instruments).fillna(0.0)
        pos[i] = h.to_numpy()
        te[i] = res.tracking_error
        turn[i] = float(np.abs(h - h_prev).sum())
        # the backtest holds the continuous weights h, so it pays the cost of that trade
        # (the hedge stage's ``cost`` is the whole-contract trade's; common practice here)
        unrounded = getattr(res, "cost_unrounded", None)
        cost[i] = res.cost if unrounded is None else unrounded
        status.append(res.status)
        b_path[i] = res.exposure_before.reindex(factors).to_numpy()
        bh_path[i] = res.exposure_after.reindex(factors).to_numpy()
        if res.premium_given_up is not None:
            given_up[i] = res.premium_given_up
        h_prev = h
        if progress is not None:
            progress(i + 1, n)

    unreach = [s == "unreachable" for s in status]
    n_unreach = int(sum(unreach))
    if n_unreach:
        first_bad = dates[unreach.index(True)]
        held_what = ("the closest reachable overlay was held" if closest
                     else "no overlay was held at those dates")
        # first in the list: the run does not show the hedge that was asked for
        warnings.insert(0, f"{n_unreach} of {n} rebalances could not reach the targets; "
                           f"{held_what} (see status by date). The first was {first_bad}.")

    # ---- hold each decision from τ+1 to the next rebalance (vectorised over periods)
    decisions = pd.DataFrame(pos, index=dates, columns=pd.Index(instruments, name="instrument"))
    held = decisions.reindex(months).ffill().shift(1)
    decision_date = pd.Series(dates, index=dates).reindex(months).ffill().shift(1)
    te_held = pd.Series(te, index=dates).reindex(months).ffill().shift(1)
    oos = months[months > dates[0]]
    held, decision_date, te_held = held.loc[oos], decision_date.loc[oos], te_held.loc[oos]
    r_h = inst.loc[oos]
    missing_leg = (held.to_numpy() != 0) & ~np.isfinite(r_h.to_numpy())
    if missing_leg.any():
        k = int(missing_leg.any(axis=1).sum())
        warnings.append(f"{k} {one if k == 1 else unit} with a held instrument's return "
                        "missing: that leg counts as zero return.")
    overlay = (held * r_h.fillna(0.0)).sum(axis=1)
    cost_m = pd.Series(cost, index=dates).reindex(months).shift(1).reindex(oos).fillna(0.0)
    book_oos = book.loc[oos]
    hedged = book_oos + overlay
    f_oos = fac_all.loc[oos]
    series = pd.DataFrame({
        "book": book_oos, "overlay": overlay, "cost": cost_m, "hedged": hedged,
        "hedged_net": hedged - cost_m, "decision_date": decision_date,
        "predicted_tracking_error": te_held,
    }, index=oos)
    series = pd.concat([series, f_oos.add_prefix("factor.")], axis=1)
    series.index.name = "date"

    # ---- evaluation on the out-of-sample periods
    use = book_oos.notna() & f_oos.notna().all(axis=1)
    n_periods = int(use.sum())
    if n_periods < len(factors) + 2:
        raise InputError(f"only {n_periods} out-of-sample {one if n_periods == 1 else unit} "
                         f"to evaluate the hedge; {len(factors) + 2} are needed.",
                         fix=f"start earlier ({key['start']}) or use a longer sample.")
    sides = pd.DataFrame({"unhedged": book_oos[use], "hedged": hedged[use]})
    real = time_series_betas(sides, f_oos[use], hac_lags=hac_lags)
    b_real, se_real = real.betas.loc[["unhedged", "hedged"]], real.se_hac.loc[["unhedged",
                                                                                "hedged"]]
    s_f = np.cov(f_oos[use].to_numpy().T, ddof=1)
    bu, bh = b_real.loc["unhedged"].to_numpy(), b_real.loc["hedged"].to_numpy()
    eff = 1.0 - float(bh @ s_f @ bh) / float(bu @ s_f @ bu)
    neutral = tuple(f for f in spec.neutralise if f in factors)
    eff_n = None
    if neutral:
        j = [factors.index(f) for f in neutral]
        snn = s_f[np.ix_(j, j)]
        eff_n = 1.0 - float(bh[j] @ snn @ bh[j]) / float(bu[j] @ snn @ bu[j])
    se_u = se_real.loc["unhedged"].to_numpy()
    eff_f, eff_note = _effectiveness_by_factor(neutral, factors, bu, bh, se_u)
    warnings += _effectiveness_warnings(eff_f, factors, bu, bh)
    var_red = 1.0 - float(sides["hedged"].var(ddof=1) / sides["unhedged"].var(ddof=1))
    realised_te = float(overlay.std(ddof=1) * math.sqrt(periods_per_year))
    predicted_te = float(np.sqrt(np.mean(te_held.to_numpy() ** 2)))
    years = len(oos) / periods_per_year
    settings = {
        "lags": rt.lags, "min_periods": int(min_periods), "min_window": int(min_periods),
        "window": window,
        "beta_window": beta_window, "beta_min_obs": int(beta_min_obs), "rebalance": rebalance,
        "first_rebalance": str(dates[0]), "covariance_method": covariance_method,
        "objective": spec.objective, "closest": bool(closest),
        "first_month": str(oos[0]), "last_month": str(oos[-1]),
        "first_period": str(oos[0]), "last_period": str(oos[-1]),
        "periods_per_year": int(periods_per_year), "period_label": unit,
    }
    return BacktestResult(
        rebalance_dates=dates, decisions=decisions,
        status=pd.Series(status, index=dates, name="status"),
        predicted_te_path=pd.Series(te, index=dates, name="predicted_tracking_error"),
        turnover_path=pd.Series(turn, index=dates, name="turnover"),
        cost_path=pd.Series(cost, index=dates, name="cost"),
        book_betas_path=pd.DataFrame(b_path, index=dates, columns=list(factors)),
        hedged_betas_path=pd.DataFrame(bh_path, index=dates, columns=list(factors)),
        premia_path=pd.DataFrame(lam_rows).rename_axis("date") if lam_rows else None,
        premium_given_up_path=(pd.Series(given_up, index=dates, name="premium_given_up")
                               if np.isfinite(given_up).any() else None),
        series=series, factors=factors, neutralised=neutral,
        realised_exposure=b_real.rename_axis(None), realised_exposure_se=se_real.rename_axis(None),
        confidence=conf, effectiveness=eff, effectiveness_neutralised=eff_n,
        effectiveness_by_factor=eff_f, variance_reduction=var_red,
        realised_tracking_error=realised_te, predicted_tracking_error=predicted_te,
        turnover=float(turn.sum()), turnover_annual=float(turn.sum() / years),
        costs_paid=float(cost.sum()), costs_paid_annual=float(cost.sum() / years),
        nav=float(nav), n_months=n_periods, periods_per_year=int(periods_per_year),
        n_periods=n_periods, period_label=unit, n_unreachable=n_unreach,
        settings=settings, warnings=tuple(warnings), effectiveness_note=eff_note,
        sample={"first": str(sides.index[0]), "last": str(sides.index[-1]),
                "periods": n_periods},
    )


def _effectiveness_by_factor(neutral: tuple[str, ...], factors: tuple[str, ...],
                             bu: np.ndarray, bh: np.ndarray, se_u: np.ndarray
                             ) -> tuple[pd.Series, dict[str, str]]:
    """``1 - b_h,f^2 / b_u,f^2`` for each neutralised factor; NaN with a reason where the
    unhedged exposure is within ``NEAR_ZERO_T`` standard errors of zero (module docstring)."""
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


def _effectiveness_warnings(eff: pd.Series, factors: tuple[str, ...], bu: np.ndarray,
                            bh: np.ndarray) -> list[str]:
    """A warning for each neutralised factor the hedge made worse out of sample."""
    return [f"out of sample the hedge of {f} made that exposure larger: effectiveness "
            f"{100 * e:.1f} % (unhedged {bu[factors.index(f)]:.4f}, hedged "
            f"{bh[factors.index(f)]:.4f})." for f, e in eff.items() if e < 0]


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


def _loc(index: pd.PeriodIndex, date: pd.Period) -> int:
    """Position of ``date`` in ``index``."""
    return int(index.get_loc(date))


def _cumulative(a: np.ndarray) -> np.ndarray:
    """Running sums with a leading zero row: out[e] - out[s] sums rows s..e-1."""
    out = np.zeros((a.shape[0] + 1, *a.shape[1:]))
    np.cumsum(a, axis=0, out=out[1:])
    return out


def _window_betas(y: np.ndarray, f: np.ndarray, starts: np.ndarray, ends: np.ndarray
                  ) -> tuple[np.ndarray, np.ndarray]:
    """OLS slopes of each column of ``y`` on [1, f] over rows [start, end) for every date.

    Normal equations from running sums of x x' and x y per series over its own valid rows
    (b = (X'X)^{-1} X'y, the same estimator as hedgekit.exposures.time_series_betas),
    solved for all dates and series in one batched call.  Returns slopes (D, N, K) and the
    valid-month counts (D, N).  Running sums only add earlier rows, so the estimate at a
    date does not depend on any later row, to the bit.
    """
    mask = np.isfinite(y)
    x = np.column_stack([np.ones(len(f)), f])
    y0 = np.where(mask, y, 0.0)
    m = mask.astype(float)
    xx = _cumulative(np.einsum("rp,rq,rn->rnpq", x, x, m))
    xy = _cumulative(np.einsum("rp,rn->rnp", x, y0))
    cnt = _cumulative(m)
    a = xx[ends] - xx[starts]
    b = xy[ends] - xy[starts]
    n = np.rint(cnt[ends] - cnt[starts]).astype(np.int64)
    p = x.shape[1]
    ok = n >= p + 1
    safe = np.where(ok[..., None, None], a, np.eye(p))
    coef = np.linalg.solve(safe, b[..., None])[..., 0]
    coef[~ok] = np.nan
    return coef[..., 1:], n


def _window_cov(z: np.ndarray, starts: np.ndarray, ends: np.ndarray
                ) -> tuple[np.ndarray, np.ndarray]:
    """Sample covariance (divisor n - 1) over the rows in [start, end) where every column
    is present (listwise, like hedgekit.hedge.instrument_covariance), for every date:
    (S_zz - s_z s_z' / n) / (n - 1).  Returns (D, H, H) covariances and counts (D,)."""
    full = np.isfinite(z).all(axis=1)
    z0 = np.where(full[:, None], z, 0.0)
    s1 = _cumulative(z0)
    s2 = _cumulative(np.einsum("rh,rg->rhg", z0, z0))
    cnt = _cumulative(full.astype(float))
    n = np.rint(cnt[ends] - cnt[starts])
    s = s1[ends] - s1[starts]
    with np.errstate(invalid="ignore", divide="ignore"):
        cov = (s2[ends] - s2[starts] - np.einsum("dh,dg->dhg", s, s) / n[:, None, None]) \
            / (n[:, None, None] - 1)
    cov = 0.5 * (cov + np.transpose(cov, (0, 2, 1)))
    return cov, n.astype(np.int64)


def _prices_of_risk(asset_returns: pd.DataFrame, factors: pd.DataFrame, *,
                    nw_lags: int | str, intercept: bool) -> pd.Series:
    """Fama-MacBeth prices of risk on the window: betas of the test assets over the window,
    then the monthly cross-sections (Fama and MacBeth 1973, JPE; hedgekit.premia)."""
    r = asset_returns.apply(pd.to_numeric, errors="coerce").astype(float).reindex(factors.index)
    betas = time_series_betas(r, factors).betas.dropna()
    res = fama_macbeth(r[betas.index], betas, factors=factors, intercept=intercept,
                       nw_lags=nw_lags)
    return res.lambda_
