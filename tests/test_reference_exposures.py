"""Exposures checked against outside references (statsmodels; an independent regression).

Data: linearmodels' bundled ``french`` dataset (real monthly returns of 12 industry and 9
size/value portfolios, market, size and value factors).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from statsmodels.regression.rolling import RollingOLS

from hedgekit.exposures import newey_west_lags, rolling_betas, time_series_betas

from .helpers import FRENCH_FACTORS, FRENCH_INDUSTRIES, FRENCH_SIZE_VALUE, french_excess

INDUSTRIES, SIZE_VALUE, FACTORS = FRENCH_INDUSTRIES, FRENCH_SIZE_VALUE, FRENCH_FACTORS


@pytest.fixture(scope="module")
def french_data() -> tuple[pd.DataFrame, pd.DataFrame]:
    """linearmodels' bundled french data (see tests/helpers.french_excess)."""
    return french_excess(INDUSTRIES + SIZE_VALUE)


def test_full_sample_betas_and_hac_match_statsmodels(french_data):
    """statsmodels OLS and OLS.fit(cov_type="HAC", maxlags=L) with its default
    use_correction=False (Bartlett weights 1 - l/(L+1)): betas, OLS and HAC errors, R²."""
    assets, factors = french_data
    x = sm.add_constant(factors.to_numpy())
    for lags in ("auto", 0, 6):
        est = time_series_betas(assets, factors, hac_lags=lags)
        lag = newey_west_lags(len(assets)) if lags == "auto" else lags
        assert est.hac_lags == lag
        for name in assets.columns[::4]:
            y = assets[name].to_numpy()
            ols = sm.OLS(y, x).fit()
            hac = sm.OLS(y, x).fit(cov_type="HAC", cov_kwds={"maxlags": lag})
            i = list(assets.columns).index(name)
            np.testing.assert_allclose(est.betas.iloc[i], ols.params[1:], rtol=0, atol=1e-10)
            np.testing.assert_allclose(est.alpha.iloc[i], ols.params[0], rtol=0, atol=1e-12)
            np.testing.assert_allclose(est.se_ols.iloc[i], ols.bse[1:], rtol=1e-9)
            np.testing.assert_allclose(est.se_hac.iloc[i], hac.bse[1:], rtol=1e-9)
            np.testing.assert_allclose(est.alpha_se_hac.iloc[i], hac.bse[0], rtol=1e-9)
            np.testing.assert_allclose(est.r2.iloc[i], ols.rsquared, rtol=1e-10)
            np.testing.assert_allclose(est.resid_var.iloc[i], ols.scale, rtol=1e-10)


def test_late_start_series_matches_statsmodels_on_its_own_months(french_data):
    """statsmodels OLS HAC on the series' own (contiguous) months: a series that starts late
    uses only its months, and calendar-month lags equal row lags there."""
    assets, factors = french_data
    a = assets.copy()
    a.iloc[:250, 0] = np.nan
    a.iloc[-40:, 1] = np.nan
    est = time_series_betas(a, factors, hac_lags=5)
    for i in (0, 1):
        ok = a.iloc[:, i].notna().to_numpy()
        y = a.iloc[:, i].to_numpy()[ok]
        x = sm.add_constant(factors.to_numpy()[ok])
        hac = sm.OLS(y, x).fit(cov_type="HAC", cov_kwds={"maxlags": 5})
        np.testing.assert_allclose(est.betas.iloc[i], hac.params[1:], atol=1e-10)
        np.testing.assert_allclose(est.se_hac.iloc[i], hac.bse[1:], rtol=1e-9)
        assert est.n_obs.iloc[i] == ok.sum()
    resid = est.residuals.iloc[:, 0]
    assert resid.iloc[:250].isna().all() and resid.iloc[250:].notna().all()


