"""Prices of risk checked against outside references.

linearmodels' ``LinearFactorModel`` and panel ``FamaMacBeth`` on linearmodels' bundled
``french`` dataset (real monthly returns: 12 industry and 9 size/value portfolios in excess
of the risk-free rate; market, size and value factors), and textbook formulas computed
independently here (Shanken 1992, RFS; Cochrane 2005, Asset Pricing, eqs. 12.6, 12.13, 12.19).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from linearmodels.asset_pricing import LinearFactorModel
from linearmodels.panel import FamaMacBeth

from hedgekit.exposures import rolling_betas, time_series_betas
from hedgekit.premia import fama_macbeth

from .helpers import FRENCH_FACTORS, FRENCH_INDUSTRIES, FRENCH_SIZE_VALUE, french_excess

INDUSTRIES, SIZE_VALUE, FACTORS = FRENCH_INDUSTRIES, FRENCH_SIZE_VALUE, FRENCH_FACTORS


@pytest.fixture(scope="module")
def french_data() -> tuple[pd.DataFrame, pd.DataFrame]:
    """linearmodels' bundled french data (see tests/helpers.french_excess)."""
    return french_excess(SIZE_VALUE + INDUSTRIES)


def _panel(assets: pd.DataFrame, betas: pd.DataFrame) -> pd.DataFrame:
    """Long (asset, month) panel with each asset's time-invariant betas as regressors."""
    long = assets.stack().dropna().rename("y").to_frame()
    long.index.names = ["date", "asset"]
    long = long.reset_index()
    long["time"] = long["date"].dt.to_timestamp()
    b = betas.rename_axis("asset").reset_index()
    long = long.merge(b, on="asset").set_index(["asset", "time"]).sort_index()
    long["const"] = 1.0
    return long


@pytest.mark.parametrize("intercept", [False, True])
def test_lambda_matches_linearmodels_linear_factor_model(french_data, intercept):
    """linearmodels LinearFactorModel(risk_free=intercept).fit().risk_premia: with full-sample
    betas the mean of the monthly cross-sections equals the OLS of average returns on beta."""
    assets, factors = french_data
    betas = time_series_betas(assets, factors).betas
    res = fama_macbeth(assets, betas, factors=factors, intercept=intercept)
    ref = LinearFactorModel(assets.to_numpy(), factors.to_numpy(), risk_free=intercept).fit()
    np.testing.assert_allclose(res.lambda_.to_numpy(), np.asarray(ref.risk_premia), rtol=0, atol=1e-8)
    assert res.n_periods == len(assets) and res.n_skipped == 0


def test_standard_errors_match_linearmodels_fama_macbeth(french_data):
    """linearmodels panel FamaMacBeth fed the same betas: params, and std_errors with
    cov_type="unadjusted" (plain) and cov_type="kernel", bandwidth=L (Newey-West, Bartlett)."""
    assets, factors = french_data
    betas = time_series_betas(assets, factors).betas
    panel = _panel(assets, betas)
    model = FamaMacBeth(panel["y"], panel[["const", *FACTORS]])
    plain = model.fit(cov_type="unadjusted")
    for lags in (0, 3, "auto"):
        res = fama_macbeth(assets, betas, factors=factors, nw_lags=lags)
        kernel = model.fit(cov_type="kernel", bandwidth=res.nw_lags)
        np.testing.assert_allclose(res.lambda_.to_numpy(), np.asarray(plain.params), atol=1e-12)
        np.testing.assert_allclose(res.se_fm.to_numpy(), np.asarray(plain.std_errors), rtol=1e-9)
        np.testing.assert_allclose(res.se_nw.to_numpy(), np.asarray(kernel.std_errors), rtol=1e-9)
    assert res.nw_lags == 6


def test_unbalanced_panel_matches_linearmodels_fama_macbeth(french_data):
    """linearmodels FamaMacBeth on a panel with 10 % of cells missing (seeded): each month's
    cross-section uses its own assets; months, estimates and plain errors agree."""
    assets, factors = french_data
    a = assets.iloc[:240].copy()
    vals = a.to_numpy().copy()
    vals[np.random.default_rng(3).random(vals.shape) < 0.10] = np.nan
    a = pd.DataFrame(vals, index=a.index, columns=a.columns)
    betas = time_series_betas(a, factors).betas
    res = fama_macbeth(a, betas, factors=factors, nw_lags=0)
    panel = _panel(a, betas)
    ref = FamaMacBeth(panel["y"], panel[["const", *FACTORS]]).fit(cov_type="unadjusted")
    np.testing.assert_allclose(res.lambda_.to_numpy(), np.asarray(ref.params), atol=1e-12)
    np.testing.assert_allclose(res.se_fm.to_numpy(), np.asarray(ref.std_errors), rtol=1e-9)


