"""Unit, property and Monte Carlo tests of hedgekit.premia."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from hedgekit import demo
from hedgekit.errors import InputError
from hedgekit.exposures import rolling_betas, time_series_betas
from hedgekit.premia import book_premium, fama_macbeth

TRUTH = demo.simulate()["truth"]
VARS = TRUTH["variables"]


def _truth_arrays():
    c = np.array([TRUTH["var"]["intercept"][v] for v in VARS])
    a = np.array([[TRUTH["var"]["coef"][e][f"{v}.L1"] for v in VARS] for e in VARS])
    sigma_u = np.array([[TRUTH["var"]["sigma_u"][r][v] for v in VARS] for r in VARS])
    m = np.array([[TRUTH["transform"][r][v] for v in VARS] for r in VARS])
    mean = np.array([TRUTH["var"]["mean"][v] for v in VARS])
    lam = np.array([TRUTH["prices_of_risk"][v] for v in VARS])
    names = list(TRUTH["asset_betas"])
    b = np.array([[TRUTH["asset_betas"][n][v] for v in VARS] for n in names])
    sd = np.array([TRUTH["asset_resid_sd"][n] for n in names])
    return c, a, sigma_u, m, mean, lam, names, b, sd


def simulate_demo_process(samples: int, months: int, seed: int):
    """The demo's process (hedgekit.demo docstring) with truth.json parameters, in numpy:
    VAR(1) states, factors [mkt, (M u)_2..K], R = b'lambda + b'(f - E f) + e."""
    c, a, sigma_u, m, mean, lam, names, b, sd = _truth_arrays()
    rng = np.random.default_rng(seed)
    burn = 200
    u = rng.standard_normal((samples, months + burn, len(VARS))) @ np.linalg.cholesky(sigma_u).T
    z = np.empty_like(u)
    z[:, 0] = mean
    for t in range(1, months + burn):  # the simulator's recursion, vectorised over samples
        z[:, t] = c + z[:, t - 1] @ a.T + u[:, t]
    z, u = z[:, burn:], u[:, burn:]
    f = np.concatenate([z[:, :, :1], (u @ m.T)[:, :, 1:]], axis=2)
    ef = np.r_[mean[0], np.zeros(len(VARS) - 1)]
    r = b @ lam + (f - ef) @ b.T + rng.standard_normal((samples, months, len(names))) * sd
    return f, r, names, lam


def _coverage(f, r, names, lam):
    """Share of samples whose 95 % Shanken and plain Fama-MacBeth intervals cover the truth."""
    samples, months = f.shape[:2]
    idx = pd.period_range("1990-01", periods=months, freq="M", name="date")
    true = np.r_[0.0, lam]
    hit_sh = np.zeros(len(true))
    hit_fm = np.zeros(len(true))
    for s in range(samples):  # Monte Carlo replications, not a hot path
        fac = pd.DataFrame(f[s], index=idx, columns=VARS)
        ret = pd.DataFrame(r[s], index=idx, columns=names)
        res = fama_macbeth(ret, time_series_betas(ret, fac, hac_lags=0).betas, factors=fac)
        err = np.abs(res.lambda_.to_numpy() - true)
        hit_sh += err <= 1.959964 * res.se_shanken.to_numpy()
        hit_fm += err <= 1.959964 * res.se_fm.to_numpy()
    return hit_sh / samples, hit_fm / samples, res


def test_monte_carlo_shanken_coverage_on_demo_process():
    """Monte Carlo, 200 seeded samples of 480 months of the demo process: Shanken 95 %
    intervals (Shanken 1992, RFS) cover the true prices of risk (truth.json; intercept 0)
    between 90 % and 99 % of the time for every factor; plain Fama-MacBeth shown beside."""
    samples, months = 200, 480
    f, r, names, lam = simulate_demo_process(samples, months, seed=20261202)
    cover_sh, cover_fm, res = _coverage(f, r, names, lam)
    print("Shanken coverage", dict(zip(res.factors, cover_sh.round(3).tolist(), strict=True)))
    print("Fama-MacBeth coverage", dict(zip(res.factors, cover_fm.round(3).tolist(), strict=True)))
    assert ((cover_sh >= 0.90) & (cover_sh <= 0.99)).all(), cover_sh
    assert (cover_sh >= cover_fm - 1e-12).all()


def test_monte_carlo_shanken_matters_when_premia_are_large():
    """Monte Carlo, 200 seeded samples of 240 months of the demo's factor process with the
    innovation premia x6 and residual noise x2 (c = lambda' Sigma_f^-1 lambda near 0.55):
    the plain Fama-MacBeth intervals under-cover (errors in variables), the Shanken 1992
    (RFS) ones stay between 90 % and 99 %."""
    _, _, _, _, mean, _, _, b, sd = _truth_arrays()
    samples, months = 200, 240
    f, _, names, lam = simulate_demo_process(samples, months, seed=9)
    lam = lam.copy()
    lam[1:] *= 6.0
    ef = np.r_[mean[0], np.zeros(len(VARS) - 1)]
    rng = np.random.default_rng(5)
    r = b @ lam + (f - ef) @ b.T + rng.standard_normal((samples, months, len(names))) * sd * 2
    cover_sh, cover_fm, res = _coverage(f, r, names, lam)
    print("large premia: Shanken", cover_sh.round(3).tolist(), "Fama-MacBeth", cover_fm.round(3).tolist())
    assert ((cover_sh >= 0.90) & (cover_sh <= 0.99)).all(), cover_sh
    assert cover_fm.mean() < cover_sh.mean() - 0.03


@pytest.fixture(scope="module")
def demo_case():
    f, r, names, lam = simulate_demo_process(1, 480, seed=1)
    idx = pd.period_range("1986-01", periods=480, freq="M", name="date")
    fac = pd.DataFrame(f[0], index=idx, columns=VARS)
    ret = pd.DataFrame(r[0], index=idx, columns=names)
    ret.iloc[:60, 3] = np.nan  # one late starter
    return fac, ret, lam


def test_demo_prices_of_risk_recovered(demo_case):
    """The estimates lie within 3 Shanken standard errors of the truth (truth.json)."""
    fac, ret, lam = demo_case
    res = fama_macbeth(ret, time_series_betas(ret, fac).betas, factors=fac)
    z = (res.lambda_.to_numpy() - np.r_[0.0, lam]) / res.se_shanken.to_numpy()
    assert np.abs(z).max() < 3.0
    assert res.n_periods == 480 and res.n_skipped == 0 and res.n_assets == 25
    assert res.factors[0] == "const" and res.betas_used == "full"
    assert res.pricing_error_test["df"] == 25 - 5 - 1
    assert res.pricing_error_test_shanken["stat"] == pytest.approx(
        res.pricing_error_test["stat"] / (1 + res.shanken_c))
    assert 0 < res.pricing_error_test["pvalue"] <= 1


def test_rolling_betas_premia_are_labelled_approximate(demo_case):
    fac, ret, lam = demo_case
    rb = rolling_betas(ret, fac, window=60, min_obs=36)
    res = fama_macbeth(ret, rb, factors=fac)
    assert res.shanken_approximate and res.betas_used == "rolling"
    assert res.n_skipped == 36 and res.n_periods == 480 - 36
    sub = res.cov_shanken.to_numpy()
    assert np.all(np.diag(sub) >= np.diag(res.cov_fm.to_numpy()) - 1e-18)
    already = fama_macbeth(ret, rb.lagged(), factors=fac)
    np.testing.assert_allclose(already.lambda_, res.lambda_)


def test_thin_and_rank_deficient_months_are_skipped_and_counted():
    rng = np.random.default_rng(2)
    t, n = 80, 10
    idx = pd.period_range("2000-01", periods=t, freq="M", name="date")
    b1 = rng.normal(1, 0.3, n)
    b2 = rng.normal(0, 0.5, n)
    b2[:5] = 2 * b1[:5]  # assets 0-4: collinear betas
    betas = pd.DataFrame({"x": b1, "y": b2}, index=[f"a{i}" for i in range(n)])
    ret = pd.DataFrame(rng.normal(0.005, 0.05, (t, n)), index=idx, columns=betas.index)
    ret.iloc[3, 3:] = np.nan        # 3 assets: fewer than K+2 = 4
    ret.iloc[7, 5:] = np.nan        # 5 assets, all collinear: rank deficient
    res = fama_macbeth(ret, betas, nw_lags=0)
    assert res.n_skipped == 2 and res.n_periods == t - 2
    assert idx[3] not in res.gamma.index and idx[7] not in res.gamma.index
    assert res.se_shanken.isna().all() and res.grs is None
    np.testing.assert_allclose(res.se_nw, res.se_fm)


def test_to_dict_contract(demo_case):
    fac, ret, _ = demo_case
    res = fama_macbeth(ret, time_series_betas(ret, fac).betas, factors=fac, traded=["mkt"])
    d = res.to_dict()
    for key in ("factors", "lambda", "se_fm", "se_nw", "se_shanken", "t_fm", "t_shanken", "r2_cs",
                "n_periods", "n_skipped", "pricing_error_test"):
        assert key in d
    assert set(d["pricing_error_test"]) == {"stat", "df", "pvalue"}
    assert list(d["lambda"]) == d["factors"]
    assert d["grs"] is None and any("traded" in w for w in d["warnings"])
    json.dumps(d, allow_nan=False)
    assert list(res.to_frame().columns)[:4] == ["lambda", "se_fm", "se_nw", "se_shanken"]


def test_book_premium_numbers(demo_case):
    """premium_k = b_k lambda_k; se^2 = b^2 V_kk + lambda^2 se_b^2 + se_b^2 V_kk (product of
    independent estimates, Goodman 1960, JASA); total uses b'Vb; annualised x12 or x4."""
    fac, ret, _ = demo_case
    res = fama_macbeth(ret, time_series_betas(ret, fac).betas, factors=fac)
    b = pd.Series({"mkt": 1.0, "term": 0.3, "def": -0.2})
    se_b = pd.Series({"mkt": 0.02, "term": 0.05, "def": 0.04})
    tab = book_premium(b, res, book_se=se_b)
    lam = res.lambda_
    v = res.cov_shanken
    assert tab.loc["term", "premium"] == pytest.approx(0.3 * lam["term"])
    assert tab.loc["dy", "premium"] == 0.0
    expect = np.sqrt(0.09 * v.loc["term", "term"] + lam["term"] ** 2 * 0.0025 + 0.0025 * v.loc["term", "term"])
    assert tab.loc["term", "premium_se"] == pytest.approx(expect)
    bb = b.reindex([f for f in res.factors if f != "const"], fill_value=0.0)
    assert tab.loc["total", "premium"] == pytest.approx(float(bb @ lam[bb.index]))
    assert tab.loc["total", "premium_annual"] == pytest.approx(12 * tab.loc["total", "premium"])
    q = book_premium(b, res, periods_per_year=4)
    assert q.loc["mkt", "premium_annual"] == pytest.approx(4 * lam["mkt"])
    assert tab.attrs["se_source"] == "shanken"
    with pytest.raises(InputError):
        book_premium(pd.Series({"nope": 1.0}), res)


def test_bad_input(demo_case):
    fac, ret, _ = demo_case
    betas = time_series_betas(ret, fac).betas
    with pytest.raises(InputError):
        fama_macbeth(ret.drop(columns=ret.columns[0]), betas)
    with pytest.raises(InputError, match="nw_lags"):
        fama_macbeth(ret, betas, nw_lags=-1)
    with pytest.raises(InputError):
        fama_macbeth(ret, betas, factors=fac.drop(columns="term"))


@settings(max_examples=20, deadline=None)
@given(seed=st.integers(0, 10_000))
def test_reordering_assets_changes_nothing(seed):
    rng = np.random.default_rng(seed)
    t, n = 60, 9
    idx = pd.period_range("2000-01", periods=t, freq="M", name="date")
    fac = pd.DataFrame(rng.normal(0.004, 0.04, (t, 2)), index=idx, columns=["m", "s"])
    b = rng.normal(1, 0.5, (n, 2))
    ret = pd.DataFrame(fac.to_numpy() @ b.T + rng.normal(0, 0.02, (t, n)), index=idx,
                       columns=[f"a{i}" for i in range(n)])
    ret = ret.mask(rng.random((t, n)) < 0.1)
    betas = time_series_betas(ret, fac).betas
    base = fama_macbeth(ret, betas, factors=fac, nw_lags=2)
    perm = list(rng.permutation(ret.columns))
    other = fama_macbeth(ret[perm], betas.loc[perm], factors=fac, nw_lags=2)
    for name in ("lambda_", "se_fm", "se_nw", "se_shanken"):
        np.testing.assert_allclose(getattr(base, name), getattr(other, name), rtol=1e-9)
    assert base.pricing_error_test["stat"] == pytest.approx(other.pricing_error_test["stat"], rel=1e-6)
    pd.testing.assert_series_equal(base.pricing_errors.loc[perm], other.pricing_errors,
                                   rtol=1e-8, atol=1e-15)


# ------------------------------------------------------------------ derived figures


def test_headline_annual_interval_p_and_marks(demo_case):
    """Headline figures: Shanken se with full betas (Shanken 1992), Newey-West otherwise;
    annual lambda = 12 lambda, interval = annual lambda +/- z se at the stored level, p from
    the normal distribution (scipy.stats.norm in the test), chi-square p of the pricing-error
    test equal to scipy.stats.chi2.sf."""
    from scipy import stats
    fac, ret, _ = demo_case
    res = fama_macbeth(ret, time_series_betas(ret, fac).betas, factors=fac, confidence=0.9)
    assert res.headline_se == "shanken"
    d = json.loads(json.dumps(res.to_dict(), allow_nan=False))
    z = stats.norm.ppf(0.95)
    for f in res.factors:
        lam_a, se_a = 12 * res.lambda_[f], 12 * res.se_shanken[f]
        assert d["lambda_annual"][f] == pytest.approx(lam_a, rel=1e-12)
        assert d["lambda_annual_se"][f] == pytest.approx(se_a, rel=1e-12)
        assert d["lambda_interval"][f] == pytest.approx([lam_a - z * se_a, lam_a + z * se_a], rel=1e-10)
        p = 2 * stats.norm.sf(abs(res.lambda_[f] / res.se_shanken[f]))
        assert d["p"][f] == pytest.approx(p, rel=1e-8, abs=1e-300)
        assert d["marks"][f] == ("***" if p < 0.01 else "**" if p < 0.05 else "*" if p < 0.1 else "")
    assert d["confidence"] == 0.9
    lo = res.conf_int(0.95)
    np.testing.assert_allclose(lo["low"], res.lambda_ - stats.norm.ppf(0.975) * res.se_shanken, rtol=1e-12)
    pe = res.pricing_error_test
    assert pe["pvalue"] == pytest.approx(stats.chi2.sf(pe["stat"], pe["df"]), rel=1e-10)
    assert d["sample"] == {"first": str(res.gamma.index[0]), "last": str(res.gamma.index[-1]),
                           "periods": res.n_periods}
    rolled = fama_macbeth(ret, rolling_betas(ret, fac, window=60, min_obs=36), nw_lags=3)
    assert rolled.headline_se == "nw" and rolled.to_dict()["headline_se"] == "nw"
    np.testing.assert_allclose(rolled.to_dict()["lambda_annual_se"]["mkt"], 12 * rolled.se_nw["mkt"])
    assert rolled.to_dict()["sample"]["periods"] == 480 - 36


def test_book_premium_inside_the_stage(demo_case):
    """Given the book's betas, the stage carries book_premium() (per factor and total,
    annual, with t, p, marks and intervals at the level); quarterly annualises by 4."""
    from scipy import stats
    fac, ret, _ = demo_case
    betas = time_series_betas(ret, fac).betas
    b = pd.Series({"mkt": 1.0, "term": 0.3, "def": -0.2})
    se_b = pd.Series({"mkt": 0.02, "term": 0.05, "def": 0.04})
    res = fama_macbeth(ret, betas, factors=fac, book_betas=b, book_se=se_b, confidence=0.8)
    tab = book_premium(b, res, book_se=se_b)
    d = json.loads(json.dumps(res.to_dict(), allow_nan=False))
    z = stats.norm.ppf(0.9)
    for f in ("mkt", "term", "def", "dy"):
        row = d["book_premium"][f]
        assert row["premium_annual"] == pytest.approx(tab.loc[f, "premium_annual"], rel=1e-12)
        assert row["premium_annual_se"] == pytest.approx(tab.loc[f, "premium_annual_se"], rel=1e-12)
        if tab.loc[f, "premium_annual_se"] > 0:
            assert row["interval"] == pytest.approx(
                [tab.loc[f, "premium_annual"] - z * tab.loc[f, "premium_annual_se"],
                 tab.loc[f, "premium_annual"] + z * tab.loc[f, "premium_annual_se"]], rel=1e-10)
    assert d["book_premium"]["dy"]["t"] is None and d["book_premium"]["dy"]["marks"] == ""
    tot = d["book_premium_total"]
    assert tot["value"] == pytest.approx(tab.loc["total", "premium_annual"], rel=1e-12)
    assert tot["se"] == pytest.approx(tab.loc["total", "premium_annual_se"], rel=1e-12)
    q = fama_macbeth(ret, betas, factors=fac, book_betas=b, periods_per_year=4)
    assert q.to_dict()["book_premium"]["mkt"]["premium_annual"] == pytest.approx(4 * res.lambda_["mkt"])
    assert fama_macbeth(ret, betas, factors=fac).to_dict()["book_premium"] is None


def test_traded_market_on_the_demo(demo_case):
    """Demo: the market factor listed as traded is priced by its own mean over the months
    used (Lewellen, Nagel and Shanken 2010), also with rolling betas; the others keep a
    cross-sectional lambda; an unknown traded name is an input error."""
    fac, ret, _ = demo_case
    res = fama_macbeth(ret, time_series_betas(ret, fac).betas, factors=fac, traded=["mkt"])
    m = fac.loc[res.gamma.index, "mkt"]
    assert res.lambda_["mkt"] == pytest.approx(m.mean(), rel=1e-12)
    assert res.se_fm["mkt"] == pytest.approx(m.std(ddof=1) / np.sqrt(len(m)), rel=1e-10)
    assert res.to_dict()["lambda_route"] == {v: ("mean" if v == "mkt" else "cross-section") for v in VARS}
    rolled = fama_macbeth(ret, rolling_betas(ret, fac, window=60, min_obs=36), factors=fac, traded=["mkt"])
    assert rolled.lambda_["mkt"] == pytest.approx(fac.loc[rolled.gamma.index, "mkt"].mean(), rel=1e-12)
    assert np.isfinite(rolled.se_shanken).all()
    with pytest.raises(InputError, match="traded"):
        fama_macbeth(ret, time_series_betas(ret, fac).betas, factors=fac, traded=["nope"])
