"""Unit and property tests of hedgekit.exposures on the invented demo and small panels."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from hedgekit import demo
from hedgekit.errors import InputError
from hedgekit.exposures import (
    estimate_exposures,
    exposure_impacts,
    newey_west_lags,
    pnl_from_shocks,
    rolling_betas,
    time_series_betas,
)


def true_factors(sim: dict) -> pd.DataFrame:
    """The demo's factors from its true process: [mkt, (M u)_2..K] with u = z_t - c - A z_{t-1}."""
    truth = sim["truth"]
    names = truth["variables"]
    z = sim["states"][names].to_numpy()
    c = np.array([truth["var"]["intercept"][v] for v in names])
    a = np.array([[truth["var"]["coef"][e][f"{v}.L1"] for v in names] for e in names])
    m = np.array([[truth["transform"][r][v] for v in names] for r in names])
    u = z[1:] - c - z[:-1] @ a.T
    orth = u @ m.T
    f = np.column_stack([z[1:, 0], orth[:, 1:]])
    frame = pd.DataFrame(f, index=sim["states"].index[1:], columns=names).iloc[1:]
    frame.index.name = "date"
    return frame


@pytest.fixture(scope="module")
def scenario() -> dict:
    sim = demo.simulate()
    sim["factors"] = true_factors(sim)
    return sim


@pytest.fixture(scope="module")
def exposures(scenario):
    return estimate_exposures(scenario["factors"], scenario["assets"],
                              instruments=scenario["instruments"], holdings=scenario["holdings"],
                              portfolio_returns=scenario["portfolio_returns"])


def _panel(seed: int, t: int = 120, n: int = 6, k: int = 2):
    rng = np.random.default_rng(seed)
    idx = pd.period_range("2001-01", periods=t, freq="M", name="date")
    f = pd.DataFrame(rng.normal(0, 0.04, (t, k)), index=idx, columns=[f"f{j}" for j in range(k)])
    b = rng.normal(1.0, 0.5, (n, k))
    r = pd.DataFrame(f.to_numpy() @ b.T + rng.normal(0, 0.02, (t, n)), index=idx,
                     columns=[f"a{i}" for i in range(n)])
    return r, f, b


def test_demo_recovers_true_betas(scenario, exposures):
    """Recovery on the demo: estimated betas within 4 HAC standard errors of the truth
    (true betas from truth.json; the 4-se band is common practice)."""
    truth = pd.DataFrame(scenario["truth"]["asset_betas"]).T[list(exposures.factors)]
    est = exposures.assets
    z = (est.betas.loc[truth.index] - truth) / est.se_hac.loc[truth.index]
    assert float(z.abs().to_numpy().max()) < 4.5
    assert float((z.abs() < 1.96).to_numpy().mean()) > 0.85
    book_truth = pd.Series(scenario["truth"]["book_betas"])[list(exposures.factors)]
    assert float(((exposures.book - book_truth) / exposures.book_se).abs().max()) < 4.0
    inst_truth = pd.DataFrame(scenario["truth"]["instrument_betas"]).T[list(exposures.factors)]
    diff = (exposures.instruments.betas - inst_truth).abs().to_numpy().max()
    assert diff < 0.1


def test_book_holdings_direct_and_gap(scenario, exposures):
    """w'b from holdings equals the regression of the weighted return series (exact OLS on a
    common sample); the gap to the fund's own return series is small (tracking noise only)."""
    w = scenario["holdings"]
    expected = w.to_numpy() @ exposures.assets.betas.loc[w.index].to_numpy()
    np.testing.assert_allclose(exposures.book.to_numpy(), expected, atol=1e-14)
    weighted = (scenario["assets"][w.index] @ w).to_frame("book")
    weighted = weighted[scenario["assets"][w.index].notna().all(axis=1)]
    direct_book = time_series_betas(weighted, scenario["factors"])
    np.testing.assert_allclose(direct_book.betas.iloc[0].to_numpy(), expected, atol=1e-10)
    assert exposures.book_source == "holdings"
    assert exposures.book_gap is not None
    assert float(exposures.book_gap.abs().max()) < 0.02
    assert (exposures.book_se > 0).all()