def _worked_example(seed: int = 11, t: int = 90, n: int = 8):
    rng = np.random.default_rng(seed)
    idx = pd.period_range("2010-01", periods=t, freq="M", name="date")
    f = rng.normal([0.006, 0.002], [0.045, 0.03], (t, 2))
    b = rng.normal(1.0, 0.4, (n, 2))
    r = 0.001 + f @ b.T + rng.normal(0, 0.02, (t, n))
    return (pd.DataFrame(r, index=idx, columns=[f"p{i}" for i in range(n)]),
            pd.DataFrame(f, index=idx, columns=["m", "g"]))


@pytest.mark.parametrize("intercept", [True, False])
def test_shanken_matches_textbook_formula(intercept):
    """Shanken 1992 (RFS) / Cochrane 2005 eq. 12.19, computed here from scratch:
    Var(lambda) = [(X'X)^-1 X' S X (X'X)^-1 (1 + lambda_f' S_f^-1 lambda_f) + S~_f] / T with
    S = e'e/T (time-series residuals), S_f the factor covariance with divisor T."""
    r, f = _worked_example()
    rv, fv = r.to_numpy(), f.to_numpy()
    t, n = rv.shape
    z = np.column_stack([np.ones(t), fv])
    coef = np.linalg.lstsq(z, rv, rcond=None)[0]
    beta = coef[1:].T
    resid = rv - z @ coef
    sigma = resid.T @ resid / t
    fc = fv - fv.mean(axis=0)
    sigma_f = fc.T @ fc / t
    x = np.column_stack([np.ones(n), beta]) if intercept else beta
    lam = np.linalg.solve(x.T @ x, x.T @ rv.mean(axis=0))
    lf = lam[1:] if intercept else lam
    c = lf @ np.linalg.solve(sigma_f, lf)
    tilde = np.zeros((x.shape[1], x.shape[1]))
    tilde[-2:, -2:] = sigma_f
    xi = np.linalg.inv(x.T @ x)
    var = (xi @ x.T @ sigma @ x @ xi * (1 + c) + tilde) / t

    res = fama_macbeth(r, time_series_betas(r, f).betas, factors=f, intercept=intercept, nw_lags=0)
    np.testing.assert_allclose(res.lambda_.to_numpy(), lam, atol=1e-13)
    np.testing.assert_allclose(res.se_shanken.to_numpy(), np.sqrt(np.diag(var)), rtol=1e-10)
    assert res.shanken_c == pytest.approx(c, rel=1e-12)
    assert not res.shanken_approximate
    given = fama_macbeth(r, time_series_betas(r, f).betas, factors=f, intercept=intercept,
                         resid_cov=pd.DataFrame(sigma, index=r.columns, columns=r.columns))
    np.testing.assert_allclose(given.se_shanken.to_numpy(), np.sqrt(np.diag(var)), rtol=1e-10)


def test_grs_and_pricing_error_test_match_textbook_forms():
    """GRS in Cochrane 2005 eq. 12.6 form, (T-N-K)/N (1 + mu' Omega^-1 mu)^-1 alpha' S^-1 alpha
    with maximum-likelihood S and Omega ~ F(N, T-N-K); the cross-sectional pricing-error test
    alpha' cov(alpha)^+ alpha with cov(alpha) = sum (alpha_t - alpha)(alpha_t - alpha)'/T^2
    (Cochrane 2005 eq. 12.13) ~ chi2(N-K-1)."""
    from scipy import stats

    r, f = _worked_example(seed=5, t=120, n=6)
    rv, fv = r.to_numpy(), f.to_numpy()
    t, n = rv.shape
    k = fv.shape[1]
    z = np.column_stack([np.ones(t), fv])
    coef = np.linalg.lstsq(z, rv, rcond=None)[0]
    e = rv - z @ coef
    s_ml = e.T @ e / t
    mu = fv.mean(axis=0)
    omega = (fv - mu).T @ (fv - mu) / t
    grs = (t - n - k) / n * (coef[0] @ np.linalg.solve(s_ml, coef[0])) / (1 + mu @ np.linalg.solve(omega, mu))
    res = fama_macbeth(r, time_series_betas(r, f).betas, factors=f, traded=["m", "g"])
    assert res.grs["stat"] == pytest.approx(grs, rel=1e-10)
    assert res.grs["pvalue"] == pytest.approx(stats.f.sf(grs, n, t - n - k), rel=1e-9)

    # The cross-sectional test prices every factor by the cross-section (no traded route).
    res = fama_macbeth(r, time_series_betas(r, f).betas, factors=f)
    x = np.column_stack([np.ones(n), coef[1:].T])
    h = x @ np.linalg.solve(x.T @ x, x.T)
    alpha_t = rv - rv @ h.T
    abar = alpha_t.mean(axis=0)
    cov_a = (alpha_t - abar).T @ (alpha_t - abar) / t ** 2
    stat = abar @ np.linalg.pinv(cov_a, rcond=1e-10) @ abar
    assert res.pricing_error_test["stat"] == pytest.approx(stat, rel=1e-8)
    assert res.pricing_error_test["df"] == n - k - 1
    np.testing.assert_allclose(res.pricing_errors.to_numpy(), rv.mean(axis=0) - x @ res.lambda_.to_numpy(),
                               atol=1e-14)
    r2 = 1 - np.var(abar) / np.var(rv.mean(axis=0))
    assert res.r2_cs == pytest.approx(r2, rel=1e-10)


