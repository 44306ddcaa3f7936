"""The walk-forward's result: decisions, the period-by-period series and their evaluation."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import pandas as pd

from ..inference import interval, interval_pairs, level_label
from ..jsonable import jsonable

__all__ = ["BacktestResult"]


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
