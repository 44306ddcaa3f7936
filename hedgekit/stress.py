"""Stress scenarios and historical replay of the book before and after the overlay.

A scenario is a surprise ``s`` in natural units (term spread +100 bp: ``s_term = 0.01``;
market -20 %: ``s_mkt = -0.20``).  It maps to orthogonal factor shocks ``g = M s`` through
the lower-triangular transform ``M`` of the state VAR (methods.md section 1), and the
book's P&L in return units is ``b' g`` (times NAV for currency).  The market factor's shock
is the market surprise itself because the first row of ``M`` is ``[1, 0, ..., 0]``.

Two readings of a scenario (methods.md section 1):

* ``"isolated"``: the raw surprises of the variables not named are zero, ``g = M s``;
* ``"comove"``: they sit at their conditional mean given the named ones,
  ``s~ = Sigma_{.J} Sigma_{JJ}^{-1} s_J`` (the multivariate-normal conditional mean;
  Anderson 2003, *An Introduction to Multivariate Statistical Analysis*, thm. 2.5.1, from
  memory), and ``g = M s~``.

Built-in scenarios (:data:`BUILTIN_SCENARIOS`) run in both readings; ``sample_recession``
is the mean raw innovation over the months of the user's sample where the book's
state-driven P&L ``b' M u_t`` is in its worst ``recession_quantile`` (5 % by default).
The historical replay lists the worst months and calendar quarters of the sample for
each factor's contribution ``b_f f_{f,t}`` and for the book's state-driven P&L ``b' f_t``,
with the hedged model P&L and the realised return (:func:`historical_replay`).

A user scenario named like a built-in one replaces it (a warning says so).  Every table
(:meth:`StressResult.to_frame`, the replay frames) has its index named ``row`` so a CSV of
it has a header for every column.  Messages about settings name the configuration key as
the user writes it (``[[stress.scenarios]] number 2``, ``[stress] worst_k``, ...).

Intervals come from the betas' standard errors only, assuming the estimates are
independent across factors and between book and overlay (an approximation; the
shocks ``g`` are taken as given):
``se(b'g) = sqrt(sum_f g_f^2 (se_book_f^2 + se_overlay_f^2))``; the interval is
``P&L +/- z se`` at ``confidence`` (:func:`hedgekit.inference.interval`, one level for the
whole run, ``[intervals] confidence``).

Scenario sizes (common practice, no single source).  Each row carries ``largest_sd``, the
largest named surprise ``|s_j| / sd_j`` in standard deviations of that variable's raw
innovation (``sd_j = sqrt(Sigma_u[j, j])``), and ``sample_max_sd``, the largest move of the
same variable's raw innovation in the sample *in the same direction* as the shock, in the
same standard deviations (with its date, ``sample_max_date``).  A scenario larger than
anything the sample saw (``largest_sd > sample_max_sd``) gets a warning naming the
variable and both sizes; without the sample's innovations the warning fires beyond
:data:`SIZE_WARN_SD` (5) standard deviations instead.

Units of user shocks.  Shocks are decimals of the variable's own unit, as the data are
(interface: returns and levels in decimals).  A user shock is refused as a unit slip
(``InputError``, exit 2) beyond :data:`SHOCK_BOUNDS`: the market excess return (the first
variable) beyond +/-1.0 (100 %), any other state variable (a spread, rate or yield level)
beyond +/-0.10 (1,000 bp), e.g. ``def = 150`` with the fix "write 0.015 for +150 bp"
(bounds: common practice, far beyond any one-period move in the data).

Period words follow the data: the replay of the worst periods (:attr:`StressResult.replay`)
lists months for monthly data and quarters for quarterly data; monthly data also get
``replay_quarters`` (sums over complete calendar quarters), quarterly data none.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from .errors import InputError
from .inference import check_level, interval, level_label
from .jsonable import jsonable

__all__ = [
    "BUILTIN_SCENARIOS",
    "READINGS",
    "SHOCK_BOUNDS",
    "SIZE_WARN_SD",
    "StressResult",
    "historical_replay",
    "overlay_exposure",
    "run_stress",
    "scenario_shocks",
]

READINGS = ("isolated", "comove")

#: Built-in scenarios in natural units (decimals).  Sizes are round, familiar stress moves
#: (common practice, no single source).  ``sample_recession`` is sized from the user's own
#: sample in :func:`run_stress`.
BUILTIN_SCENARIOS: dict[str, dict[str, Any]] = {
    "curve_steepens_100bp": {
        "shocks": {"term": 0.01},
        "description": "term spread +100 bp",
    },
    "credit_spreads_widen_150bp": {
        "shocks": {"def": 0.015},
        "description": "default spread +150 bp",
    },
    "policy_rate_cut_100bp": {
        "shocks": {"rf": -0.01},
        "description": "short rate -100 bp",
    },
    "dividend_yield_up_1pt": {
        "shocks": {"dy": 0.01},
        "description": "dividend yield +1 point",
    },
    "equity_drawdown_20pct": {
        "shocks": {"mkt": -0.20},
        "description": "market excess return -20 %",
    },
    "sample_recession": {
        "shocks": None,
        "description": "average raw innovations over the book's worst {periods} of the sample",
    },
}

#: Largest user shock accepted, by kind of variable, in decimals: the market excess return
#: (the first variable) and the other state variables (spreads, rates, yields as levels).
#: Beyond it the shock is taken for a unit slip (150 typed for +150 bp).  Common practice.
SHOCK_BOUNDS: dict[str, float] = {"market": 1.0, "level": 0.10}

#: Without the sample's innovations, a scenario whose largest named surprise exceeds this
#: many innovation standard deviations is flagged (common practice).
SIZE_WARN_SD = 5.0

#: Words for the conventional variable names, for descriptions written from the shocks.
VARIABLE_WORDS: dict[str, str] = {
    "mkt": "market excess return", "dy": "dividend yield", "term": "term spread",
    "def": "default spread", "rf": "short rate",
}

# Built-in scenarios use the conventional variable names; when the market column is named
# otherwise its shock goes to the first variable (the market by construction).  Built-ins
# naming a variable the VAR lacks are skipped with a warning.
_MARKET_KEY = "mkt"
_SCENARIOS = "[[stress.scenarios]]"
#: Name of the index of every table of the result (a CSV column header).
INDEX_NAME = "row"



def _records(frame: pd.DataFrame) -> list[dict[str, Any]]:
    out = frame.copy()
    for col in out.columns:
        if isinstance(out[col].dtype, pd.PeriodDtype):
            out[col] = out[col].astype(str)
    return [jsonable(r) for r in out.to_dict(orient="records")]


def _sample(index: pd.Index) -> dict[str, Any] | None:
    """``{"first", "last", "periods"}`` of a PeriodIndex ("YYYY-MM" or "YYYYQn")."""
    if len(index) == 0:
        return None
    return {"first": str(index[0]), "last": str(index[-1]), "periods": int(len(index))}


@dataclass(frozen=True)
class StressResult:
    """Scenario P&L before and after the overlay, and the historical replay.

    ``table`` has one row per scenario and reading: ``label`` (the one name the table and
    the chart show), the P&L of the unhedged and hedged book in return units with its
    standard error and interval at ``confidence``, and in currency (x NAV).
    ``shocks`` (rows as ``table``) are the orthogonal factor shocks ``g``, ``surprises``
    the raw natural-unit surprises after the reading is applied, and
    ``contributions_unhedged`` / ``contributions_hedged`` the per-factor terms ``b_f g_f``.
    ``largest_sd`` (the largest named surprise in innovation standard deviations),
    ``sample_max_sd`` (the sample's largest move of that variable in the same direction,
    same units), ``beyond_sample`` and ``mahalanobis`` (sqrt(s' Sigma_u^{-1} s)) say how
    extreme a scenario is.  ``replay`` lists the worst periods of the sample at the data's
    frequency (``period_label`` "months" or "quarters"), by factor contribution and by the
    book's state-driven P&L; ``replay_months`` / ``replay_quarters`` are the same tables by
    their period (monthly data have both, quarterly data quarters only).  ``sample`` is
    the span of the innovations the sizes and the replay use.
    """

    factors: tuple[str, ...]
    nav: float
    confidence: float
    table: pd.DataFrame
    shocks: pd.DataFrame
    surprises: pd.DataFrame
    contributions_unhedged: pd.DataFrame
    contributions_hedged: pd.DataFrame
    replay_months: pd.DataFrame | None
    replay_quarters: pd.DataFrame | None
    recession: dict[str, Any] | None
    book_betas: pd.Series
    hedged_betas: pd.Series
    warnings: tuple[str, ...] = field(default_factory=tuple)
    period_label: str = "months"
    sample: dict[str, Any] | None = None
    sizes: dict[int, dict[str, dict[str, Any]]] = field(default_factory=dict)

    @property
    def replay(self) -> pd.DataFrame | None:
        """The worst periods of the sample at the data's own frequency."""
        return self.replay_quarters if self.period_label == "quarters" else self.replay_months

    def conf_int(self, level: float | None = None, side: str = "hedged") -> pd.DataFrame:
        """Scenario P&L interval (columns ``low``, ``high``, return units) at ``level``
        (default the stored ``confidence``), rows as :attr:`table`, for one ``side``
        ("unhedged" or "hedged")."""
        if side not in ("unhedged", "hedged"):
            raise ValueError(f"side must be 'unhedged' or 'hedged', not {side!r}.")
        lo, hi = interval(self.table[side], self.table[f"{side}_se"],
                          self.confidence if level is None else level)
        return pd.DataFrame({"low": lo, "high": hi}, index=self.table.index)

    def to_frame(self) -> pd.DataFrame:
        """The scenario table (one row per scenario and reading)."""
        return self.table.copy()

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dict: ``scenarios`` list plus ``replay`` and ``recession``."""
        rows = []
        for i, r in enumerate(self.table.itertuples(index=False)):
            rows.append({
                "name": r.scenario,
                "reading": r.reading,
                "label": r.label,
                "description": r.description,
                "largest_sd": r.largest_sd,
                "largest_sd_variable": r.largest_sd_variable,
                "sample_max_sd": r.sample_max_sd,
                "sample_max_date": r.sample_max_date,
                "beyond_sample": r.beyond_sample,
                "size_by_variable": self.sizes.get(i, {}),
                "mahalanobis": r.mahalanobis,
                "surprise": self.surprises.iloc[i].to_dict(),
                "shocks": self.shocks.iloc[i].to_dict(),
                "contributions": {
                    "unhedged": self.contributions_unhedged.iloc[i].to_dict(),
                    "hedged": self.contributions_hedged.iloc[i].to_dict(),
                },
                "pnl": {
                    side: {
                        "return": getattr(r, f"{side}"),
                        "se": getattr(r, f"{side}_se"),
                        "lo": getattr(r, f"{side}_lo"),
                        "hi": getattr(r, f"{side}_hi"),
                        "interval": [getattr(r, f"{side}_lo"), getattr(r, f"{side}_hi")],
                        "currency": getattr(r, f"{side}_ccy"),
                        "currency_lo": getattr(r, f"{side}_ccy_lo"),
                        "currency_hi": getattr(r, f"{side}_ccy_hi"),
                    }
                    for side in ("unhedged", "hedged")
                },
            })
        replay = self.replay
        return jsonable({
            "factors": list(self.factors),
            "nav": self.nav,
            "confidence": self.confidence,
            "level_label": level_label(self.confidence),
            "sample": self.sample,
            "period_label": self.period_label,
            "book_betas": self.book_betas.to_dict(),
            "hedged_betas": self.hedged_betas.to_dict(),
            "scenarios": rows,
            "replay": {
                "period_label": self.period_label,
                "periods": [] if replay is None else _records(replay),
                "months": [] if self.replay_months is None else _records(self.replay_months),
                "quarters": [] if self.replay_quarters is None else _records(self.replay_quarters),
            },
            "recession": self.recession,
            "warnings": list(self.warnings),
        })


def _nearest(name: str, valid: Sequence[str]) -> str:
    close = difflib.get_close_matches(name, list(valid), n=1)
    return f"'{close[0]}'" if close else "one of " + ", ".join(f"'{v}'" for v in valid)


def _check_inputs(book_betas: pd.Series, transform: pd.DataFrame, sigma_u: pd.DataFrame,
                  market: str) -> list[str]:
    variables = [str(v) for v in transform.index]
    if list(map(str, transform.columns)) != variables:
        raise InputError("the transform M must be square with the same variables as rows and "
                         "columns, in orthogonalisation order.", column=None,
                         fix="pass StateResult.transform unchanged.")
    if sorted(map(str, sigma_u.index)) != sorted(variables) or sorted(
            map(str, sigma_u.columns)) != sorted(variables):
        raise InputError("sigma_u must cover the same variables as the transform.",
                         fix="pass StateResult.sigma_u unchanged.")
    if variables[0] != market:
        raise InputError(f"[states] market = '{market}' must come first in the "
                         f"orthogonalisation order, but '{variables[0]}' is first.",
                         fix="put the market column first in [states] order.")
    missing = [v for v in variables if v not in book_betas.index]
    if missing:
        raise InputError(f"book betas lack the factors {missing}.", column=missing[0],
                         fix="estimate the book's exposure on the factors of the state VAR.")
    m = transform.to_numpy(dtype=float)
    if not np.all(np.isfinite(m)) or not np.allclose(np.triu(m, 1), 0.0, atol=1e-12):
        raise InputError("the transform M must be finite and lower triangular.",
                         fix="pass StateResult.transform unchanged.")
    return variables


def _aligned(series: pd.Series | None, variables: list[str], name: str) -> np.ndarray:
    if series is None:
        return np.zeros(len(variables))
    extra = [v for v in variables if v not in series.index]
    if extra:
        raise InputError(f"{name} lacks the factors {extra}.", column=extra[0],
                         fix=f"give {name} on every factor of the state VAR.")
    out = series.reindex(variables).to_numpy(dtype=float)
    return np.where(np.isfinite(out), out, 0.0) if name.endswith("_se") else out


def overlay_exposure(positions: pd.Series, instrument_betas: pd.DataFrame,
                     instrument_se: pd.DataFrame | None = None) -> tuple[pd.Series, pd.Series]:
    """The overlay's factor exposure ``B_H h`` and its standard error.

    ``instrument_betas`` is instrument × factor.  Under independence across instruments'
    estimates, ``se_f = sqrt(sum_j h_j^2 se_jf^2)`` (common practice approximation).
    """
    h = positions.reindex(instrument_betas.index).fillna(0.0).to_numpy(dtype=float)
    betas = pd.Series(h @ instrument_betas.to_numpy(dtype=float), index=instrument_betas.columns)
    if instrument_se is None:
        se = pd.Series(0.0, index=instrument_betas.columns)
    else:
        s = instrument_se.reindex(index=instrument_betas.index,
                                  columns=instrument_betas.columns).fillna(0.0)
        se = pd.Series(np.sqrt((h ** 2) @ (s.to_numpy(dtype=float) ** 2)),
                       index=instrument_betas.columns)
    return betas, se


def scenario_shocks(transform: pd.DataFrame, sigma_u: pd.DataFrame,
                    surprises: pd.DataFrame, readings: Sequence[str]) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Map natural-unit surprises (rows: scenarios) to orthogonal shocks, all at once.

    Returns ``(filled, shocks)``: the raw surprise vector after the reading (NaN = not
    named) and ``g = M s``.  ``"comove"`` fills the unnamed raw surprises with
    ``Sigma_{.J} Sigma_{JJ}^{-1} s_J`` (multivariate-normal conditional mean).
    """
    variables = list(transform.index)
    sig = sigma_u.reindex(index=variables, columns=variables).to_numpy(dtype=float)
    s = surprises.reindex(columns=variables).to_numpy(dtype=float)
    named = np.isfinite(s)
    filled = np.where(named, s, 0.0)
    for i, reading in enumerate(readings):  # loop over scenarios (a handful), not months
        if reading == "comove":
            j = named[i]
            if j.any() and not j.all():
                coef = np.linalg.solve(sig[np.ix_(j, j)], s[i, j])
                filled[i] = sig[:, j] @ coef
    shocks = filled @ transform.to_numpy(dtype=float).T
    return (pd.DataFrame(filled, index=surprises.index, columns=variables),
            pd.DataFrame(shocks, index=surprises.index, columns=variables))


def _unit(index: pd.Index) -> str:
    """The word for the periods of ``index``, plural: quarters or months."""
    q = isinstance(index, pd.PeriodIndex) and index.freqstr.startswith("Q")
    return "quarters" if q else "months"


def _scenario_sizes(spec: np.ndarray, sd: np.ndarray, raw: pd.DataFrame | None,
                    variables: list[str]) -> tuple[pd.DataFrame, dict[int, dict]]:
    """``largest_sd`` and the sample's largest move of the same variable in the same direction.

    Columns: ``largest_sd``, ``largest_sd_variable``, ``sample_max_sd``, ``sample_max_date``,
    ``beyond_sample`` (see the module docstring); plus, by row, ``{variable: {shock_sd,
    sample_max_sd, sample_max_date}}`` for every named variable.
    """
    named = np.isfinite(spec)
    ratio = np.where(named, np.abs(spec) / sd, np.nan)
    with np.errstate(invalid="ignore"):
        worst = np.nanargmax(np.where(named, ratio, -np.inf), axis=1)
    rows = np.arange(len(spec))
    largest = ratio[rows, worst]
    up = down = up_at = down_at = None
    if raw is not None and len(raw):
        u = raw.to_numpy(dtype=float)
        up, down = u.max(axis=0) / sd, (-u).max(axis=0) / sd
        up_at, down_at = raw.index[u.argmax(axis=0)], raw.index[u.argmin(axis=0)]

    def sample_move(j: int, sign: float) -> tuple[float | None, str | None]:
        if up is None:
            return None, None
        return (float(up[j]), str(up_at[j])) if sign >= 0 else (float(down[j]), str(down_at[j]))

    top = [sample_move(int(worst[i]), spec[i, worst[i]]) for i in rows]  # a handful of rows
    sample_max = np.array([np.nan if m is None else m for m, _ in top])
    beyond = largest > (sample_max if up is not None else SIZE_WARN_SD)
    frame = pd.DataFrame({
        "largest_sd": largest,
        "largest_sd_variable": [variables[j] for j in worst],
        "sample_max_sd": sample_max,
        "sample_max_date": [d for _, d in top],
        "beyond_sample": beyond,
    })
    detail = {int(i): {variables[j]: dict(zip(("shock_sd", "sample_max_sd", "sample_max_date"),
                                               (float(ratio[i, j]),
                                                *sample_move(j, spec[i, j])), strict=True))
                       for j in np.flatnonzero(named[i])} for i in rows}
    return frame, detail


def _recession_surprise(raw: pd.DataFrame, book: np.ndarray, m: np.ndarray,
                        quantile: float) -> tuple[pd.Series, dict[str, Any]]:
    """Mean raw innovation over the periods where the book's state P&L ``b'M u_t`` is worst
    (``n_months`` is kept as the count's old key; ``n_periods`` and ``period_label`` say
    how many and which periods)."""
    clean = raw.dropna()
    if clean.empty:
        raise InputError("raw innovations are all missing; the sample recession cannot be sized.",
                         fix="pass StateResult.raw.")
    pnl = clean.to_numpy(dtype=float) @ m.T @ book
    n = max(1, math.ceil(quantile * len(pnl)))
    worst = np.argsort(pnl, kind="stable")[:n]
    surprise = clean.iloc[worst].mean()
    info = {
        "quantile": quantile,
        "n_months": int(n),
        "n_periods": int(n),
        "period_label": _unit(clean.index),
        "dates": [str(d) for d in clean.index[np.sort(worst)]],
        "surprise": surprise.to_dict(),
        "threshold_pnl": float(pnl[worst].max()),
    }
    return surprise, info


def _variable_words(name: str) -> str:
    return VARIABLE_WORDS.get(name, name)


def _describe(shocks: Mapping[str, float], market: str) -> str:
    """Words for a shock set: the market in %, levels in bp ("default spread +150 bp")."""
    return ", ".join(f"{_variable_words(v)} {100 * x:+g} %" if v == market
                     else f"{_variable_words(v)} {1e4 * x:+g} bp" for v, x in shocks.items())


def _check_scale(where: str, var: str, value: float, *, market: bool) -> None:
    """Refuse a shock beyond :data:`SHOCK_BOUNDS` for its kind: a unit slip, not a scenario."""
    bound = SHOCK_BOUNDS["market" if market else "level"]
    if abs(value) <= bound:
        return
    if market:
        kind = f"a market excess return beyond {bound:g} (100 %)"
        fix = f"write {value / 100:g} for {value:+g} %."
    else:
        kind = f"a spread, rate or yield move beyond {bound:g} ({bound * 1e4:,.0f} bp)"
        fix = (f"write {value / 1e4:g} for {value:+g} bp." if abs(value) >= 1
               else f"write {value / 100:g} for {value:+g} % ({value * 100:+g} bp).")
    raise InputError(f"{where}: shocks.{var} = {value:g} is {kind}; shocks are decimals "
                     "(0.01 is +100 bp, -0.20 is -20 %).", fix=fix)


def _parse_scenarios(scenarios: Sequence[Mapping[str, Any]] | None, variables: list[str],
                     include_builtin: bool, warnings: list[str]) -> list[tuple[str, str, str, dict]]:
    """Expand scenarios into (name, reading, description, shocks) rows.

    A user scenario named like a built-in one replaces it; two user scenarios may not share
    a name.
    """
    user: list[tuple[str, str, str, dict]] = []
    seen: dict[str, int] = {}
    for k, sc in enumerate(scenarios or []):
        where = f"{_SCENARIOS} number {k + 1}"
        if not isinstance(sc, Mapping) or "shocks" not in sc:
            raise InputError(f"{where} needs a name and a shocks table.",
                             fix="write name = \"...\" and shocks = { term = 0.01 }.")
        name = str(sc.get("name", f"scenario_{k + 1}"))
        if name in seen:
            raise InputError(f"{where} repeats the name '{name}' of number {seen[name]}.",
                             fix="give each scenario its own name.")
        seen[name] = k + 1
        where = f"{where} ('{name}')"
        shocks = sc["shocks"]
        if not isinstance(shocks, Mapping) or not shocks:
            raise InputError(f"{where} has no shocks.",
                             fix="give at least one variable and its surprise, e.g. term = 0.01.")
        clean = {}
        for var, x in shocks.items():
            if var not in variables:
                raise InputError(f"{where} shocks '{var}', which is not a state variable "
                                 f"({', '.join(variables)}).",
                                 fix=f"did you mean {_nearest(str(var), variables)}?")
            try:
                val = float(x)
            except (TypeError, ValueError):
                raise InputError(f"{where}: shocks.{var} = {x!r} is not a number.",
                                 fix="give decimals: +100 bp is 0.01, -20 % is -0.20.") from None
            if not math.isfinite(val):
                raise InputError(f"{where}: shocks.{var} = {x!r} is not finite.",
                                 fix="give a finite decimal.")
            _check_scale(where, str(var), val, market=str(var) == variables[0])
            clean[str(var)] = val
        reading = str(sc.get("reading", "both"))
        if reading in ("co-move", "co_move", "typical"):
            reading = "comove"
        if reading not in (*READINGS, "both"):
            raise InputError(f"{where}: reading = '{reading}' is an unknown reading.",
                             fix=f"use {_nearest(reading, [*READINGS, 'both'])}.")
        desc = str(sc.get("description", _describe(clean, variables[0])))
        for r in (READINGS if reading == "both" else (reading,)):
            user.append((name, r, desc, clean))
    rows: list[tuple[str, str, str, dict]] = []
    if include_builtin:
        for name, spec in BUILTIN_SCENARIOS.items():
            if name in seen:
                warnings.append(f"scenario '{name}' of {_SCENARIOS} number {seen[name]} "
                                "replaces the built-in scenario of the same name.")
                continue
            if spec["shocks"] is None:
                continue
            shocks = dict(spec["shocks"])
            if _MARKET_KEY in shocks and _MARKET_KEY not in variables:
                shocks[variables[0]] = shocks.pop(_MARKET_KEY)
            unknown = [k for k in shocks if k not in variables]
            if unknown:
                warnings.append(f"built-in scenario '{name}' skipped: no state variable "
                                f"named {unknown[0]!r}.")
                continue
            rows += [(name, r, spec["description"], shocks) for r in READINGS]
    return rows + user


def _worst_periods(pnl: pd.DataFrame, hedged: pd.DataFrame, values: pd.DataFrame,
                   model_unhedged: pd.Series, model_hedged: pd.Series,
                   realised: pd.Series | None, k: int) -> pd.DataFrame:
    """The k most negative periods of each column of ``pnl`` (book contributions)."""
    out = []
    for col in pnl.columns:  # loop over factors and the total, not over months
        ranked = pnl[col].dropna().sort_values(kind="stable").iloc[:k]
        idx = ranked.index
        out.append(pd.DataFrame({
            "ranked_by": col,
            "rank": np.arange(1, len(idx) + 1),
            "date": idx,
            "innovation": values[col].reindex(idx).to_numpy() if col in values else np.nan,
            "contribution_unhedged": ranked.to_numpy(),
            "contribution_hedged": hedged[col].reindex(idx).to_numpy(),
            "model_unhedged": model_unhedged.reindex(idx).to_numpy(),
            "model_hedged": model_hedged.reindex(idx).to_numpy(),
            "realised": (realised.reindex(idx).to_numpy() if realised is not None
                         else np.full(len(idx), np.nan)),
        }))
    return pd.concat(out, ignore_index=True).rename_axis(INDEX_NAME)


def historical_replay(factors: pd.DataFrame, book_betas: pd.Series, hedged_betas: pd.Series, *,
                      book_returns: pd.Series | None = None, worst_k: int = 5,
                      nav: float = 1.0) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Worst months and calendar quarters of the sample, replayed through the betas.

    Model (state-driven) P&L of a month is ``b' f_t`` (factors as estimated, market return
    first); a factor's contribution is ``b_f f_{f,t}``.  For each factor the ``worst_k``
    periods with the most negative contribution, and for ``"book"`` those with the most
    negative model P&L, are listed with the hedged model P&L ``(b + B_H h)' f_t`` and the
    realised book return.  Quarters sum the monthly values of complete calendar quarters
    (the sum of simple returns, a common practice approximation to compounding).
    Currency columns are ``× nav``.
    """
    cols = list(factors.columns)
    b = book_betas.reindex(cols).to_numpy(dtype=float)
    bh = hedged_betas.reindex(cols).to_numpy(dtype=float)
    f = factors.astype(float)
    contrib = f * b
    contrib_h = f * bh
    model = pd.Series(f.to_numpy() @ b, index=f.index).where(f.notna().all(axis=1))
    model_h = pd.Series(f.to_numpy() @ bh, index=f.index).where(f.notna().all(axis=1))
    realised = None if book_returns is None else book_returns.reindex(f.index).astype(float)

    def table(c, ch, v, mu, mh, rr):
        c = c.assign(book=mu)
        ch = ch.assign(book=mh)
        out = _worst_periods(c, ch, v, mu, mh, rr, worst_k)
        for col in ("contribution_unhedged", "contribution_hedged", "model_unhedged",
                    "model_hedged", "realised"):
            out[f"{col}_ccy"] = out[col] * nav
        return out

    months = table(contrib, contrib_h, f, model, model_h, realised)

    if not isinstance(f.index, pd.PeriodIndex) or f.index.freqstr not in ("M",):
        return months, months.iloc[0:0].copy()
    q = f.index.asfreq("Q")
    full = pd.Series(1, index=f.index).where(f.notna().all(axis=1)).groupby(q).count() == 3

    def qsum(x):
        s = x.groupby(q).sum(min_count=1)
        return s[full.reindex(s.index, fill_value=False).to_numpy()]

    rq = None
    if realised is not None:
        rq = realised.groupby(q).sum(min_count=3)
        rq = rq[full.reindex(rq.index, fill_value=False).to_numpy()]
    fq = qsum(f)
    quarters = table(qsum(contrib), qsum(contrib_h), fq, qsum(model), qsum(model_h), rq)
    return months, quarters


def run_stress(book_betas: pd.Series, transform: pd.DataFrame, sigma_u: pd.DataFrame, *,
               nav: float, market: str | None = None, overlay_betas: pd.Series | None = None,
               scenarios: Sequence[Mapping[str, Any]] | None = None,
               include_builtin: bool = True, book_se: pd.Series | None = None,
               overlay_se: pd.Series | None = None, positions: pd.Series | None = None,
               instrument_betas: pd.DataFrame | None = None,
               instrument_se: pd.DataFrame | None = None,
               raw_innovations: pd.DataFrame | None = None,
               factors: pd.DataFrame | None = None, book_returns: pd.Series | None = None,
               worst_k: int = 5, recession_quantile: float = 0.05,
               confidence: float = 0.95) -> StressResult:
    """Scenario P&L ``b' M s`` of the book before and after the overlay.

    ``book_betas`` and ``overlay_betas`` (``B_H h``) are indexed by factor (the state
    variables, market first); the hedged book's betas are their sum.  ``transform`` is
    ``M`` and ``sigma_u`` the raw innovation covariance of the state VAR.  ``scenarios``
    are dicts ``{name, shocks: {var: x}, reading}`` with ``reading`` in ``"isolated"``,
    ``"comove"`` or ``"both"`` (default).  With ``raw_innovations`` the built-in
    ``sample_recession`` is the mean raw innovation over the ``recession_quantile`` worst
    months of ``b' M u_t``.  With ``factors`` (and optionally ``book_returns``) the worst
    ``worst_k`` months and quarters are replayed.  Intervals at ``confidence`` use the
    normal quantile and independent beta errors (see the module docstring).  Instead of
    ``overlay_betas``/``overlay_se`` the overlay may be given as ``positions`` (weights of
    NAV by instrument) with ``instrument_betas`` (instrument × factor) and optionally
    ``instrument_se``; see :func:`overlay_exposure`.
    """
    if not (isinstance(nav, int | float) and math.isfinite(nav) and nav > 0):
        raise InputError(f"[portfolio] nav = {nav!r}: the NAV must be a positive number.",
                         fix="set it to the book's value in currency units.")
    try:
        confidence = check_level(confidence)
    except (TypeError, ValueError):
        raise InputError(f"[intervals] confidence = {confidence!r} must lie in [0.5, 1).",
                         fix="use for example 0.95.") from None
    if not 0 < recession_quantile < 1:
        raise InputError(f"[stress] recession_quantile = {recession_quantile!r} must lie "
                         "between 0 and 1.", fix="use for example 0.05.")
    if worst_k < 1:
        raise InputError(f"[stress] worst_k = {worst_k!r} must be at least 1.",
                         fix="use for example 5.")
    if positions is not None:
        if overlay_betas is not None:
            raise InputError("give the overlay as overlay_betas or as positions, not both.",
                             fix="pass HedgeResult.positions with the instruments' betas.")
        if instrument_betas is None:
            raise InputError("positions need the instruments' betas to give the overlay's "
                             "exposure.", fix="pass instrument_betas (instrument x factor).")
        unknown = [str(i) for i in positions.index if i not in instrument_betas.index]
        if unknown:
            raise InputError(f"positions in instruments without betas: {unknown}.",
                             column=unknown[0], fix="estimate every held instrument's betas.")
        overlay_betas, se = overlay_exposure(positions, instrument_betas, instrument_se)
        overlay_se = se if instrument_se is not None else overlay_se
    market = market if market is not None else str(transform.index[0])
    variables = _check_inputs(book_betas, transform, sigma_u, market)
    warnings: list[str] = []
    b = _aligned(book_betas, variables, "book_betas")
    o = _aligned(overlay_betas, variables, "overlay_betas")
    se_b = _aligned(book_se, variables, "book_se")
    se_o = _aligned(overlay_se, variables, "overlay_se")
    if not np.all(np.isfinite(b)) or not np.all(np.isfinite(o)):
        raise InputError("book or overlay betas contain missing values.",
                         fix="estimate every factor's beta before the stress step.")
    if book_se is None:
        warnings.append("no standard errors for the book's betas: intervals cover the overlay's "
                        "estimation error only.")
    m = transform.to_numpy(dtype=float)
    if not np.isclose(m[0, 0], 1.0) or not np.allclose(m[0, 1:], 0.0):
        warnings.append("the first row of M is not [1, 0, ...]: the market factor's shock is "
                        "not the market surprise itself.")

    rows = _parse_scenarios(scenarios, variables, include_builtin, warnings)
    recession = None
    replaced = any(r[0] == "sample_recession" for r in rows)
    if include_builtin and replaced:
        pass                          # the user's own sample_recession stands in for it
    elif include_builtin and raw_innovations is not None:
        raw = raw_innovations.reindex(columns=variables)
        surprise, recession = _recession_surprise(raw, b, m, recession_quantile)
        rows.append((
            "sample_recession", "isolated",
            BUILTIN_SCENARIOS["sample_recession"]["description"].format(
                periods=recession["period_label"])
            + f": {recession['n_periods']} {recession['period_label']}, the worst "
              f"{recession_quantile:.0%}", surprise.to_dict()))
    elif include_builtin:
        warnings.append("no raw innovations given: the sample_recession scenario is left out.")
    if not rows:
        raise InputError("no scenarios to run.", fix="keep the built-in set or add scenarios.")

    spec = pd.DataFrame([r[3] for r in rows], columns=variables, dtype=float)
    readings = [r[1] for r in rows]
    filled, shocks = scenario_shocks(transform, sigma_u, spec, readings)
    g = shocks.to_numpy()
    bh = b + o
    pnl_u = g @ b
    pnl_h = g @ bh
    se_u = np.sqrt((g ** 2) @ (se_b ** 2))
    se_h = np.sqrt((g ** 2) @ (se_b ** 2 + se_o ** 2))
    table = pd.DataFrame({
        "scenario": [r[0] for r in rows],
        "reading": readings,
        "description": [r[2] for r in rows],
        "label": [f"{r[2]} ({r[1]})" for r in rows],
    }).rename_axis(INDEX_NAME)
    for side, p, s in (("unhedged", pnl_u, se_u), ("hedged", pnl_h, se_h)):
        lo, hi = interval(p, s, confidence)
        table[side] = p
        table[f"{side}_se"] = s
        table[f"{side}_lo"] = lo
        table[f"{side}_hi"] = hi
        table[f"{side}_ccy"] = p * nav
        table[f"{side}_ccy_lo"] = lo * nav
        table[f"{side}_ccy_hi"] = hi * nav
    table["hedge_saves_ccy"] = (pnl_h - pnl_u) * nav
    # How far out a scenario is: the largest named surprise in innovation standard
    # deviations beside the sample's largest move, and the Mahalanobis distance
    # sqrt(s' Sigma_u^{-1} s) of the whole raw surprise (common practice).
    sig = sigma_u.reindex(index=variables, columns=variables).to_numpy(dtype=float)
    sd = np.sqrt(np.diag(sig))
    raw_sample = None if raw_innovations is None else \
        raw_innovations.reindex(columns=variables).dropna()
    sizes, size_detail = _scenario_sizes(spec.to_numpy(), sd, raw_sample, variables)
    for col in sizes.columns:
        table[col] = sizes[col].to_numpy()
    fill = filled.to_numpy()
    table["mahalanobis"] = np.sqrt(np.einsum("si,si->s", fill, np.linalg.solve(sig, fill.T).T))
    warnings += _size_warnings(table, raw_sample)

    book_s = pd.Series(b, index=variables, name="book")
    hedged_s = pd.Series(bh, index=variables, name="hedged")
    replay_m = replay_q = None
    span = raw_sample.index if raw_sample is not None else None
    if factors is not None:
        missing = [v for v in variables if v not in factors.columns]
        if missing:
            raise InputError(f"the factor frame lacks {missing}.", column=missing[0],
                             fix="pass StateResult.factors(market_data).")
        replay_m, replay_q = historical_replay(factors[variables], book_s, hedged_s,
                                               book_returns=book_returns, worst_k=worst_k,
                                               nav=float(nav))
        if _unit(factors.index) == "quarters":   # the primary table holds quarters
            replay_m, replay_q = None, replay_m
        if span is None:
            span = factors[variables].dropna().index
    return StressResult(
        factors=tuple(variables), nav=float(nav), confidence=float(confidence), table=table,
        shocks=shocks.set_axis(table.index), surprises=filled.set_axis(table.index),
        contributions_unhedged=(shocks * b).set_axis(table.index),
        contributions_hedged=(shocks * bh).set_axis(table.index),
        replay_months=replay_m, replay_quarters=replay_q, recession=recession,
        book_betas=book_s, hedged_betas=hedged_s, warnings=tuple(warnings),
        period_label=_unit(span) if span is not None else "months",
        sample=_sample(span) if span is not None else None, sizes=size_detail,
    )


def _size_warnings(table: pd.DataFrame, raw: pd.DataFrame | None) -> list[str]:
    """One warning naming every scenario whose largest surprise is beyond the sample's
    largest move (or beyond :data:`SIZE_WARN_SD` without the sample)."""
    first = table[table["beyond_sample"]].drop_duplicates("scenario")  # same in both readings
    if first.empty:
        return []
    beyond = ("the largest move of the sample in that direction" if raw is not None
              else f"{SIZE_WARN_SD:g} sd")
    if len(first) == 1:
        r = first.iloc[0]
        var = _variable_words(str(r["largest_sd_variable"]))
        said = (f" ({r['sample_max_sd']:.1f} sd, {r['sample_max_date']}): a move the sample "
                "never saw" if raw is not None else "")
        return [f"scenario '{r['scenario']}' moves the {var} by {r['largest_sd']:.1f} sd of its "
                f"innovation, beyond {beyond}{said}."]
    parts = [f"'{r.scenario}' ({_variable_words(str(r.largest_sd_variable))} "
             f"{r.largest_sd:.1f} sd"
             + (f" against {r.sample_max_sd:.1f} sd at most, {r.sample_max_date})"
                if raw is not None else ")")
             for r in first.itertuples()]
    tail = ": moves the sample never saw" if raw is not None else ""
    return [f"{len(first)} scenarios move a variable by more standard deviations of its "
            f"innovation than {beyond}{tail}: {'; '.join(parts)}."]
