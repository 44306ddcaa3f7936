"""The states stage against outside references: statsmodels' VAR and textbook factorisations."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy.linalg import solve_triangular
from statsmodels.tsa.api import VAR

from hedgekit.states import estimate_states, orthogonalise, select_lags

DEMO = Path(__file__).resolve().parents[1] / "demo_portfolios"
RTOL = 1e-10


def _macro() -> pd.DataFrame:
    """statsmodels.datasets.macrodata (US quarterly 1959Q1-2009Q3): real GDP and real
    consumption growth (log difference, decimals), the 3-month T-bill rate and inflation
    (both in decimals), GDP growth first as the 'market' slot."""
    raw = sm.datasets.macrodata.load_pandas().data
    idx = pd.PeriodIndex.from_fields(year=raw["year"].astype(int),
                                     quarter=raw["quarter"].astype(int), freq="Q")
    frame = pd.DataFrame({
        "gdp": np.log(raw["realgdp"].to_numpy()),
        "cons": np.log(raw["realcons"].to_numpy()),
        "tbill": raw["tbilrate"].to_numpy() / 100,
        "infl": raw["infl"].to_numpy() / 100,
    }, index=idx)
    frame[["gdp", "cons"]] = frame[["gdp", "cons"]].diff()
    frame.index.name = "date"
    return frame


def _demo() -> pd.DataFrame:
    frame = pd.read_csv(DEMO / "states.csv")
    frame.index = pd.PeriodIndex(frame.pop("date"), freq="M", name="date")
    return frame


DATASETS = {"macrodata": _macro, "demo": _demo}


def _close(actual, expected, rtol=RTOL) -> None:
    actual = np.asarray(actual, dtype=float)
    expected = np.asarray(expected, dtype=float)
    scale = np.abs(expected).max()
    np.testing.assert_allclose(actual, expected, rtol=rtol, atol=rtol * scale * 1e-3)


@pytest.mark.parametrize("name", list(DATASETS))
@pytest.mark.parametrize("lags", [1, 2, 3])
def test_var_matches_statsmodels(name: str, lags: int) -> None:
    """Source: statsmodels ``VAR(...).fit(p)`` (Lütkepohl 2005, ch. 3 OLS estimator), on
    statsmodels' bundled macrodata and on the demo: intercepts, slopes, standard errors,
    t-statistics, residuals, Σ_u (divisor T - Kp - 1) and Σ_u ML (divisor T) to 1e-10."""
    data = DATASETS[name]()
    res = estimate_states(data, lags=lags)
    ref = VAR(data.dropna().to_numpy()).fit(lags)
    k = data.shape[1]
    assert res.nobs == ref.nobs
    # statsmodels params: rows [const, L1.var1..L1.varK, L2...], columns equations.
    _close(res.intercept.to_numpy(), ref.params[0])
    _close(res.coef.to_numpy(), ref.params[1:].T)
    _close(res.intercept_se.to_numpy(), ref.stderr[0])
    _close(res.coef_se.to_numpy(), ref.stderr[1:].T)
    _close(res.coef_t.to_numpy(), ref.tvalues[1:].T, rtol=1e-9)
    _close(res.raw.to_numpy(), ref.resid)
    _close(res.sigma_u.to_numpy(), ref.sigma_u)
    _close(res.sigma_u_ml.to_numpy(), ref.sigma_u_mle)
    assert list(res.coef.columns)[:k] == [f"{v}.L1" for v in data.columns]
    # Stability: statsmodels' roots are the inverses of the companion eigenvalues.
    assert res.max_eigen_modulus == pytest.approx(1 / np.abs(ref.roots).min(), rel=1e-10)
    assert res.stable == bool(ref.is_stable())


@pytest.mark.parametrize("name", list(DATASETS))
def test_r2_matches_equation_ols(name: str) -> None:
    """Source: statsmodels ``OLS(...).fit().rsquared`` of each VAR equation on its own
    (equation-by-equation OLS is the VAR estimator, Hamilton 1994, 11.1)."""
    data = DATASETS[name]()
    res = estimate_states(data, lags=2)
    z = data.dropna()
    x = pd.concat([z.shift(1).add_suffix(".L1"), z.shift(2).add_suffix(".L2")], axis=1).iloc[2:]
    x = sm.add_constant(x)
    for eq in data.columns:
        ols = sm.OLS(z[eq].iloc[2:], x).fit()
        assert res.r2[eq] == pytest.approx(ols.rsquared, rel=1e-10)
        assert res.coef.loc[eq, f"{data.columns[0]}.L2"] == pytest.approx(
            ols.params[f"{data.columns[0]}.L2"], rel=1e-9, abs=1e-13)


@pytest.mark.parametrize("name", list(DATASETS))
@pytest.mark.parametrize("criterion", ["aic", "bic", "hq"])
def test_select_lags_matches_statsmodels(name: str, criterion: str) -> None:
    """Source: statsmodels ``VAR.select_order(maxlags)``: all orders 0..maxlags fitted on
    the same T - maxlags periods (Lütkepohl 2005, 4.3); same selected order and the same
    criterion values to 1e-10."""
    data = DATASETS[name]()
    max_lags = 6
    sel = select_lags(data, max_lags=max_lags, criterion=criterion)
    ref = VAR(data.dropna().to_numpy()).select_order(max_lags)
    key = {"hq": "hqic"}.get(criterion, criterion)
    assert sel.selected == int(ref.selected_orders[key])
    for c in ("aic", "bic", "hqic", "fpe"):
        _close(sel.values[c].to_numpy(), np.asarray(ref.ics[c]))
    res = estimate_states(data, lags=criterion, max_lags=max_lags)
    assert res.lags == max(int(ref.selected_orders[key]), 1)
    assert res.lag_selection["selected"] == int(ref.selected_orders[key])


def _gram_schmidt(u: np.ndarray) -> np.ndarray:
    """Classical Gram-Schmidt on demeaned columns, written out (Golub and Van Loan 2013, 5.2.7)."""
    c = u - u.mean(axis=0)
    out = np.empty_like(c)
    for j in range(c.shape[1]):
        v = c[:, j].copy()
        for i in range(j):
            v -= (out[:, i] @ c[:, j]) / (out[:, i] @ out[:, i]) * out[:, i]
        out[:, j] = v
    sd = out.std(axis=0, ddof=1)
    return out / sd * sd[0]


@pytest.mark.parametrize("name", list(DATASETS))
def test_gram_schmidt_cholesky_and_qr_routes_agree(name: str) -> None:
    """Sources: explicit Gram-Schmidt, the Cholesky route M = D L^{-1} with L = chol(cov u),
    and numpy's QR (u_c = Q R, Q's columns the Gram-Schmidt directions; Golub and Van
    Loan 2013, thm. 5.2.3) give the same orthogonal series to 1e-10."""
    res = estimate_states(DATASETS[name](), lags=1)
    u = res.raw.to_numpy()
    orth, m = orthogonalise(res.raw)
    got = orth.to_numpy()
    # explicit Gram-Schmidt
    _close(got, _gram_schmidt(u))
    # Cholesky route, written independently of the module
    centred = u - u.mean(axis=0)
    chol = np.linalg.cholesky(np.cov(u, rowvar=False))
    d = chol[0, 0]
    m_chol = d * solve_triangular(chol, np.eye(u.shape[1]), lower=True)
    _close(m.to_numpy(), m_chol)
    # QR route: columns of Q (signs fixed so R has a positive diagonal), scaled.
    q, r = np.linalg.qr(centred)
    q = q * np.sign(np.diag(r))
    scale = np.abs(r[0, 0]) / np.sqrt(u.shape[0] - 1)          # sd of the first series
    q_scaled = q * np.sqrt(u.shape[0] - 1) * scale
    _close(got - got.mean(axis=0), q_scaled)
    np.testing.assert_array_equal(np.triu(m.to_numpy(), 1), 0.0)
    _close(res.transform.to_numpy(), m_chol)
