"""Annualised covariance of instrument excess returns: sample, shrinkage, or factor form.

When to choose which (docs/methods.md, section 4):

- ``"sample"``: few instruments against many periods (H well below T); exact and simple.
- ``"ledoit-wolf"``: H comparable to T, where the sample matrix is noisy or singular.
- ``"factor"``: many instruments (hundreds) whose co-movement the factors explain. The
  matrix is B Sigma_f B' + D, and the overlay program keeps it in that form, so its risk
  term has K + H rows instead of H x H: a re-solve at 500 instruments is many times faster
  (``benchmarks/bench_hedge_many.py``).  The residual covariances between instruments are
  set to zero, which is the assumption to check before choosing it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import InputError

METHODS = ("sample", "ledoit-wolf", "factor")


def instrument_covariance(returns: pd.DataFrame, *, periods_per_year: int = 12,
                          method: str = "sample", factors: pd.DataFrame | None = None
                          ) -> pd.DataFrame:
    """Annualised covariance of instrument excess returns over the rows all instruments have.

    ``"sample"``: S = X_c'X_c / (T - 1) x periods_per_year.  ``"ledoit-wolf"``: shrinkage to
    a scaled identity, S* = (b^2/d^2) m I + (a^2/d^2) S_T with S_T the divisor-T covariance,
    m = tr(S_T)/p, d^2 = ||S_T - m I||^2, b^2 = min(d^2, T^-2 sum_t ||x_t x_t' - S_T||^2),
    a^2 = d^2 - b^2, ||A||^2 = tr(AA')/p (Ledoit and Wolf 2004, *Journal of Multivariate
    Analysis*, "A well-conditioned estimator for large-dimensional covariance matrices").
    ``"factor"`` (needs ``factors``, periods x K): time-series OLS with an intercept of every
    instrument on the factors over the rows where all are present gives B (H x K) and
    residuals e; the matrix is B S_f B' + diag(s_e^2), S_f and s_e^2 with divisor T - 1, so
    its diagonal equals the sample variances exactly and only residual covariances between
    instruments are dropped (the exact factor model, e.g. Connor and Korajczyk 1988,
    *Journal of Financial Economics*).  The pieces ride along in
    ``result.attrs["factor_form"]`` (a :class:`FactorForm`, annualised) so the overlay program can keep the factor form.
    Rows with any missing instrument are dropped (listwise), which keeps the matrix PSD.
    ``result.attrs["sample"]`` = {first, last, periods} of the rows used when the index is
    a PeriodIndex.
    """
    if not isinstance(returns, pd.DataFrame) or returns.shape[1] == 0:
        raise InputError("instrument returns must be a non-empty DataFrame.",
                         fix="pass one column per instrument.")
    if method not in METHODS:
        raise InputError(f"[hedge] covariance method '{method}' is not known; valid: "
                         f"{', '.join(METHODS)}.",
                         fix="set covariance = \"sample\", \"ledoit-wolf\" or \"factor\".")
    if periods_per_year <= 0:
        raise InputError("periods_per_year must be positive.", fix="use 12 or 4.")
    if method == "factor":
        return _factor_form(returns, factors, periods_per_year)
    values = returns.apply(pd.to_numeric, errors="coerce").to_numpy(dtype=float)
    ok = np.isfinite(values).all(axis=1)
    x = values[ok]
    t, p = x.shape
    if t < 2:
        raise InputError(f"only {t} month(s) where every instrument has a return.",
                         fix="supply a longer common sample of instrument returns.")
    xc = x - x.mean(axis=0)
    if method == "sample":
        cov = xc.T @ xc / (t - 1)
    else:
        s = xc.T @ xc / t
        m = np.trace(s) / p
        d2 = np.sum((s - m * np.eye(p)) ** 2) / p
        # sum_t ||x_t x_t' - S||^2 = sum_t ||x_t||^4 - T ||S||^2  (expanding the square)
        b2_bar = (np.sum(np.sum(xc ** 2, axis=1) ** 2) - t * np.sum(s ** 2)) / (t ** 2 * p)
        b2 = min(b2_bar, d2)
        shrink = b2 / d2 if d2 > 0 else 1.0
        cov = shrink * m * np.eye(p) + (1.0 - shrink) * s
    out = _frame(cov * periods_per_year, list(returns.columns))
    out.attrs["sample"] = _sample(returns.index[ok])
    return out


def _frame(values: np.ndarray, cols: list) -> pd.DataFrame:
    return pd.DataFrame(values, index=pd.Index(cols, name="instrument"),
                        columns=pd.Index(cols, name="instrument"))


def _sample(index: pd.Index) -> dict | None:
    """{first, last, periods} of the rows used ("YYYY-MM" / "YYYYQn"), None without periods."""
    if not isinstance(index, pd.PeriodIndex) or len(index) == 0:
        return None
    return {"first": str(index[0]), "last": str(index[-1]), "periods": int(len(index))}


def _factor_form(returns: pd.DataFrame, factors: pd.DataFrame | None,
                 periods_per_year: int) -> pd.DataFrame:
    if not isinstance(factors, pd.DataFrame) or factors.shape[1] == 0:
        raise InputError("covariance = \"factor\" needs the factors (periods x factors).",
                         fix="pass factors=, e.g. the state-variable factors of the run.")
    joined = pd.concat([returns, factors.reindex(returns.index)], axis=1, keys=["r", "f"])
    values = joined.apply(pd.to_numeric, errors="coerce").to_numpy(dtype=float)
    ok = np.isfinite(values).all(axis=1)
    h, k = returns.shape[1], factors.shape[1]
    t = int(ok.sum())
    if t < k + 3:
        raise InputError(f"only {t} period(s) where every instrument and factor is present; "
                         f"the factor covariance needs at least {k + 3}.",
                         fix="supply a longer common sample or use covariance = \"sample\".")
    x = values[ok]
    r, f = x[:, :h], x[:, h:]
    rc, fc = r - r.mean(axis=0), f - f.mean(axis=0)
    s_f = fc.T @ fc / (t - 1)
    loadings = np.linalg.lstsq(fc, rc, rcond=None)[0].T          # H x K (intercept by centring)
    resid = rc - fc @ loadings.T
    resid_var = np.sum(resid ** 2, axis=0) / (t - 1)
    cols = list(returns.columns)
    cov = (loadings @ s_f @ loadings.T + np.diag(resid_var)) * periods_per_year
    out = _frame(cov, cols)
    fnames = [str(c) for c in factors.columns]
    out.attrs["factor_form"] = FactorForm(
        loadings=pd.DataFrame(loadings, index=cols, columns=fnames),
        factor_cov=pd.DataFrame(s_f * periods_per_year, index=fnames, columns=fnames),
        residual_var=pd.Series(resid_var * periods_per_year, index=cols))
    out.attrs["sample"] = _sample(returns.index[ok])
    return out


@dataclass(frozen=True, eq=False)
class FactorForm:
    """The pieces of B Sigma_f B' + D (annualised): ``loadings`` B (instrument x factor),
    ``factor_cov`` Sigma_f, ``residual_var`` the diagonal of D.  Compared by identity, so
    pandas can carry it in ``DataFrame.attrs``."""

    loadings: pd.DataFrame
    factor_cov: pd.DataFrame
    residual_var: pd.Series


def factor_risk_matrix(form: FactorForm, instruments: list[str]
                       ) -> tuple[np.ndarray, np.ndarray]:
    """(G, g) with G'G + diag(g^2) = B Sigma_f B' + D: G = R B' (K x H), R'R = Sigma_f the
    Cholesky factor of Sigma_f (eigen square root when singular), g = sqrt(diag D)."""
    b = form.loadings.reindex([str(i) for i in instruments]).to_numpy(dtype=float)
    s_f = form.factor_cov.to_numpy(dtype=float)
    d = form.residual_var.reindex([str(i) for i in instruments]).to_numpy(dtype=float)
    if not (np.all(np.isfinite(b)) and np.all(np.isfinite(d)) and np.all(d >= 0)):
        raise InputError("the factor form of the instrument covariance does not cover every "
                         "instrument.", fix="compute it with instrument_covariance on the same "
                         "instruments (method = \"factor\").")
    try:
        root = np.linalg.cholesky(0.5 * (s_f + s_f.T)).T
    except np.linalg.LinAlgError:
        w, v = np.linalg.eigh(0.5 * (s_f + s_f.T))
        root = np.sqrt(np.clip(w, 0.0, None))[:, None] * v.T
    return root @ b.T, np.sqrt(d)