def test_rolling_book_and_lagged(exposures):
    rb = exposures.rolling_book
    ra = exposures.rolling_assets
    assert rb.shape == (len(ra.dates), len(exposures.factors))
    assert rb.iloc[:35].isna().all().all() and rb.iloc[36:].notna().all().all()
    lag = ra.lagged()
    np.testing.assert_array_equal(lag.values[1:], ra.values[:-1])
    assert np.isnan(lag.values[0]).all() and lag.is_lagged
    banks = ra.frame("banks")
    assert list(banks.columns) == list(exposures.factors)
    with pytest.raises(InputError):
        ra.frame("not-an-asset")
    long = ra.to_frame()
    assert long.shape == (len(ra.dates) * len(ra.series), len(ra.factors))


def test_to_dict_contract_and_json(exposures):
    d = exposures.to_dict()
    for key in ("factors", "portfolio", "portfolio_se", "assets", "instruments", "rolling"):
        assert key in d
    assert set(d["rolling"]) >= {"dates", "portfolio"}
    assert d["rolling"]["dates"][0].count("-") == 1
    assert d["rolling"]["portfolio"]["mkt"][0] is None
    text = json.dumps(d, allow_nan=False)
    assert "banks" in text
    json.dumps(exposures.assets.to_dict(), allow_nan=False)
    json.dumps(exposures.rolling_assets.to_dict(), allow_nan=False)
    frame = exposures.to_frame()
    assert {"beta", "se", "direct", "gap", "factor_sd"} <= set(frame.columns)
    imp = exposures.impacts(250e6)
    np.testing.assert_allclose(imp["pnl_1sd"], exposures.book * exposures.factor_sd * 250e6)
    assert exposures.pnl({"def": 0.01}, 1e6).loc["total", "pnl"] == pytest.approx(
        exposures.book["def"] * 0.01 * 1e6)


def test_late_series_and_too_few_months(scenario):
    """A series with fewer than K+2 months gets blank betas and a warning, not a crash."""
    a = scenario["assets"].iloc[:, :3].copy()
    a.iloc[6:, 2] = np.nan
    est = time_series_betas(a, scenario["factors"])
    assert est.betas.iloc[2].isna().all() and est.betas.iloc[:2].notna().all().all()
    assert any(a.columns[2] in w for w in est.warnings)
    rb = rolling_betas(a, scenario["factors"], window=60, min_obs=36)
    assert np.isnan(rb.values[:, 2]).all()


def test_bad_input_raises_input_error(scenario):
    f = scenario["factors"].copy()
    f.iloc[10, 2] = np.nan
    with pytest.raises(InputError, match="term"):
        time_series_betas(scenario["assets"], f)
    with pytest.raises(InputError):
        rolling_betas(scenario["assets"], scenario["factors"], window=30, min_obs=36)
    with pytest.raises(InputError):
        time_series_betas(scenario["assets"].reset_index(drop=True), scenario["factors"])
    with pytest.raises(InputError, match="hac_lags"):
        time_series_betas(scenario["assets"], scenario["factors"], hac_lags="many")
    with pytest.raises(InputError, match="unknown_fund"):
        estimate_exposures(scenario["factors"], scenario["assets"],
                           holdings=pd.Series({"unknown_fund": 1.0}))
    with pytest.raises(InputError):
        estimate_exposures(scenario["factors"], scenario["assets"])


def test_direct_only_and_no_rolling(scenario):
    res = estimate_exposures(scenario["factors"], scenario["assets"],
                             portfolio_returns=scenario["portfolio_returns"], window=None)
    assert res.book_source == "direct" and res.book_gap is None
    assert res.rolling_book is None and res.rolling_assets is None
    np.testing.assert_allclose(res.book, res.book_direct.betas.iloc[0])
    assert res.to_dict()["rolling"] is None


def test_newey_west_lag_rule():
    """floor(4 (T/100)^(2/9)) (Newey and West 1994): T=100 -> 4, T=480 -> 5, T=819 -> 6."""
    assert [newey_west_lags(t) for t in (100, 480, 819, 30)] == [4, 5, 6, 3]


