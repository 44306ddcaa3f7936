"""Wiring: map a validated :class:`Config` and :class:`Dataset` onto the stage calls.

Data flow one way: states -> exposures -> premia -> hedge -> stress / backtest. Every
function here is a thin adapter: the numbers come from the stage modules, and the run
record (:class:`hedgekit.record.RunResult`) holds them.

The work splits in two: the *universe* (everything that does not depend on the book:
states, factors, prices of risk on the test assets, the instrument covariance) and the
*book* (its exposure, the hedge, the stress and the walk-forward). A single run is
:func:`prepare_universe` then :func:`run_book`; a batch computes the universe once per
group of books that share their inputs (:mod:`hedgekit.batch`).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import pandas as pd

from .config import Config
from .errors import InputError
from .inputs import Dataset, check_common_months, load_dataset
from .record import RunResult, confidence_level

Progress = Callable[[str], None] | None


def _cfg_file(config: Config) -> str:
    return str(config.path) if config.path else "configuration"


def market_name(config: Config, data: Dataset) -> str:
    st = config["states"]
    if data.factors is not None:
        return st["market"] or str(data.factors.columns[0])
    return st["market"] or (st["order"][0] if st["order"] else str(data.states.columns[0]))


# --------------------------------------------------------------------------- states

@dataclass(frozen=True)
class FactorSet:
    """The factors every later stage uses, with the scenario map that goes with them."""

    factors: pd.DataFrame
    market: str
    states: Any | None            # StateResult, or None in factors-file mode
    transform: pd.DataFrame       # M (identity in factors-file mode)
    sigma_u: pd.DataFrame         # raw innovation covariance (factor covariance in factors mode)
    raw: pd.DataFrame             # raw innovations (the factors themselves in factors mode)
    source: str                   # "var" or "factors file"


def run_states(config: Config, data: Dataset):
    from .states import estimate_states
    st = config["states"]
    if data.states is None:
        raise InputError("the states command needs [data] states (the VAR is skipped with a factors file).",
                         file=_cfg_file(config))
    return estimate_states(data.states, lags=st["lags"], max_lags=st["max_lags"])


def factor_set(config: Config, data: Dataset) -> FactorSet:
    market = market_name(config, data)
    if data.factors is not None:
        f = data.factors.dropna()
        if market not in f.columns:
            raise InputError(f"the market factor {market!r} is not a column of the factors file.",
                             file=data.factors.attrs.get("file"), row=1, fix="set [states] market.")
        cols = [market] + [c for c in f.columns if c != market]
        f = f[cols]
        eye = pd.DataFrame(np.eye(len(cols)), index=cols, columns=cols)
        return FactorSet(f, market, None, eye, f.cov(), f - f.mean(), "factors file")
    states = run_states(config, data)
    f = states.factors(use=config["states"]["market_factor"])
    return FactorSet(f, market, states, states.transform, states.sigma_u, states.raw, "var")


# --------------------------------------------------------------------------- exposures

def _window(config: Config) -> int | None:
    w = config["exposures"]["window"]
    return None if w == "full" else int(w)


def run_exposures(config: Config, data: Dataset, fs: FactorSet):
    from .exposures import estimate_exposures
    ex = config["exposures"]
    if data.assets is None:
        raise InputError("[data] assets is needed for exposures.", file=_cfg_file(config))
    window = _window(config)
    check_common_months(data.assets, fs.factors, ex["min_obs"], "the exposures")
    holdings = data.holdings
    if holdings is None and data.portfolio_returns is None:
        raise InputError("neither [data] holdings nor [data] portfolio_returns is set; the book's exposure "
                         "needs one of them.", file=_cfg_file(config),
                         fix='add holdings = "holdings.csv" under [data].')
    periods = len(fs.factors)
    unit = "quarters" if data.frequency == "quarterly" else "months"
    k = fs.factors.shape[1]
    if window is not None and window < k + 2:
        raise InputError(f"[exposures] window = {window} is too short for {k} factors and an intercept.",
                         file=_cfg_file(config), fix=f"use at least {k + 2} (60 months is the usual choice).")
    if ex["min_obs"] < k + 2:
        raise InputError(f"[exposures] min_obs = {ex['min_obs']} is below the {k + 2} {unit} a regression on "
                         f"{k} factors needs.", file=_cfg_file(config), fix=f"use at least {k + 2}.")
    lags = ex["hac_lags"]
    if isinstance(lags, int) and lags >= periods:
        raise InputError(f"[exposures] hac_lags = {lags} is not below the {periods} {unit} of the sample.",
                         file=_cfg_file(config), fix='use "auto" (floor(4 (T/100)^(2/9))) or a smaller number.')
    notes: list[str] = []
    if window is not None and window >= periods:
        notes.append(f"[exposures] window = {window} is not shorter than the sample ({periods} {unit}): the "
                     "rolling exposures are expanding-window estimates.")
    if holdings is not None:
        held = data.assets[holdings.index].reindex(fs.factors.index)
        valid = held.notna().sum()
        last = held.apply(lambda c: c.last_valid_index())
        end = fs.factors.index[-1]
        for name in holdings.index[valid.to_numpy() < ex["min_obs"]]:
            notes.append(f"held asset {name!r} has {int(valid[name])} valid {unit}, fewer than [exposures] "
                         f"min_obs = {ex['min_obs']}: its beta is unreliable or missing.")
        for name in holdings.index:
            if last[name] is not None and (end - last[name]).n >= (12 if unit == "months" else 4):
                notes.append(f"held asset {name!r} has no returns after {last[name]} (the sample ends {end}): "
                             "its exposure is estimated on old data.")
    res = estimate_exposures(fs.factors, data.assets, instruments=data.instruments, holdings=holdings,
                             portfolio_returns=data.portfolio_returns, window=window,
                             min_obs=ex["min_obs"], hac_lags=ex["hac_lags"],
                             confidence=confidence_level(config), transform=fs.transform, sigma_u=fs.sigma_u,
                             nav=config["portfolio"]["nav"])  # per-surprise P&L only when NAV is set
    return replace(res, warnings=tuple(notes) + tuple(res.warnings)) if notes else res


def surprise_impacts(exposures, fs: FactorSet, nav: float, *, size: float = 0.01) -> pd.DataFrame:
    """The book's return and P&L for a natural-unit surprise in each state variable (computed by
    :func:`hedgekit.exposures.surprise_impacts`, the one implementation)."""
    from .exposures import surprise_impacts as impacts
    return impacts(exposures.book, fs.transform, fs.sigma_u, nav, size=size)


# --------------------------------------------------------------------------- premia

def require_nav(config: Config, what: str) -> float:
    """The NAV, for the stages that size P&L, notionals and contracts from it (the others need none)."""
    nav = config["portfolio"]["nav"]
    if nav is None:
        raise InputError(f"[portfolio] nav is required for {what}: P&L, notionals and contracts are sized from it.",
                         file=_cfg_file(config), fix="add nav = 250_000_000 (the net asset value in currency units) "
                                                     "under [portfolio].")
    return nav


@dataclass(frozen=True)
class AssetBetas:
    """The test assets' betas when no book is configured (the premia command needs no book)."""

    assets: Any
    rolling_assets: Any = None
    book: Any = None
    book_se: Any = None


