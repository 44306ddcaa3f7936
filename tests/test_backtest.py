"""Tests of hedgekit.backtest: no look-ahead, holding arithmetic, evaluation, the demo hedge."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from hedgekit.backtest import rebalance_schedule, walk_forward
from hedgekit.errors import InputError
from hedgekit.hedge import HedgeSpec

from .helpers import DEMO, read_demo

NAV = 250_000_000.0


@pytest.fixture(scope="module")
def demo():
    sheet = pd.read_csv(DEMO / "instrument_sheet.csv")
    spec = HedgeSpec.from_sheet(sheet, neutralise=("term", "def"), keep={"mkt": (0.95, 1.05)},
                                max_gross=1.5)
    return {
        "states": read_demo("states"),
        "book": read_demo("portfolio_returns")["larkspur_fund"],
        "instruments": read_demo("instruments"),
        "sheet": sheet,
        "spec": spec,
    }


@pytest.fixture(scope="module")
def demo_run(demo):
    """The demo with rolling 60-month betas, the window of the demo configuration."""
    calls = []
    res = walk_forward(demo["states"], demo["book"], demo["instruments"], demo["sheet"],
                       spec=demo["spec"], nav=NAV, beta_window=60,
                       progress=lambda i, n: calls.append((i, n)))
    return res, calls


def test_demo_hedge_is_effective_and_unbiased(demo_run):
    """On the demo process (true betas known, truth.json) the out-of-sample effectiveness on
    the neutralised factors is >= 50 % and the realised hedged exposure's 95 % interval
    (HAC errors, Newey and West 1987) covers zero for each neutralised factor."""
    res, _ = demo_run
    assert res.effectiveness_neutralised >= 0.5
    assert res.effectiveness_neutralised > 0.99          # measured 0.9994
    ci = res.interval("hedged")
    for f in ("term", "def"):
        assert ci.loc["lo", f] <= 0.0 <= ci.loc["hi", f], (f, ci[f].to_dict())
    # the unhedged book's realised exposures are clearly away from zero on those factors
    un = res.interval("unhedged")
    for f in ("term", "def"):
        assert not un.loc["lo", f] <= 0.0 <= un.loc["hi", f], (f, un[f].to_dict())
    assert abs(res.realised_exposure.loc["unhedged", "def"]) > 0.15
    # the market stays in its band (0.95, 1.05) up to estimation error
    assert 0.9 < res.realised_exposure.loc["hedged", "mkt"] < 1.1
    # realised tracking error close to the predicted one (both annualised)
    assert res.realised_tracking_error == pytest.approx(res.predicted_tracking_error, rel=0.2)
    assert (res.status == "optimal").all()


def test_demo_contract_and_frame(demo_run):
    """JSON contract keys of interface.md; progress callback; --out frame columns."""
    res, calls = demo_run
    out = res.to_dict()
    json.dumps(out, allow_nan=False)
    for key in ("rebalance_dates", "decisions", "effectiveness", "realised_tracking_error",
                "predicted_tracking_error"):
        assert key in out
    assert out["rebalance_dates"][0] == "1999-03"            # 120 VAR + 36 beta months
    assert set(out["decisions"]) == set(out["rebalance_dates"])
    assert all(d.endswith(("-03", "-06", "-09", "-12")) for d in out["rebalance_dates"])
    assert calls[-1] == (len(res.rebalance_dates), len(res.rebalance_dates))
    assert len(calls) == len(res.rebalance_dates)
    frame = res.to_frame()
    assert {"book", "overlay", "cost", "hedged", "hedged_net", "factor.term"} <= set(frame)
    assert frame.index[0] == res.rebalance_dates[0] + 1
    assert frame.index[-1] == pd.Period("2025-12", "M")


def test_holding_and_costs_arithmetic(demo_run, demo):
    """Overlay return in month t is h_τ' r_t with τ the last rebalance before t; the cost
    of the trade at τ (sum_j c_j |Δh_j|, cost_bps from the sheet) is paid in τ+1."""
    res, _ = demo_run
    inst = demo["instruments"]
    s = res.series
    for t in [s.index[0], s.index[1], s.index[2], s.index[3], s.index[100], s.index[-1]]:
        tau = max(d for d in res.rebalance_dates if d < t)
        assert s.loc[t, "decision_date"] == tau
        expected = float(res.decisions.loc[tau].to_numpy() @ inst.loc[t].to_numpy())
        assert s.loc[t, "overlay"] == pytest.approx(expected, rel=1e-12, abs=1e-16)
    cost_bps = demo["sheet"].set_index("instrument")["cost_bps"] / 1e4
    d = res.decisions
    trades = d.diff().fillna(d.iloc[0]).abs()
    np.testing.assert_allclose(res.cost_path.to_numpy(), trades.to_numpy() @ cost_bps.loc[d.columns]
                               .to_numpy(), rtol=1e-9, atol=1e-15)
    np.testing.assert_allclose(res.turnover_path.to_numpy(), trades.sum(axis=1).to_numpy(),
                               rtol=1e-12, atol=1e-15)
    tau1 = res.rebalance_dates[1]
    assert s.loc[tau1 + 1, "cost"] == pytest.approx(res.cost_path.loc[tau1])
    assert s.loc[tau1 + 2, "cost"] == 0.0
    assert res.costs_paid == pytest.approx(res.cost_path.sum())
    np.testing.assert_allclose(s["hedged"], s["book"] + s["overlay"])


def test_evaluation_matches_statsmodels(demo_run):
    """Realised exposures and HAC errors equal statsmodels OLS(cov_type="HAC", Bartlett,
    maxlags = floor(4 (T/100)^(2/9))) on the out-of-sample series; effectiveness equals
    1 - var(fitted factor part, hedged) / var(fitted factor part, unhedged) from the
    statsmodels fits (methods.md section 5)."""
    res, _ = demo_run
    s = res.series
    fcols = [f"factor.{f}" for f in res.factors]
    x = sm.add_constant(s[fcols].to_numpy())
    lags = int(np.floor(4 * (len(s) / 100) ** (2 / 9)))
    parts = {}
    for side, col in (("unhedged", "book"), ("hedged", "hedged")):
        fit = sm.OLS(s[col].to_numpy(), x).fit(cov_type="HAC", cov_kwds={"maxlags": lags})
        np.testing.assert_allclose(res.realised_exposure.loc[side].to_numpy(), fit.params[1:],
                                   rtol=1e-8)
        np.testing.assert_allclose(res.realised_exposure_se.loc[side].to_numpy(), fit.bse[1:],
                                   rtol=1e-6)
        parts[side] = fit.fittedvalues - fit.params[0]
    eff = 1 - np.var(parts["hedged"], ddof=1) / np.var(parts["unhedged"], ddof=1)
    assert res.effectiveness == pytest.approx(eff, rel=1e-9)
    tracking = s["overlay"].std(ddof=1) * np.sqrt(12)
    assert res.realised_tracking_error == pytest.approx(tracking, rel=1e-12)


def test_no_look_ahead(demo):
    """Perturb every value dated after a cut: every decision at or before the cut is
    identical to the bit; every later decision changes."""
    states = demo["states"].iloc[:300]
    book, inst = demo["book"].iloc[:300], demo["instruments"].iloc[:300]
    kw = dict(spec=demo["spec"], nav=NAV, min_window=60, beta_min_obs=36)
    base = walk_forward(states, book, inst, demo["sheet"], **kw)
    cut = base.rebalance_dates[len(base.rebalance_dates) // 2]
    rng = np.random.default_rng(11)

    def bump(frame):
        out = frame.copy()
        after = out.index > cut
        noise = rng.normal(0.0, 1.0, out.loc[after].shape)
        out.loc[after] = out.loc[after].to_numpy() * (1 + 0.2 * noise) + 1e-4 * noise
        return out

    states2 = bump(states)
    book2 = bump(book.to_frame())["larkspur_fund"]
    inst2 = bump(inst)
    pert = walk_forward(states2, book2, inst2, demo["sheet"], **kw)
    assert base.rebalance_dates.equals(pert.rebalance_dates)
    early = base.rebalance_dates <= cut
    assert early.sum() >= 5 and (~early).sum() >= 5
    a, b = base.decisions.to_numpy(), pert.decisions.to_numpy()
    assert np.array_equal(a[early], b[early])                # bit for bit
    assert np.array_equal(base.book_betas_path.to_numpy()[early],
                          pert.book_betas_path.to_numpy()[early])
    assert np.all(np.any(a[~early] != b[~early], axis=1))     # every later decision moves
    s1, s2 = base.series, pert.series
    upto = s1.index <= cut
    assert np.array_equal(s1.loc[upto, "overlay"].to_numpy(), s2.loc[upto, "overlay"].to_numpy())


def test_rebalance_schedule():
    """Quarter ends from the first date, leaving one month to hold the last overlay."""
    idx = pd.period_range("2000-01", "2001-03", freq="M", name="date")
    q = rebalance_schedule(idx, first=pd.Period("2000-02", "M"))
    assert [str(d) for d in q] == ["2000-03", "2000-06", "2000-09", "2000-12"]
    m = rebalance_schedule(idx, rebalance="monthly", first=pd.Period("2000-11", "M"))
    assert [str(d) for d in m] == ["2000-11", "2000-12", "2001-01", "2001-02"]
    with pytest.raises(InputError, match="rebalance"):
        rebalance_schedule(idx, rebalance="weekly")


def test_bad_input(demo):
    """Too early a start, a bad NAV and premia without test assets raise InputError."""
    args = (demo["states"], demo["book"], demo["instruments"], demo["sheet"])
    with pytest.raises(InputError, match="before the first date"):
        walk_forward(*args, spec=demo["spec"], nav=NAV, start="1990-03")
    with pytest.raises(InputError, match="NAV"):
        walk_forward(*args, spec=demo["spec"], nav=0.0)
    from dataclasses import replace
    with pytest.raises(InputError, match="test-asset"):
        walk_forward(*args, spec=replace(demo["spec"], premium_weight=1.0), nav=NAV)
    with pytest.raises(InputError, match="one series"):
        walk_forward(demo["states"], demo["instruments"], demo["instruments"], demo["sheet"],
                     spec=demo["spec"], nav=NAV)


def test_premium_objective_uses_prices_of_risk_at_each_date(demo):
    """With premium_weight > 0 the prices of risk are re-estimated at each date on data up
    to it (Fama-MacBeth on the test assets) and the premium given up is recorded; the
    first date's prices equal hedgekit.premia.fama_macbeth run by hand on that window."""
    from dataclasses import replace

    from hedgekit.exposures import time_series_betas
    from hedgekit.premia import fama_macbeth
    from hedgekit.states import realtime_innovations

    n = 240
    states, book = demo["states"].iloc[:n], demo["book"].iloc[:n]
    inst, assets = demo["instruments"].iloc[:n], read_demo("assets").iloc[:n]
    spec = replace(demo["spec"], premium_weight=0.5)
    res = walk_forward(states, book, inst, demo["sheet"], spec=spec, nav=NAV, min_window=60,
                       asset_returns=assets)
    assert res.premia_path is not None and len(res.premia_path) == len(res.rebalance_dates)
    assert res.premium_given_up_path is not None
    assert np.isfinite(res.premium_given_up_path.to_numpy()).all()
    tau = res.rebalance_dates[0]
    f = realtime_innovations(states, min_window=60).factors()
    f = f[f.notna().all(axis=1) & (f.index <= tau)]
    r = assets.reindex(f.index)
    b = time_series_betas(r, f).betas.dropna()
    lam = fama_macbeth(r[b.index], b, factors=f).lambda_
    np.testing.assert_allclose(res.premia_path.iloc[0].to_numpy(), lam.to_numpy(), rtol=1e-10)
    # pricing the exposures changes the decisions against the pure tracking objective
    plain = walk_forward(states, book, inst, demo["sheet"], spec=demo["spec"], nav=NAV,
                         min_window=60)
    assert not np.allclose(res.decisions.to_numpy(), plain.decisions.to_numpy(), atol=1e-6)