def test_exposure_impacts_and_pnl_from_shocks():
    b = pd.Series({"mkt": 1.1, "term": -0.4})
    sd = pd.Series({"mkt": 0.045, "term": 0.045, "def": 0.045})
    imp = exposure_impacts(b, sd, nav=1e8)
    np.testing.assert_allclose(imp["return_1sd"], [1.1 * 0.045, -0.4 * 0.045])
    np.testing.assert_allclose(imp["pnl_1sd"], [1.1 * 0.045 * 1e8, -0.4 * 0.045 * 1e8])
    pnl = pnl_from_shocks(b, {"term": 0.02}, nav=2e8)
    assert pnl.loc["term", "return"] == pytest.approx(-0.008)
    assert pnl.loc["total", "return"] == pytest.approx(-0.008)
    assert pnl.loc["total", "pnl"] == pytest.approx(-0.008 * 2e8)
    assert pnl.loc["mkt", "shock"] == 0.0
    table = pnl_from_shocks(pd.DataFrame([[1.0, 0.5], [0.2, -1.0]], index=["x", "y"],
                                         columns=["mkt", "term"]), {"mkt": -0.1}, nav=10.0)
    np.testing.assert_allclose(table["pnl"], [-1.0, -0.2])
    with pytest.raises(InputError):
        pnl_from_shocks(b, {"nope": 1.0}, nav=1.0)


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 10_000), scale=st.floats(0.1, 10.0))
def test_properties_reorder_and_scale(seed, scale):
    """Reordering series changes nothing; scaling returns scales betas and alphas."""
    r, f, _ = _panel(seed)
    base = time_series_betas(r, f, hac_lags=3)
    perm = list(np.random.default_rng(seed).permutation(r.columns))
    other = time_series_betas(r[perm], f, hac_lags=3)
    pd.testing.assert_frame_equal(base.betas.loc[perm], other.betas, rtol=1e-12, atol=1e-14)
    pd.testing.assert_frame_equal(base.se_hac.loc[perm], other.se_hac, rtol=1e-10)
    scaled = time_series_betas(r * scale, f, hac_lags=3)
    np.testing.assert_allclose(scaled.betas.to_numpy(), scale * base.betas.to_numpy(), rtol=1e-9)
    roll = rolling_betas(r, f, window=40, min_obs=30)
    roll_p = rolling_betas(r[perm], f, window=40, min_obs=30)
    pos = [list(r.columns).index(c) for c in perm]
    np.testing.assert_allclose(roll.values[:, pos], roll_p.values, equal_nan=True, atol=1e-12)


def test_window_covering_sample_equals_full_sample():
    """A window as long as the sample, at the last month, equals the full-sample OLS."""
    r, f, _ = _panel(3)
    r.iloc[[5, 17, 60], 1] = np.nan
    full = time_series_betas(r, f)
    roll = rolling_betas(r, f, window=len(r), min_obs=10)
    np.testing.assert_allclose(roll.values[-1], full.betas.to_numpy(), atol=1e-11)


def test_quarterly_panel_and_series_input():
    """Quarterly PeriodIndex works like monthly; a Series is one series; mixed frequencies fail."""
    r, f, b = _panel(9, t=80, n=3)
    rq = r.copy()
    fq = f.copy()
    rq.index = pd.period_range("1990Q1", periods=80, freq="Q", name="date")
    fq.index = rq.index
    est = time_series_betas(rq, fq, hac_lags=2)
    np.testing.assert_allclose(est.betas.to_numpy(), time_series_betas(r, f, hac_lags=2).betas.to_numpy())
    one = time_series_betas(rq["a0"], fq)
    assert list(one.betas.index) == ["a0"]
    with pytest.raises(InputError, match="frequency"):
        time_series_betas(rq, f)


def test_with_estimated_states_factors(scenario):
    """End to end on the demo with factors from hedgekit.states (VAR(1), Gram-Schmidt)."""
    from hedgekit.states import estimate_states

    factors = estimate_states(scenario["states"], lags=1).factors()
    res = estimate_exposures(factors, scenario["assets"], holdings=scenario["holdings"],
                             instruments=scenario["instruments"])
    book_truth = pd.Series(scenario["truth"]["book_betas"])[list(res.factors)]
    assert float(((res.book - book_truth) / res.book_se).abs().max()) < 4.0
    json.dumps(res.to_dict(), allow_nan=False)


def test_weights_need_not_sum_to_one_and_constant_factor_window_is_blank(scenario):
    """Doubling every weight doubles the book (the rest is leverage); a window in which a
    factor does not move has no beta (rank deficient), not a huge one."""
    w = scenario["holdings"]
    one = estimate_exposures(scenario["factors"], scenario["assets"], holdings=w, window=None)
    two = estimate_exposures(scenario["factors"], scenario["assets"], holdings=2 * w, window=None)
    np.testing.assert_allclose(two.book, 2 * one.book, rtol=1e-12)
    np.testing.assert_allclose(two.book_se, 2 * one.book_se, rtol=1e-9)
    r, f, _ = _panel(4, t=100, n=3)
    f.iloc[:50, 1] = 0.01
    rb = rolling_betas(r, f, window=40, min_obs=30)
    assert np.isnan(rb.values[29:50]).all() and np.isfinite(rb.values[60:]).all()