def asset_betas_only(config: Config, data: Dataset, fs: FactorSet) -> AssetBetas:
    from .exposures import rolling_betas, time_series_betas
    ex = config["exposures"]
    check_common_months(data.assets, fs.factors, ex["min_obs"], "the exposures")
    window = _window(config)
    rolling = (rolling_betas(data.assets, fs.factors, window=window, min_obs=ex["min_obs"])
               if window is not None and config["premia"]["betas"] == "rolling" else None)
    return AssetBetas(time_series_betas(data.assets, fs.factors, hac_lags=ex["hac_lags"]), rolling)


def run_premia(config: Config, data: Dataset, fs: FactorSet, exposures):
    from .premia import fama_macbeth
    pr = config["premia"]
    if pr["betas"] == "rolling":
        if exposures.rolling_assets is None:
            raise InputError('[premia] betas = "rolling" needs a rolling [exposures] window, not "full".',
                             file=_cfg_file(config), fix="set [exposures] window = 60.")
        betas = exposures.rolling_assets.lagged()
    else:
        betas = exposures.assets.betas
    # GRS needs every factor to be a traded excess return: only the user can say so (factors file).
    # The market factor, when it is the market excess return, is priced by its own mean.
    traded = list(pr["traded"]) or ([fs.market] if fs.market in fs.factors.columns
                                    and config["states"]["market_factor"] == "return" else None)
    unknown = [f for f in (traded or []) if f not in fs.factors.columns]
    if unknown:
        raise InputError(f"[premia] traded names {unknown[0]!r}, not a factor ({', '.join(fs.factors.columns)}).",
                         file=_cfg_file(config))
    return fama_macbeth(data.assets, betas, factors=fs.factors, intercept=pr["intercept"],
                        nw_lags=pr["nw_lags"], traded=traded, book_betas=exposures.book,
                        book_se=exposures.book_se, periods_per_year=data.periods_per_year,
                        confidence=confidence_level(config))