def test_batched_estimates_equal_the_stage_functions(demo):
    """The batched window betas and covariances equal hedgekit.exposures.time_series_betas
    and hedgekit.hedge.instrument_covariance (divisor T-1) run on each window by hand, for
    expanding and rolling windows and series with missing months."""
    from hedgekit.backtest import _window_betas, _window_cov
    from hedgekit.exposures import time_series_betas
    from hedgekit.hedge import instrument_covariance
    from hedgekit.states import realtime_innovations

    f = realtime_innovations(demo["states"]).factors()
    f = f[f.notna().all(axis=1)]
    panel = pd.concat([demo["book"].rename("book"), demo["instruments"]], axis=1).reindex(f.index)
    panel.iloc[[5, 40, 41, 200], [0, 3]] = np.nan            # unbalanced: gaps in two series
    ends = np.array([60, 150, 300, len(f)])
    for starts in (np.zeros_like(ends), np.maximum(ends - 60, 0)):
        coef, n = _window_betas(panel.to_numpy(), f.to_numpy(), starts, ends)
        cov, m = _window_cov(panel.iloc[:, 1:].to_numpy(), starts, ends)
        for d, (s, e) in enumerate(zip(starts, ends, strict=True)):
            ref = time_series_betas(panel.iloc[s:e], f.iloc[s:e])
            np.testing.assert_allclose(coef[d], ref.betas.to_numpy(), rtol=1e-9, atol=1e-12)
            np.testing.assert_array_equal(n[d], ref.n_obs.to_numpy())
            ref_cov = instrument_covariance(panel.iloc[s:e, 1:], periods_per_year=1)
            np.testing.assert_allclose(cov[d], ref_cov.to_numpy(), rtol=1e-9, atol=1e-16)