@pytest.mark.parametrize("intercept", [True, False])
def test_rolling_betas_cross_sections_match_per_month_regression(french_data, intercept):
    """With rolling betas, month t uses betas from months t-60..t-1 only; each month's
    gamma_t equals a numpy least-squares cross-section on those betas (independent)."""
    assets, factors = french_data
    a, f = assets.iloc[:200], factors.iloc[:200]
    rb = rolling_betas(a, f, window=60, min_obs=60)
    res = fama_macbeth(a, rb, factors=f, intercept=intercept)
    assert res.betas_used == "rolling" and res.shanken_approximate
    assert res.n_skipped == 60 and res.n_periods == 140
    for t in (60, 99, 199):
        b = rb.values[t - 1]
        x = np.column_stack([np.ones(len(b)), b]) if intercept else b
        g = np.linalg.lstsq(x, a.iloc[t].to_numpy(), rcond=None)[0]
        np.testing.assert_allclose(res.gamma.loc[a.index[t]].to_numpy(), g, atol=1e-12)


@pytest.mark.parametrize("intercept", [True, False])
def test_traded_factor_priced_by_its_mean(french_data, intercept):
    """A traded factor's lambda is its sample mean over the cross-section months, with the
    plain se sd/sqrt(T) and the Newey-West se of a mean (statsmodels OLS on a constant,
    cov_type="HAC" with use_correction=True: the Fama-MacBeth T(T-1) scaling); it joins the
    test assets, and the other factors are priced by the monthly cross-sections of
    R_t - b_mkt f_mkt,t on [1, b_smb, b_hml] (Lewellen, Nagel and Shanken 2010, JFE;
    Cochrane 2005, Asset Pricing, ch. 12), computed here month by month with numpy lstsq."""
    import statsmodels.api as sm

    r, f = french_data
    betas = time_series_betas(r, f).betas
    res = fama_macbeth(r, betas, factors=f, traded=["MktRF"], nw_lags=4, intercept=intercept)
    months = res.gamma.index
    mkt = f.loc[months, "MktRF"]
    t = len(mkt)
    assert res.lambda_route == {"MktRF": "mean", "SMB": "cross-section", "HML": "cross-section"}
    assert res.lambda_["MktRF"] == pytest.approx(mkt.mean(), rel=1e-12)
    assert res.se_fm["MktRF"] == pytest.approx(mkt.std(ddof=1) / np.sqrt(t), rel=1e-10)
    hac = sm.OLS(mkt.to_numpy(), np.ones(t)).fit(cov_type="HAC",
                                                 cov_kwds={"maxlags": 4, "use_correction": True})
    assert res.se_nw["MktRF"] == pytest.approx(float(hac.bse[0]), rel=1e-10)
    assert res.se_shanken["MktRF"] == pytest.approx(mkt.std(ddof=0) / np.sqrt(t), rel=1e-10)

    # Independent cross-sections with the market as a test asset (unit beta on itself).
    b = np.vstack([betas[FACTORS].to_numpy(), [1.0, 0.0, 0.0]])
    gam = []
    for month in months:  # reference loop over months, not a hot path
        y = np.r_[r.loc[month].to_numpy(), f.loc[month, "MktRF"]]
        ok = np.isfinite(y)
        x = b[ok, 1:]
        if intercept:
            x = np.column_stack([np.ones(ok.sum()), x])
        gam.append(np.linalg.lstsq(x, y[ok] - b[ok, 0] * f.loc[month, "MktRF"], rcond=None)[0])
    gam = np.array(gam).mean(axis=0)
    np.testing.assert_allclose(res.lambda_[["SMB", "HML"]], gam[-2:], rtol=1e-9)
    if intercept:
        assert res.lambda_["const"] == pytest.approx(gam[0], rel=1e-9)
    assert "factor:MktRF" in res.pricing_errors.index and res.n_assets == r.shape[1]
    assert res.to_dict()["lambda_route"]["SMB"] == "cross-section"