# ------------------------------------------------------------------ derived figures


def test_book_inference_and_conf_int_match_statsmodels(scenario) -> None:
    """Direct book: t, p and the interval at 80 % equal statsmodels' OLS HAC fit
    (``cov_type="HAC"``, ``conf_int(alpha=0.2)``, normal ``pvalues``) on the same months."""
    import statsmodels.api as sm
    res = estimate_exposures(scenario["factors"], scenario["assets"],
                             portfolio_returns=scenario["portfolio_returns"], window=None,
                             confidence=0.80)
    pr = scenario["portfolio_returns"].iloc[:, 0].reindex(scenario["factors"].index).dropna()
    x = sm.add_constant(scenario["factors"].loc[pr.index])
    lags = res.assets.hac_lags
    fit = sm.OLS(pr.to_numpy(), x).fit(cov_type="HAC", cov_kwds={"maxlags": lags})
    names = list(scenario["factors"].columns)
    np.testing.assert_allclose(res.portfolio_t[names], fit.tvalues[names], rtol=1e-8)
    np.testing.assert_allclose(res.portfolio_p[names], fit.pvalues[names], rtol=1e-6, atol=1e-12)
    ci = fit.conf_int(alpha=0.2).loc[names]
    np.testing.assert_allclose(res.conf_int()["low"], ci[0], rtol=1e-8)
    np.testing.assert_allclose(res.conf_int(0.95)["high"], fit.conf_int(alpha=0.05).loc[names][1],
                               rtol=1e-8)
    d = json.loads(json.dumps(res.to_dict(), allow_nan=False))
    assert d["confidence"] == 0.8
    for f in names:
        assert d["portfolio_interval"][f] == pytest.approx(list(ci.loc[f]), rel=1e-8)
        p = d["portfolio_p"][f]
        assert d["portfolio_marks"][f] == ("***" if p < 0.01 else "**" if p < 0.05 else
                                           "*" if p < 0.1 else "")
    assert d["sample"] == {"first": str(pr.index[0]), "last": str(pr.index[-1]),
                           "periods": int(len(pr))}


def test_degenerate_se_has_no_marks() -> None:
    """A book whose exposure is numerically exact (zero residual) gets no t, p or marks
    (inference.t_stat: NaN where the se is degenerate, common practice)."""
    r, f, _ = _panel(3)
    exact = (f @ np.array([0.5, -0.2])).rename("book").to_frame()
    res = estimate_exposures(f, r, portfolio_returns=exact, window=None)
    d = res.to_dict()
    assert all(v is None for v in d["portfolio_t"].values())
    assert all(v == "" for v in d["portfolio_marks"].values())


def test_surprise_impacts_equal_the_shock_map(scenario) -> None:
    """Vectorised per-surprise impacts equal b'(M s) with s from states.surprise_to_shocks,
    one variable at a time (isolated and co-moving readings, Anderson 2003 thm. 2.5.1)."""
    from hedgekit.exposures import surprise_impacts
    from hedgekit.states import estimate_states, surprise_to_shocks
    fit = estimate_states(scenario["states"])
    fac = fit.factors()
    res = estimate_exposures(fac, scenario["assets"], holdings=scenario["holdings"], window=None,
                             transform=fit.transform, sigma_u=fit.sigma_u, nav=5e7)
    out = surprise_impacts(res.book, fit.transform, fit.sigma_u, 5e7, size=0.01)
    pd.testing.assert_frame_equal(res.per_surprise, out)
    for var in fit.transform.index:
        for reading in ("isolated", "comove"):
            s = surprise_to_shocks(fit.transform, fit.sigma_u, {var: 0.01}, reading=reading)
            ref = float(res.book.reindex(s.index).fillna(0.0) @ s)
            assert out.loc[var, f"{reading}_return"] == pytest.approx(ref, rel=1e-10, abs=1e-16)
            assert out.loc[var, f"{reading}_pnl"] == pytest.approx(ref * 5e7, rel=1e-10, abs=1e-8)
    d = res.to_dict()["per_surprise"]
    assert set(d) == set(fit.transform.index)
    assert set(d[fit.transform.index[0]]) == {"surprise", "isolated_return", "isolated_pnl",
                                              "comove_return", "comove_pnl"}