def test_rolling_betas_match_statsmodels_rolling_ols(french_data):
    """statsmodels RollingOLS(window=60) on complete data, every series, to 1e-8."""
    assets, factors = french_data
    rb = rolling_betas(assets, factors, window=60, min_obs=60)
    x = sm.add_constant(factors.to_numpy())
    worst = 0.0
    for i, name in enumerate(assets.columns):
        ref = RollingOLS(assets[name].to_numpy(), x, window=60).fit().params[:, 1:]
        assert np.array_equal(np.isnan(ref), np.isnan(rb.values[:, i, :]))
        worst = max(worst, float(np.nanmax(np.abs(ref - rb.values[:, i, :]))))
    assert worst < 1e-8


def test_rolling_betas_with_missing_months_match_per_window_regression(french_data):
    """An independent least-squares fit (numpy lstsq) per window on each series' valid months,
    with 15 % of cells blanked at random (seeded) and one series starting late; 1e-8."""
    assets, factors = french_data
    rng = np.random.default_rng(7)
    a = assets.iloc[:300, :6].copy()
    f = factors.iloc[:300]
    vals = a.to_numpy().copy()
    vals[rng.random(vals.shape) < 0.15] = np.nan
    vals[:100, 2] = np.nan
    a = pd.DataFrame(vals, index=a.index, columns=a.columns)
    window, min_obs = 48, 30
    rb = rolling_betas(a, f, window=window, min_obs=min_obs)
    x = np.column_stack([np.ones(len(f)), f.to_numpy()])
    checked = 0
    for i in range(a.shape[1]):
        for t in range(len(f)):
            lo = max(0, t - window + 1)
            ok = np.isfinite(vals[lo:t + 1, i])
            if ok.sum() < min_obs:
                assert np.isnan(rb.values[t, i]).all()
                continue
            ref = np.linalg.lstsq(x[lo:t + 1][ok], vals[lo:t + 1, i][ok], rcond=None)[0][1:]
            np.testing.assert_allclose(rb.values[t, i], ref, rtol=0, atol=1e-8)
            assert rb.n_obs[t, i] == ok.sum()
            checked += 1
    assert checked > 1000


def test_rolling_betas_with_listings_match_per_window_regression(french_data):
    """Listings and delistings only (the shared-design path: each window's X'X shared by
    the series complete in it, own range for the windows cut by a listing), beside a series
    with one interior gap (per-series path), a blank series and complete ones: an
    independent numpy lstsq per window on each series' valid months, 1e-8; the shared path
    equals the per-series path to 1e-10."""
    import hedgekit.exposures as ex

    assets, factors = french_data
    a = assets.iloc[:240, :8].copy()
    f = factors.iloc[:240]
    vals = a.to_numpy().copy()
    vals[:70, 0] = np.nan            # listed late
    vals[150:, 1] = np.nan           # delisted
    vals[:20, 2] = np.nan
    vals[200:, 2] = np.nan           # both
    vals[120, 3] = np.nan            # one interior gap: per-series path
    vals[:, 4] = np.nan              # never observed
    a = pd.DataFrame(vals, index=a.index, columns=a.columns)
    window, min_obs = 60, 36
    rb = rolling_betas(a, f, window=window, min_obs=min_obs)
    x = np.column_stack([np.ones(len(f)), f.to_numpy()])
    for i in range(a.shape[1]):
        for t in range(len(f)):
            lo = max(0, t - window + 1)
            ok = np.isfinite(vals[lo:t + 1, i])
            assert rb.n_obs[t, i] == ok.sum()
            if ok.sum() < min_obs:
                assert np.isnan(rb.values[t, i]).all()
                continue
            ref = np.linalg.lstsq(x[lo:t + 1][ok], vals[lo:t + 1, i][ok], rcond=None)[0][1:]
            np.testing.assert_allclose(rb.values[t, i], ref, rtol=0, atol=1e-8)
    fc = f.to_numpy() - f.to_numpy().mean(axis=0)
    out = np.empty((a.shape[1], len(f), fc.shape[1]))
    cnt = np.empty((a.shape[1], len(f)), dtype=np.int64)
    ex._rolling_block(vals, fc, window, min_obs, out=out, counts=cnt)
    np.testing.assert_allclose(rb.values, out.transpose(1, 0, 2), rtol=0, atol=1e-10)
    np.testing.assert_array_equal(rb.n_obs, cnt.T)
