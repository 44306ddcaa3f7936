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
    from hedgekit.backtest.estimators import window_betas as _window_betas
    from hedgekit.backtest.estimators import window_cov as _window_cov
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


def _short(demo, n=220):
    return (demo["states"].iloc[:n], demo["book"].iloc[:n], demo["instruments"].iloc[:n],
            demo["sheet"])


def test_unreachable_rebalances_are_counted_and_warned(demo, demo_run):
    """A gross cap of 5 % of NAV cannot neutralise term and def (the demo book's def beta
    alone needs more): every decision is "unreachable"; the count, the first warning and
    the JSON say so, and the held overlay respects the cap (closest) or is zero (not)."""
    from dataclasses import replace

    spec = replace(demo["spec"], max_gross=0.05)
    res = walk_forward(*_short(demo), spec=spec, nav=NAV, min_window=60)
    n = len(res.rebalance_dates)
    assert n >= 10 and (res.status == "unreachable").all()
    assert res.n_unreachable == n
    first = str(res.rebalance_dates[0])
    assert res.warnings[0] == (f"{n} of {n} rebalances could not reach the targets; the closest "
                               f"reachable overlay was held (see status by date). The first "
                               f"was {first}.")
    assert (res.decisions.abs().sum(axis=1) <= 0.05 + 1e-6).all()
    assert (res.decisions.abs().sum(axis=1) > 0.04).all()     # the cap binds: not a null hedge
    out = res.to_dict()
    assert out["n_unreachable"] == n and out["n_rebalances"] == n
    off = walk_forward(*_short(demo), spec=spec, nav=NAV, min_window=60, closest=False)
    assert off.n_unreachable == n
    assert off.warnings[0].startswith(f"{n} of {n} rebalances could not reach the targets; "
                                      "no overlay was held at those dates (see status by date).")
    assert np.array_equal(off.decisions.to_numpy(), np.zeros(off.decisions.shape))
    # the ordinary demo run reaches every target and says nothing of the kind
    ok, _ = demo_run
    assert ok.n_unreachable == 0 and ok.to_dict()["n_unreachable"] == 0
    assert not any("could not reach" in w for w in ok.warnings)


def _quarterly(frame, how):
    """Monthly demo data to calendar quarters: returns summed (a common practice
    approximation to compounding), state levels at the quarter end."""
    q = frame.index.asfreq("Q")
    g = frame.groupby(q)
    out = g.sum(min_count=3) if how == "sum" else g.last()
    out.index = pd.PeriodIndex(out.index, freq="Q", name="date")
    return out


def test_quarterly_data_speak_of_quarters(demo):
    """Quarterly data (the demo summed to quarters): every period is a rebalance date, the
    result says "quarters" (n_periods, period_label) while keeping n_months for old
    readers, and annualises with sqrt(4) (realised tracking error = sd(overlay) * 2)."""
    st = demo["states"]
    states = pd.concat([_quarterly(st[["mkt"]], "sum"),
                        _quarterly(st[["dy", "term", "def", "rf"]], "last")], axis=1)
    states.iloc[0, 0] = np.nan                       # the first quarter has two months only
    book = _quarterly(demo["book"].to_frame(), "sum")["larkspur_fund"]
    inst = _quarterly(demo["instruments"].iloc[1:], "sum")
    res = walk_forward(states, book, inst, demo["sheet"], spec=demo["spec"], nav=NAV,
                       min_window=60, beta_min_obs=24, periods_per_year=4)
    assert res.period_label == "quarters" and res.periods_per_year == 4
    assert res.n_periods == res.n_months == len(res.series.dropna(subset=["book"]))
    assert res.n_periods > 40
    d = res.rebalance_dates
    assert d.freqstr.startswith("Q") and (np.diff(d.asi8) == 1).all()
    out = res.to_dict()
    assert out["period_label"] == "quarters" and out["n_periods"] == res.n_periods
    assert out["n_months"] == res.n_periods and out["periods_per_year"] == 4
    assert res.realised_tracking_error == pytest.approx(res.series["overlay"].std(ddof=1) * 2,
                                                        rel=1e-12)
    assert res.settings["period_label"] == "quarters"
    with pytest.raises(InputError, match=r"150 quarters of real-time factors .* 60 quarters"):
        walk_forward(states, book, inst, demo["sheet"], spec=demo["spec"], nav=NAV,
                     min_window=60, beta_min_obs=150, periods_per_year=4)
    with pytest.raises(InputError, match=r"\[backtest\] min_periods = 300: the state data "
                                         r"have only 160 complete quarters"):
        walk_forward(states, book, inst, demo["sheet"], spec=demo["spec"], nav=NAV,
                     min_window=300, beta_min_obs=20, periods_per_year=4)
    monthly = walk_forward(*_short(demo), spec=demo["spec"], nav=NAV, min_window=60)
    assert monthly.period_label == "months" and monthly.to_dict()["n_periods"] == \
        monthly.n_months