def test_all_traded_keeps_grs_and_prices_each_by_its_mean(french_data):
    """Every factor traded: each lambda is its mean over the months used, and the GRS test
    on the original assets is unchanged (Gibbons, Ross and Shanken 1989)."""
    r, f = french_data
    betas = time_series_betas(r, f).betas
    res = fama_macbeth(r, betas, factors=f, traded=FACTORS, intercept=False)
    np.testing.assert_allclose(res.lambda_[FACTORS], f.loc[res.gamma.index].mean(), rtol=1e-12)
    with_cs = fama_macbeth(r, betas, factors=f, traded=FACTORS)
    assert res.grs is not None and res.grs == with_cs.grs
    assert set(res.lambda_route.values()) == {"mean"}


@pytest.mark.parametrize("shape", [(200, 12), (12, 40), (40, 40), (60, 8)])
def test_pricing_error_quadratic_equals_numpy_pinv(shape):
    """v'(E'E)^+ v by Cholesky solves (N x N when N < T, the T x T Gram with its null vector
    1 otherwise) equals numpy's pinv(E'E, rcond=1e-10) on deviations from the mean (columns
    of E sum to zero, as in the Fama-MacBeth pricing-error covariance, Cochrane 2005
    eq. 12.13), and the rank is numpy's matrix_rank; a rank-deficient E'E takes the
    eigenvalue route with the same result."""
    from hedgekit.premia import _pinv_quadratic

    rng = np.random.default_rng(sum(shape))
    t, n = shape
    e = rng.standard_normal((t, n)) @ rng.standard_normal((n, n))
    e -= e.mean(axis=0)
    v = rng.standard_normal(n)
    ete = e.T @ e
    ref = v @ np.linalg.pinv(ete, rcond=1e-10, hermitian=True) @ v
    stat, rank = _pinv_quadratic(e, v)
    assert stat == pytest.approx(ref, rel=1e-9)
    assert rank == np.linalg.matrix_rank(ete, tol=1e-10 * np.linalg.eigvalsh(ete).max(), hermitian=True)
    if shape == (60, 8):
        e[:, 3] = e[:, 2] + e[:, 1]                      # exactly collinear: rank N - 1
        ete = e.T @ e
        ref = v @ np.linalg.pinv(ete, rcond=1e-10, hermitian=True) @ v
        stat, rank = _pinv_quadratic(e, v)
        assert stat == pytest.approx(ref, rel=1e-8) and rank == n - 1


@pytest.mark.parametrize("months", [15, 120])
def test_pricing_error_test_balanced_short_and_long_panels(french_data, months):
    """Balanced panel with betas on the same months: the pricing-error covariance
    sum (alpha_t - alpha-bar)(alpha_t - alpha-bar)'/T^2 (Cochrane 2005 eq. 12.13) is
    singular along the design X (N x N, long panel) and along [1, f] over time (short
    panel, fewer months than assets); the statistic and rank equal numpy's pinv and
    matrix_rank computed here."""
    r, f = french_data
    r, f = r.iloc[-months:], f.iloc[-months:]
    betas = time_series_betas(r, f).betas
    res = fama_macbeth(r, betas, factors=f, nw_lags=0)
    rv = r.to_numpy()
    t, n = rv.shape
    x = np.column_stack([np.ones(n), betas.to_numpy()])
    alpha_t = rv - rv @ (x @ np.linalg.solve(x.T @ x, x.T)).T
    abar = alpha_t.mean(axis=0)
    cov_a = (alpha_t - abar).T @ (alpha_t - abar) / t ** 2
    w = np.linalg.eigvalsh(cov_a)
    rank = int((w > 1e-10 * w.max()).sum())
    stat = abar @ np.linalg.pinv(cov_a, rcond=1e-10, hermitian=True) @ abar
    assert res.pricing_error_test["stat"] == pytest.approx(stat, rel=1e-9)
    assert res.pricing_error_test["df"] == min(rank, n - x.shape[1])
