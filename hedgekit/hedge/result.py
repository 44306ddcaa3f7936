"""The hedge stage's result: :class:`HedgeResult`, every derived figure computed once here.

Intervals, t, p and marks come from :mod:`hedgekit.inference` at the result's
``confidence``; presentation code reads them from the result or its ``to_dict()``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from .. import inference
from ..jsonable import jsonable

if TYPE_CHECKING:
    from .design import Solved
    from .inputs import OverlayInputs
    from .spec import HedgeSpec
    from .ticket import WholeContracts

ESTIMATES = ("before", "after", "after_rounded")


def _plain(value: float | None) -> float | None:
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def _series_dict(series: pd.Series | None) -> dict[str, float | None] | None:
    if series is None:
        return None
    return {str(k): _plain(v) for k, v in series.items()}


def exposure_stats(estimates: dict[str, pd.Series], ses: dict[str, pd.Series | None],
                   level: float) -> pd.DataFrame:
    """By factor, for each estimate e in ``estimates``: e, e_se, e_t, e_p, e_marks, e_low,
    e_high (normal inference at ``level``; se, t, p, bounds NaN where no se is known)."""
    cols: dict[str, Any] = {}
    for name, est in estimates.items():
        se = ses.get(name)
        se = pd.Series(np.nan, index=est.index) if se is None else se.reindex(est.index)
        t = inference.t_stat(est, se)
        p = inference.p_value(t)
        lo, hi = inference.interval(est, se, level)
        cols.update({name: est, f"{name}_se": se, f"{name}_t": t, f"{name}_p": p,
                     f"{name}_marks": inference.marks(p), f"{name}_low": lo, f"{name}_high": hi})
    frame = pd.DataFrame(cols)
    frame.index.name = "factor"
    return frame


@dataclass(frozen=True, eq=False)
class HedgeResult:
    """The overlay and its ticket.  Weights are fractions of NAV; money in NAV currency.

    ``tracking_error`` = sqrt(h' Sigma_H h) annualised; ``premium_given_up`` =
    -(B_H h)' lambda x periods_per_year, the expected excess return the overlay removes, with
    ``premium_given_up_se`` = periods_per_year sqrt(g' V_lambda g), g = B_H' h (delta method,
    V_lambda the per-period covariance of the prices of risk); ``_rounded`` variants use
    the whole-contract weights.  ``robust_gross_ratio`` = gross notional of the robust
    overlay / the nominal one.

    Two trades and two costs: ``trades``/``cost_unrounded`` are the optimiser's continuous
    trade h - h0 and its cost sum_j c_j |h_j - h0_j| (the objective's cost term);
    ``trades_rounded``/``cost``/``cost_currency`` (and the ticket's ``cost`` column) are the
    whole-contract trade h~ - h0 actually placed and its cost.  ``rounding`` names how the
    contracts were chosen (:mod:`hedgekit.hedge.ticket`); ``rounding_breaches``: what the
    whole-contract overlay misses (tolerance, band, cap, bounds, legs with no contract); each
    is also in ``warnings`` and ``message``.  ``zero_legs``: legs with a continuous weight
    and 0 contracts.

    ``stats`` holds, by factor, each exposure (before, after, after_rounded) with its se,
    t, p, marks and interval at ``confidence``; :meth:`conf_int` gives intervals at another
    level.  ``cautions`` are only those this computation raises (the standing ones live in
    :mod:`hedgekit.cautions`).
    """

    status: str
    positions: pd.Series
    notional: pd.Series
    contracts: pd.Series
    positions_rounded: pd.Series
    trades: pd.Series
    cost: float
    cost_currency: float
    exposure_before: pd.Series
    exposure_after: pd.Series
    exposure_after_rounded: pd.Series
    exposure_before_se: pd.Series | None
    exposure_after_se: pd.Series | None
    confidence: float
    tracking_error: float
    tracking_error_rounded: float
    premium_given_up: float | None
    premium_given_up_rounded: float | None
    gross: float
    nav: float
    unreachable: tuple[str, ...]
    remaining: pd.Series
    binding: tuple[str, ...]
    message: str
    solver: str
    objective_value: float | None
    objective: str
    total_risk_before: float | None
    total_risk_after: float | None
    robust_gross_ratio: float | None
    ticket: pd.DataFrame
    warnings: tuple[str, ...] = ()
    cautions: tuple[str, ...] = ()
    trades_rounded: pd.Series | None = None
    cost_unrounded: float | None = None
    cost_unrounded_currency: float | None = None
    gross_rounded: float | None = None
    rounding_breaches: tuple[str, ...] = ()
    exposure_after_rounded_se: pd.Series | None = None
    rounding: str = ""
    zero_legs: tuple[str, ...] = ()
    premium_given_up_se: float | None = None
    premium_given_up_rounded_se: float | None = None
    stats: pd.DataFrame | None = None
    sample: dict | None = None

    # ---- derived figures (from ``stats``, computed once at construction)
    def conf_int(self, level: float | None = None, which: str = "after_rounded") -> pd.DataFrame:
        """Interval by factor (columns ``low``, ``high``) for ``which`` in before, after,
        after_rounded, at ``level`` (default: the result's ``confidence``)."""
        if which not in ESTIMATES:
            raise ValueError(f"which must be one of {', '.join(ESTIMATES)}.")
        level = self.confidence if level is None else level
        lo, hi = inference.interval(self.stats[which], self.stats[f"{which}_se"], level)
        return pd.DataFrame({"low": lo, "high": hi})

    def _pairs(self, which: str) -> dict[str, list] | None:
        if self.stats[f"{which}_se"].isna().all():
            return None
        return {str(f): [_plain(lo), _plain(hi)] for f, lo, hi in
                zip(self.stats.index, self.stats[f"{which}_low"], self.stats[f"{which}_high"],
                    strict=True)}

    def _premium_interval(self, value: float | None, se: float | None) -> list | None:
        if value is None or se is None:
            return None
        lo, hi = inference.interval(value, se, self.confidence)
        return [_plain(lo), _plain(hi)]

    @property
    def premium_given_up_interval(self) -> list | None:
        return self._premium_interval(self.premium_given_up, self.premium_given_up_se)

    @property
    def premium_given_up_rounded_interval(self) -> list | None:
        return self._premium_interval(self.premium_given_up_rounded,
                                      self.premium_given_up_rounded_se)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict: the contract keys (docs/interface.md) plus the ticket extras."""
        out: dict[str, Any] = {
            "status": self.status,
            "positions": _series_dict(self.positions),
            "contracts": {str(k): int(v) for k, v in self.contracts.items()},
            "notional": _series_dict(self.notional),
            "positions_rounded": _series_dict(self.positions_rounded),
            "trades": _series_dict(self.trades),
            "exposure_before": _series_dict(self.exposure_before),
            "exposure_after": _series_dict(self.exposure_after),
            "exposure_after_rounded": _series_dict(self.exposure_after_rounded),
            "exposure_before_se": _series_dict(self.exposure_before_se),
            "exposure_after_se": _series_dict(self.exposure_after_se),
            "exposure_after_rounded_se": _series_dict(self.exposure_after_rounded_se),
        }
        for which in ESTIMATES:
            key = f"exposure_{which}"
            out[f"{key}_interval"] = self._pairs(which)
            out[f"{key}_t"] = _series_dict(self.stats[f"{which}_t"])
            out[f"{key}_p"] = _series_dict(self.stats[f"{which}_p"])
            out[f"{key}_marks"] = {str(k): v for k, v in self.stats[f"{which}_marks"].items()}
        out.update({
            "confidence": self.confidence,
            "level_label": inference.level_label(self.confidence),
            "sample": self.sample,
            "tracking_error": _plain(self.tracking_error),
            "tracking_error_rounded": _plain(self.tracking_error_rounded),
            "cost": _plain(self.cost),
            "cost_currency": _plain(self.cost_currency),
            "cost_unrounded": _plain(self.cost_unrounded),
            "cost_unrounded_currency": _plain(self.cost_unrounded_currency),
            "trades_rounded": _series_dict(self.trades_rounded),
            "gross_rounded": _plain(self.gross_rounded),
            "rounding": self.rounding,
            "rounding_breaches": list(self.rounding_breaches),
            "zero_legs": list(self.zero_legs),
            "premium_given_up": _plain(self.premium_given_up),
            "premium_given_up_se": _plain(self.premium_given_up_se),
            "premium_given_up_interval": self.premium_given_up_interval,
            "premium_given_up_distinct_from_zero": _excludes_zero(self.premium_given_up_interval),
            "premium_given_up_rounded": _plain(self.premium_given_up_rounded),
            "premium_given_up_rounded_se": _plain(self.premium_given_up_rounded_se),
            "premium_given_up_rounded_interval": self.premium_given_up_rounded_interval,
            "premium_given_up_rounded_distinct_from_zero":
                _excludes_zero(self.premium_given_up_rounded_interval),
            "gross": _plain(self.gross),
            "nav": _plain(self.nav),
            "unreachable": list(self.unreachable),
            "remaining": _series_dict(self.remaining),
            "binding": list(self.binding),
            "message": self.message,
            "solver": self.solver,
            "objective": self.objective,
            "objective_value": _plain(self.objective_value),
            "total_risk_before": _plain(self.total_risk_before),
            "total_risk_after": _plain(self.total_risk_after),
            "robust_gross_ratio": _plain(self.robust_gross_ratio),
            "ticket": {str(i): {str(c): (int(v) if c == "contracts" else _plain(v))
                                for c, v in row.items()}
                       for i, row in self.ticket.iterrows()},
            "warnings": list(self.warnings),
            "cautions": list(self.cautions),
        })
        return jsonable(out)

    def to_frame(self) -> pd.DataFrame:
        """The hedge ticket: one row per instrument."""
        return self.ticket.copy()

    def exposure_table(self) -> pd.DataFrame:
        """By factor: exposure before, after, after rounding, and the confidence bounds at
        ``confidence`` when standard errors are known (columns of ``stats``)."""
        table = pd.DataFrame({"before": self.exposure_before, "after": self.exposure_after,
                              "after_rounded": self.exposure_after_rounded})
        if self.exposure_before_se is not None and self.exposure_after_se is not None:
            for which in ESTIMATES:
                for part in ("se", "low", "high"):
                    table[f"{which}_{part}"] = self.stats[f"{which}_{part}"]
        table.index.name = "factor"
        return table


def _excludes_zero(pair: list | None) -> bool | None:
    if pair is None or pair[0] is None or pair[1] is None:
        return None
    return bool(pair[0] > 0 or pair[1] < 0)


# --------------------------------------------------------------------------- construction

def _premium(inp: OverlayInputs, w: np.ndarray, ppy: int) -> tuple[float | None, float | None]:
    """-(B'w)' lambda x ppy and its delta-method se ppy sqrt(g' V g), g = B'w."""
    if inp.lam is None:
        return None, None
    g = inp.B.T @ w
    value = float(-g @ inp.lam * ppy)
    if inp.lam_cov is None:
        return value, None
    return value, float(ppy * math.sqrt(max(float(g @ inp.lam_cov @ g), 0.0)))


def build_result(inp: OverlayInputs, spec: HedgeSpec, solved: Solved, h: np.ndarray,
                 whole: WholeContracts, *, robust_ratio: float | None,
                 periods_per_year: int) -> HedgeResult:
    """Exposures, risk, premium, cost and ticket of the overlay h and its contracts."""
    nav, w = inp.nav, whole.weights
    notional = h * nav
    trades, trades_round = h - inp.h0, w - inp.h0
    cost_unrounded = float(inp.cost @ np.abs(trades))
    cost_frac = float(inp.cost @ np.abs(trades_round))
    fac = pd.Index(inp.factors, name="factor")
    idx = pd.Index(inp.instruments, name="instrument")
    before = pd.Series(inp.b, index=fac, name="before")
    after = pd.Series(inp.b + inp.B.T @ h, index=fac, name="after")
    after_round = pd.Series(inp.b + inp.B.T @ w, index=fac, name="after_rounded")
    ses: dict[str, pd.Series | None] = dict.fromkeys(ESTIMATES)
    if inp.se_b is not None and inp.se_B is not None:
        ses = {"before": pd.Series(inp.se_b, index=fac),
               "after": pd.Series(np.sqrt(inp.se_b ** 2 + (inp.se_B ** 2).T @ (h ** 2)),
                                  index=fac),
               "after_rounded": pd.Series(np.sqrt(inp.se_b ** 2 + (inp.se_B ** 2).T @ (w ** 2)),
                                          index=fac)}
    stats = exposure_stats({"before": before, "after": after, "after_rounded": after_round},
                           ses, spec.confidence)
    te = math.sqrt(max(float(h @ inp.sigma @ h), 0.0))
    te_round = math.sqrt(max(float(w @ inp.sigma @ w), 0.0))
    premium, premium_se = _premium(inp, h, periods_per_year)
    premium_r, premium_r_se = _premium(inp, w, periods_per_year)
    risk_before = risk_after = None
    if inp.c_pH is not None and inp.book_variance is not None:
        risk_before = math.sqrt(max(float(inp.book_variance), 0.0))
        risk_after = math.sqrt(max(float(inp.book_variance) + 2 * float(inp.c_pH @ h)
                                   + float(h @ inp.sigma @ h), 0.0))
    message = solved.message
    warnings = inp.warnings + tuple(f"Rounding to whole contracts: {b}." for b in whole.breaches)
    if whole.breaches:
        if solved.status == "optimal":
            message = (message.rstrip(".") + " before rounding, but rounding to whole "
                       "contracts breaks the overlay: " + "; ".join(whole.breaches) + ".")
        else:
            message += " After rounding to whole contracts: " + "; ".join(whole.breaches) + "."
    cautions: tuple[str, ...] = ()
    if robust_ratio is not None and robust_ratio > 1.5:
        cautions = (f"The robust overlay needs {robust_ratio:.2f} times the gross notional of "
                    "the nominal one: most of it insures against estimation error in the "
                    "betas.",)
    ticket = pd.DataFrame({
        "weight": h, "notional": notional, "contracts": whole.contracts,
        "contract_value": inp.unit, "weight_rounded": w, "current": inp.h0, "trade": trades,
        "trade_rounded": trades_round, "cost": np.abs(trades_round) * inp.cost * nav,
        "cost_unrounded": np.abs(trades) * inp.cost * nav,
        "excluded": (~inp.active).astype(float),
    }, index=idx)
    return HedgeResult(
        status=solved.status,
        positions=pd.Series(h, index=idx, name="weight"),
        notional=pd.Series(notional, index=idx, name="notional"),
        contracts=pd.Series(whole.contracts, index=idx, name="contracts"),
        positions_rounded=pd.Series(w, index=idx, name="weight_rounded"),
        trades=pd.Series(trades, index=idx, name="trade"),
        cost=cost_frac, cost_currency=cost_frac * nav,
        exposure_before=before, exposure_after=after, exposure_after_rounded=after_round,
        exposure_before_se=ses["before"], exposure_after_se=ses["after"],
        exposure_after_rounded_se=ses["after_rounded"],
        confidence=spec.confidence, tracking_error=te, tracking_error_rounded=te_round,
        premium_given_up=premium, premium_given_up_rounded=premium_r,
        premium_given_up_se=premium_se, premium_given_up_rounded_se=premium_r_se,
        gross=float(np.abs(h).sum()), nav=float(nav), unreachable=solved.unreachable,
        remaining=solved.remaining, binding=solved.binding, message=message,
        solver=solved.solver, objective_value=solved.objective_value, objective=spec.objective,
        total_risk_before=risk_before, total_risk_after=risk_after,
        robust_gross_ratio=robust_ratio, ticket=ticket, warnings=warnings, cautions=cautions,
        trades_rounded=pd.Series(trades_round, index=idx, name="trade_rounded"),
        cost_unrounded=cost_unrounded, cost_unrounded_currency=cost_unrounded * nav,
        gross_rounded=float(np.abs(w).sum()), rounding_breaches=whole.breaches,
        rounding=whole.method, zero_legs=whole.zero_legs, stats=stats, sample=inp.sample,
    )