def _message(exc: pytest.ExceptionInfo) -> str:
    """The message before InputError's ' Fix: ...' suffix."""
    return str(exc.value).split(" Fix: ")[0]


def test_messages_name_the_configuration_key(demo):
    """Bad settings are named as the user writes them ([section] key = value), as whole
    sentences, and not as a data column."""
    args = _short(demo)
    kw = dict(spec=demo["spec"], nav=NAV, min_window=60)
    with pytest.raises(InputError) as e:
        walk_forward(*args, **kw, start="2031-01")
    assert _message(e) == "[backtest] start = '2031-01' is after the last date 2004-03."
    assert e.value.column is None and e.value.fix.endswith(".")
    with pytest.raises(InputError) as e:
        walk_forward(*args, **kw, start="1990-03")
    assert _message(e).startswith("[backtest] start = '1990-03' comes before the first date "
                                  "with enough history, 1994-01 (a first VAR fit on 60 "
                                  "months, then 36 months of betas).")
    with pytest.raises(InputError) as e:
        walk_forward(*args, **kw, start="soon")
    assert _message(e) == "[backtest] start = 'soon' is not a date."
    with pytest.raises(InputError) as e:
        walk_forward(*args, **kw, beta_window=10)
    assert _message(e) == ("[exposures] window = 10 must be a whole number of at least "
                           "[exposures] min_obs = 36 months.")
    with pytest.raises(InputError) as e:
        walk_forward(*args, **kw, rebalance="weekly")
    assert _message(e) == "[backtest] rebalance = 'weekly' is not a rebalance frequency."
    with pytest.raises(InputError) as e:
        walk_forward(*args, spec=demo["spec"], nav=NAV, min_window=200)
    assert "[backtest] min_periods = 200" in _message(e)
    assert "[backtest] min_periods or [exposures] min_obs" in e.value.fix
    with pytest.raises(InputError) as e:
        walk_forward(*args, **kw | {"nav": -5.0})
    assert _message(e) == "[portfolio] nav = -5.0: the NAV must be a positive number."
    assert e.value.column is None


def test_market_missing_from_states_needs_the_states_file(demo):
    """State data without the market column (the market came from a factors file) is
    refused with a message saying the walk-forward needs the states file because it
    re-estimates the VAR at every date; a market column given out of order is moved first
    and gives the same decisions as the ordered data."""
    states, book, inst, sheet = _short(demo)
    no_mkt = states.drop(columns="mkt")
    for market in ("mkt", None):
        with pytest.raises(InputError) as e:
            walk_forward(no_mkt, book, inst, sheet, spec=demo["spec"], nav=NAV, min_window=60,
                         market=market)
        msg = str(e.value)
        assert "re-estimates the VAR at every date" in msg and "states file" in msg
        assert "factors file" in msg and "'mkt'" in msg or "mkt," in msg
    base = walk_forward(states, book, inst, sheet, spec=demo["spec"], nav=NAV, min_window=60)
    moved = walk_forward(states[["dy", "term", "def", "rf", "mkt"]], book, inst, sheet,
                         spec=demo["spec"], nav=NAV, min_window=60, market="mkt")
    np.testing.assert_array_equal(moved.decisions.to_numpy(), base.decisions.to_numpy())