def test_robust_and_shrinkage_paths(demo):
    """The robust overlay (HAC errors per date from the exposures stage) and Ledoit-Wolf
    covariance run through the stage functions; the robust hedge's in-sample exposure
    meets its tolerance at every date it was reachable."""
    from dataclasses import replace

    n = 200
    args = (demo["states"].iloc[:n], demo["book"].iloc[:n], demo["instruments"].iloc[:n],
            demo["sheet"])
    spec = replace(demo["spec"], robust=True, tolerance=0.05)
    res = walk_forward(*args, spec=spec, nav=NAV, min_window=60, start="2000-03",
                       covariance_method="ledoit-wolf")
    assert 3 <= len(res.rebalance_dates) <= 12
    ok = res.status == "optimal"
    assert ok.any()
    after = res.hedged_betas_path.loc[ok.to_numpy(), ["term", "def"]]
    assert (after.abs() <= 0.05 + 1e-6).all().all()
    plain = walk_forward(*args, spec=demo["spec"], nav=NAV, min_window=60, start="2000-03",
                         covariance_method="ledoit-wolf")
    assert res.settings["covariance_method"] == "ledoit-wolf"
    assert plain.rebalance_dates.equals(res.rebalance_dates)


def test_invariant_to_instrument_order_and_nav(demo):
    """Invariants: reordering the instruments permutes the decisions; scaling NAV leaves
    the weights (fractions of NAV) and costs as fractions unchanged (up to solver tolerance)."""
    n = 220
    states, book = demo["states"].iloc[:n], demo["book"].iloc[:n]
    inst = demo["instruments"].iloc[:n]
    kw = dict(spec=demo["spec"], min_window=60)
    base = walk_forward(states, book, inst, demo["sheet"], nav=NAV, **kw)
    order = list(inst.columns[::-1])
    sheet = demo["sheet"].set_index("instrument").loc[order].reset_index()
    other = walk_forward(states, book, inst[order], sheet, nav=NAV * 4, **kw)
    np.testing.assert_allclose(other.decisions[base.decisions.columns].to_numpy(),
                               base.decisions.to_numpy(), atol=1e-6)
    np.testing.assert_allclose(other.cost_path.to_numpy(), base.cost_path.to_numpy(), atol=1e-8)
    assert other.effectiveness == pytest.approx(base.effectiveness, abs=1e-6)
