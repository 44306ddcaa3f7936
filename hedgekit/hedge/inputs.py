"""The overlay's inputs checked once and turned into aligned arrays (:class:`OverlayInputs`)."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import InputError
from .spec import (
    SHEET_COLUMNS,
    HedgeSpec,
    check_names,
    labels,
    limits,
    names_error,
    quoted,
    sheet_frame,
    take,
)


@dataclass(frozen=True, eq=False)
class OverlayInputs:
    """Everything ``design_overlay`` works from, in instrument (H) and factor (K) order.

    ``B`` is H x K, ``b`` the book's betas (K), ``sigma`` the annualised instrument
    covariance (H x H), ``risk`` a matrix R with R'R = sigma when the covariance came in
    factor form (None otherwise), ``unit`` the money value of one contract, ``lo``/``hi``/
    ``cost`` the weight bounds and one-way cost fractions, ``h0`` the current overlay,
    ``se_b``/``se_B`` the standard errors of b and B, ``lam`` the per-period prices of risk and
    ``lam_cov`` their covariance.
    """

    instruments: list[str]
    factors: list[str]
    active: np.ndarray
    B: np.ndarray
    b: np.ndarray
    sigma: np.ndarray
    risk: np.ndarray | None
    unit: np.ndarray
    nav: float
    lo: np.ndarray
    hi: np.ndarray
    cost: np.ndarray
    h0: np.ndarray
    se_b: np.ndarray | None
    se_B: np.ndarray | None
    lam: np.ndarray | None
    lam_cov: np.ndarray | None
    book_variance: float | None
    c_pH: np.ndarray | None
    sample: dict | None
    warnings: tuple[str, ...]

    @property
    def names_active(self) -> list[str]:
        return [i for i, a in zip(self.instruments, self.active, strict=True) if a]


def numeric(frame: pd.DataFrame | pd.Series, what: str) -> np.ndarray:
    try:
        arr = frame.to_numpy(dtype=float)
    except (TypeError, ValueError):     # text in a numeric field: report it as missing
        values = frame.apply(pd.to_numeric, errors="coerce") \
            if isinstance(frame, pd.DataFrame) else pd.to_numeric(frame, errors="coerce")
        arr = np.asarray(values, dtype=float)
    if not np.all(np.isfinite(arr)):
        raise InputError(f"{what} has missing or non-numeric values.",
                         fix=f"supply a number for every entry of {what}.")
    return arr


def current_weights(current: pd.Series, instruments: list[str]) -> np.ndarray:
    """Current overlay weights in instrument order (instruments not listed hold 0)."""
    cur = labels(pd.Series(current))
    bad = [i for i in cur.index if i not in instruments]
    if bad:
        raise names_error("the current-positions file", "instrument", bad, instruments)
    values = pd.to_numeric(cur, errors="coerce").to_numpy(dtype=float)
    for name, value in zip(cur.index, values, strict=True):
        if not math.isfinite(value):
            raise InputError(f"weight for '{name}' is blank or not finite.",
                             file="current-positions file", column="weight",
                             fix="give every listed instrument a weight (fraction of NAV), "
                                 "or drop its row.")
    return np.nan_to_num(take(pd.Series(values, index=cur.index), instruments)
                         .to_numpy(dtype=float))


def _contract_units(sheet: pd.DataFrame, instruments: list[str]) -> np.ndarray:
    missing = [i for i in instruments if i not in sheet.index]
    if missing:
        raise InputError(f"{quoted(missing)} {'is' if len(missing) == 1 else 'are'} not in "
                         "the instrument sheet.", file="instrument sheet", column="instrument",
                         fix="add a row with multiplier and price for each instrument.")
    for col in ("multiplier", "price"):
        if col not in sheet.columns:
            raise InputError(f"the instrument sheet has no '{col}' column.",
                             file="instrument sheet",
                             fix=f"columns needed: {', '.join(SHEET_COLUMNS)}.")
    sheet_h = take(sheet, instruments)
    unit = numeric(sheet_h["multiplier"], "multiplier") * numeric(sheet_h["price"], "price")
    if np.any(unit <= 0):
        bad = [i for i, u in zip(instruments, unit, strict=True) if u <= 0]
        raise InputError(f"price x multiplier is not positive for {quoted(bad)}.",
                         file="instrument sheet", column="price",
                         fix="prices and multipliers must be positive.")
    return unit


def _covariance(covariance: pd.DataFrame, instruments: list[str]
                ) -> tuple[np.ndarray, np.ndarray | None]:
    cov = labels(covariance)
    missing = [i for i in instruments if i not in cov.index or i not in cov.columns]
    if missing:
        raise InputError(f"the instrument covariance lacks {quoted(missing)}.",
                         fix="compute it with instrument_covariance on the same instruments.")
    sigma = numeric(take(cov, instruments, instruments), "instrument covariance")
    if not np.allclose(sigma, sigma.T, rtol=1e-8, atol=1e-14):
        raise InputError("the instrument covariance is not symmetric.",
                         fix="compute it with instrument_covariance.")
    form = covariance.attrs.get("factor_form")
    risk = None
    if form is not None:
        from .covariance import factor_risk_matrix
        risk = factor_risk_matrix(form, instruments)
    return sigma, risk


def _standard_errors(book_se, instrument_se, factors, instruments):
    if book_se is None and instrument_se is None:
        return None, None
    if book_se is None or instrument_se is None:
        raise InputError("give both book_se and instrument_se, or neither.",
                         fix="pass the standard errors from the exposures stage.")
    se_b = np.abs(numeric(take(labels(pd.Series(book_se)), factors), "book_se"))
    se_B = np.abs(numeric(take(labels(instrument_se), instruments, factors), "instrument_se"))
    return se_b, se_B


def _prices_of_risk(premia, premia_cov, factors, warnings: list[str]):
    if premia is None:
        if premia_cov is not None:
            raise InputError("premia_cov was given without premia.",
                             fix="pass the prices of risk with their covariance.")
        return None, None
    prem = labels(pd.Series(premia))
    absent = [f for f in factors if f not in prem.index]
    if absent:
        warnings.append(f"no price of risk for {quoted(absent)}: their premium counts as zero.")
    lam = np.nan_to_num(pd.to_numeric(take(prem, factors), errors="coerce").to_numpy(dtype=float))
    if premia_cov is None:
        return lam, None
    pc = labels(premia_cov)
    have = [f for f in factors if f in pc.index and f in pc.columns]
    lam_cov = np.zeros((len(factors), len(factors)))
    if have:
        pos = [factors.index(f) for f in have]
        lam_cov[np.ix_(pos, pos)] = numeric(take(pc, have, have), "premia_cov")
    return lam, lam_cov


def prepare(book_betas: pd.Series, instrument_betas: pd.DataFrame, covariance: pd.DataFrame,
            sheet: pd.DataFrame, *, nav: float, spec: HedgeSpec, premia, premia_cov, current,
            book_se, instrument_se, book_variance, book_instrument_cov) -> OverlayInputs:
    """Check every input (names, shapes, finiteness, signs) and align it; see OverlayInputs."""
    if not isinstance(instrument_betas, pd.DataFrame) or instrument_betas.empty:
        raise InputError("instrument betas must be a non-empty DataFrame (instrument x factor).",
                         fix="estimate the instruments' exposures first.")
    if not nav > 0 or not math.isfinite(nav):
        raise InputError(f"[portfolio] nav must be a positive number, got {nav}.",
                         fix="set [portfolio] nav to the fund's net asset value.")
    instruments = [str(i) for i in instrument_betas.index]
    factors = [str(f) for f in instrument_betas.columns]
    inst_b = take(instrument_betas, instruments, factors)
    check_names(spec, factors, instruments)
    sheet = sheet_frame(sheet)
    unit = _contract_units(sheet, instruments)

    book_b = labels(pd.Series(book_betas))
    lost = [f for f in factors if f not in book_b.index]
    if lost:
        raise InputError(f"the book's betas lack {quoted(lost)}.",
                         fix="estimate the book's exposure on the instruments' factors.")
    b = numeric(take(book_b, factors), "book betas")
    B = numeric(inst_b, "instrument betas")
    sigma, risk = _covariance(covariance, instruments)
    h0 = np.zeros(len(instruments)) if current is None else current_weights(current, instruments)
    se_b, se_B = _standard_errors(book_se, instrument_se, factors, instruments)
    if spec.robust and se_b is None:
        raise InputError("[hedge] robust = true needs the betas' standard errors (book_se and "
                         "instrument_se).", fix="pass them or set robust = false.")
    warnings: list[str] = []
    lam, lam_cov = _prices_of_risk(premia, premia_cov, factors, warnings)
    if spec.premium_weight > 0 and lam is None:
        raise InputError("[hedge] premium_weight > 0 needs the prices of risk.",
                         fix="pass premia from the Fama-MacBeth stage or set premium_weight = 0.")
    if spec.objective == "total" and (book_variance is None or book_instrument_cov is None):
        raise InputError("[hedge] objective = \"total\" needs book_variance and "
                         "book_instrument_cov.", fix="pass them or use objective = \"tracking\".")
    c_pH = None
    if book_variance is not None and book_instrument_cov is not None:
        c_pH = numeric(take(labels(pd.Series(book_instrument_cov)), instruments),
                       "book_instrument_cov")
    lo, hi, cost = limits(instruments, spec, sheet)
    active = np.array([i not in set(spec.exclude) for i in instruments])
    return OverlayInputs(
        instruments=instruments, factors=factors, active=active, B=B, b=b, sigma=sigma,
        risk=risk, unit=unit, nav=float(nav), lo=lo, hi=hi, cost=cost, h0=h0, se_b=se_b,
        se_B=se_B, lam=lam, lam_cov=lam_cov, book_variance=book_variance, c_pH=c_pH,
        sample=covariance.attrs.get("sample"), warnings=tuple(warnings))