def premia_by_factor(premia, factors) -> pd.Series | None:
    if premia is None:
        return None
    lam = premia.lambda_
    return lam.reindex([f for f in factors if f in lam.index])


# --------------------------------------------------------------------------- hedge

def hedge_spec(config: Config, data: Dataset):
    from .hedge import HedgeSpec
    h = config["hedge"]
    unknown = [i for i in h["exclude"] if data.sheet is not None and i not in data.sheet.index]
    if unknown:
        raise InputError(f"[hedge] exclude names {unknown[0]!r}, not an instrument of the sheet "
                         f"({', '.join(data.sheet.index)}).", file=_cfg_file(config))
    tol = h["tolerance"]
    if h["robust"] and h["neutralise"]:
        zero = [f for f in h["neutralise"] if (tol.get(f, 0.0) if isinstance(tol, Mapping) else tol) <= 0]
        if zero:
            raise InputError(f"[hedge] robust = true needs a positive tolerance for {', '.join(zero)}: the book's "
                             "own beta is uncertain, so no overlay can hold it at exactly zero across the "
                             "confidence region.", file=_cfg_file(config), fix="set e.g. tolerance = 0.05.")
    return HedgeSpec.from_sheet(data.sheet.reset_index(), neutralise=h["neutralise"], targets=dict(h["targets"]),
                                tolerance=dict(h["tolerance"]) if isinstance(h["tolerance"], Mapping)
                                else h["tolerance"],
                                keep={k: tuple(v) for k, v in h["keep"].items()}, max_gross=h["max_gross"],
                                exclude=h["exclude"], objective=h["objective"],
                                premium_weight=h["premium_weight"], robust=h["robust"],
                                confidence=confidence_level(config))


def _book_returns(data: Dataset, exposures) -> pd.Series:
    if data.holdings is not None and data.assets is not None:
        w = data.holdings
        r = data.assets[w.index]
        # months where every held asset is observed: the book's own return on that sample
        return (r @ w).where(r.notna().all(axis=1))
    return data.portfolio_returns


def run_hedge(config: Config, data: Dataset, fs: FactorSet, exposures, premia, *, closest: bool = False):
    from .hedge import design_overlay, instrument_covariance
    require_nav(config, "the hedge")
    if data.instruments is None or data.sheet is None or exposures.instruments is None:
        raise InputError("the hedge needs [data] instruments and [data] instrument_sheet.", file=_cfg_file(config))
    h = config["hedge"]
    spec = hedge_spec(config, data)
    sample = data.instruments.reindex(fs.factors.index).dropna()
    ppy = data.periods_per_year
    cov = instrument_covariance(sample, periods_per_year=ppy, method=h["covariance"])
    book_variance = book_cov = None
    if h["objective"] == "total":
        book = _book_returns(data, exposures).reindex(sample.index)
        ok = book.notna()
        joined = pd.concat([book[ok].rename("__book__"), sample[ok]], axis=1)
        c = joined.cov() * ppy
        book_variance = float(c.loc["__book__", "__book__"])
        book_cov = c.loc[list(sample.columns), "__book__"]
    return design_overlay(exposures.book, exposures.instruments.betas, cov, data.sheet, nav=config["portfolio"]["nav"],
                          spec=spec, premia=premia_by_factor(premia, fs.factors.columns),
                          current=data.current_positions, book_se=exposures.book_se,
                          instrument_se=exposures.instruments.se_hac, closest=closest or h["closest"],
                          periods_per_year=ppy, book_variance=book_variance, book_instrument_cov=book_cov,
                          premia_cov=None if premia is None else premia.cov_shanken,
                          confidence=confidence_level(config))


# --------------------------------------------------------------------------- stress

def run_stress_stage(config: Config, data: Dataset, fs: FactorSet, exposures, hedge):
    from .stress import overlay_exposure, run_stress
    require_nav(config, "the stress scenarios")
    s = config["stress"]
    overlay = overlay_se = None
    if hedge is not None and exposures.instruments is not None:
        overlay, overlay_se = overlay_exposure(hedge.positions, exposures.instruments.betas,
                                               exposures.instruments.se_hac)
    return run_stress(exposures.book, fs.transform, fs.sigma_u, nav=config["portfolio"]["nav"], market=fs.market,
                      overlay_betas=overlay, scenarios=list(s["scenarios"]), book_se=exposures.book_se,
                      overlay_se=overlay_se, raw_innovations=fs.raw, factors=fs.factors,
                      book_returns=_book_returns(data, exposures), worst_k=s["worst_k"],
                      recession_quantile=s["recession_quantile"], confidence=confidence_level(config))


# --------------------------------------------------------------------------- backtest

def run_backtest_stage(config: Config, data: Dataset, exposures, *, progress=None, rebalance: str | None = None):
    from .backtest import walk_forward
    require_nav(config, "the walk-forward check")
    if data.states is None:
        raise InputError("the walk-forward check re-estimates the VAR and needs [data] states.",
                         file=_cfg_file(config))
    b = config["backtest"]
    st = config["states"]
    spec = hedge_spec(config, data)
    window = None if b["window"] == "expanding" else int(b["window"])
    return walk_forward(data.states, _book_returns(data, exposures), data.instruments, data.sheet, spec=spec,
                        nav=config["portfolio"]["nav"], lags=st["lags"],
                        min_periods=b["min_periods"], window=window, beta_min_obs=config["exposures"]["min_obs"],
                        hac_lags=config["exposures"]["hac_lags"], asset_returns=data.assets,
                        nw_lags=config["premia"]["nw_lags"], premia_intercept=config["premia"]["intercept"],
                        beta_window=_window(config), rebalance=rebalance or b["rebalance"], start=b["start"],
                        periods_per_year=data.periods_per_year,
                        covariance_method=config["hedge"]["covariance"], progress=progress,
                        market=market_name(config, data), confidence=confidence_level(config))


# --------------------------------------------------------------------------- universe and book

@dataclass(frozen=True)
class Universe:
    """Book-independent results, shared by every book that uses the same inputs and settings."""

    factor_set: FactorSet


def prepare_universe(config: Config, data: Dataset, *, progress: Progress = None) -> Universe:
    """States and factors (the VAR, or the factors file)."""
    (progress or (lambda _msg: None))("states")
    return Universe(factor_set(config, data))


STAGE_ORDER = ("states", "exposures", "premia", "hedge", "stress")


@dataclass(frozen=True)
class Stages:
    """The results of the stages run so far (``None`` for those not reached)."""

    factor_set: FactorSet
    exposures: Any = None
    premia: Any = None
    hedge: Any = None
    stress: Any = None


def run_stages(config: Config, data: Dataset, until: str, *, closest: bool = False,
               progress: Progress = None, stress_unreachable: bool = True,
               universe: Universe | None = None) -> Stages:
    """Run the stages in order up to and including ``until`` (one of :data:`STAGE_ORDER`).

    With ``stress_unreachable=False`` an unreachable hedge is left out of the stress
    (the book is stressed without an overlay) unless ``closest`` asks for the closest one.
    """
    last = STAGE_ORDER.index(until)
    note = progress or (lambda _msg: None)
    uni = universe if universe is not None else prepare_universe(config, data, progress=progress)
    fs = uni.factor_set
    out: dict[str, Any] = {}
    if last >= 1:
        note("exposures")
        out["exposures"] = run_exposures(config, data, fs)
    if last >= 2:
        note("premia")
        out["premia"] = run_premia(config, data, fs, out["exposures"])
    if last >= 3:
        note("hedge")
        out["hedge"] = run_hedge(config, data, fs, out["exposures"], out["premia"], closest=closest)
    if last >= 4:
        note("stress")
        hedge = out["hedge"]
        if hedge.status != "optimal" and not (closest or stress_unreachable):
            hedge = None
        out["stress"] = run_stress_stage(config, data, fs, out["exposures"], hedge)
    return Stages(fs, **out)


def run_book(config: Config, data: Dataset, universe: Universe, *, backtest: bool = True,
             closest: bool = False, progress: Progress = None, backtest_progress=None) -> RunResult:
    """The book's part of the job on a prepared universe: exposure, hedge, stress, walk-forward."""
    st = run_stages(config, data, "stress", closest=closest, progress=progress, universe=universe)
    bt, skipped = None, ()
    if backtest:
        (progress or (lambda _msg: None))("backtest")
        try:
            bt = run_backtest_stage(config, data, st.exposures, progress=backtest_progress)
        except InputError as exc:  # the whole job goes on; the reason is a visible warning
            skipped = (f"walk-forward check skipped: {exc}",)
    run = RunResult.build(config, data, st.factor_set, st.exposures, st.premia, st.hedge, st.stress, bt)
    return replace(run, warnings=run.warnings + skipped) if skipped else run


def run_all(config: Config, *, data: Dataset | None = None, backtest: bool = True, closest: bool = False,
            progress: Progress = None, backtest_progress=None) -> RunResult:
    """The whole job: states, exposures, premia, hedge, stress and (by default) the walk-forward."""
    data = data if data is not None else load_dataset(config)
    universe = prepare_universe(config, data, progress=progress)
    return run_book(config, data, universe, backtest=backtest, closest=closest, progress=progress,
                    backtest_progress=backtest_progress)
