"""Tests of hedgekit.stress: scenario P&L, readings, intervals, replay, bad input."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from hedgekit.errors import InputError
from hedgekit.stress import (
    BUILTIN_SCENARIOS,
    historical_replay,
    overlay_exposure,
    run_stress,
    scenario_shocks,
)

from .helpers import read_demo, truth

TRUTH = truth()
V = TRUTH["variables"]
M = pd.DataFrame(TRUTH["transform"]).T.loc[V, V]
SIGMA = pd.DataFrame(TRUTH["var"]["sigma_u"]).T.loc[V, V]
BOOK = pd.Series(TRUTH["book_betas"]).loc[V]
NAV = float(TRUTH["nav"])


@pytest.fixture(scope="module")
def demo_sample():
    """True-parameter raw innovations and factors of the demo (VAR(1) residuals)."""
    states = read_demo("states")
    z = states[V].to_numpy()
    a = pd.DataFrame(TRUTH["var"]["coef"]).T.loc[V, [f"{v}.L1" for v in V]].to_numpy()
    c = pd.Series(TRUTH["var"]["intercept"]).loc[V].to_numpy()
    raw = pd.DataFrame(z[1:] - c - z[:-1] @ a.T, index=states.index[1:], columns=V)
    orth = pd.DataFrame(raw.to_numpy() @ M.to_numpy().T, index=raw.index, columns=V)
    factors = orth.assign(mkt=states["mkt"].iloc[1:])[V]
    book = read_demo("portfolio_returns")["larkspur_fund"]
    return raw, factors, book


def test_builtin_pnl_equals_b_M_s_independently():
    """P&L = b' M s with M rebuilt from Sigma_u as D L^{-1} (methods.md section 1;
    Cholesky route, numpy.linalg.cholesky) and the scenario sizes of BUILTIN_SCENARIOS."""
    chol = np.linalg.cholesky(SIGMA.to_numpy())
    m_indep = chol[0, 0] * np.linalg.inv(chol)
    res = run_stress(BOOK, M, SIGMA, nav=NAV, include_builtin=True)
    iso = res.table[res.table.reading == "isolated"].set_index("scenario")
    b = BOOK.to_numpy()
    checked = 0
    for name, spec in BUILTIN_SCENARIOS.items():
        if spec["shocks"] is None:
            continue
        s = np.array([spec["shocks"].get(v, 0.0) for v in V])
        expected = b @ (m_indep @ s)
        assert iso.loc[name, "unhedged"] == pytest.approx(expected, rel=1e-10, abs=1e-14)
        assert iso.loc[name, "unhedged_ccy"] == pytest.approx(expected * NAV, rel=1e-10)
        checked += 1
    assert checked == 5
    # the market factor's shock is the market surprise itself (first row of M = e_1)
    row = res.table.index[(res.table.scenario == "equity_drawdown_20pct")
                          & (res.table.reading == "isolated")][0]
    assert res.shocks.loc[row, "mkt"] == pytest.approx(-0.20, abs=1e-12)


def test_comove_equals_conditional_mean_precision_form():
    """Co-move reading: unnamed raw surprises at E[u_K | u_J = s_J]; checked against the
    precision-matrix form -P_KK^{-1} P_KJ s_J of the Gaussian conditional mean (textbook
    identity via the Schur complement; Anderson 2003, *An Introduction to Multivariate
    Statistical Analysis*, ch. 2, from memory)."""
    prec = np.linalg.inv(SIGMA.to_numpy())
    scen = [{"name": "two", "shocks": {"term": 0.01, "def": 0.015}, "reading": "comove"},
            {"name": "one", "shocks": {"rf": -0.01}, "reading": "comove"}]
    res = run_stress(BOOK, M, SIGMA, nav=NAV, scenarios=scen, include_builtin=False)
    for i, sc in enumerate(scen):
        j = np.array([v in sc["shocks"] for v in V])
        k = ~j
        sj = np.array([sc["shocks"][v] for v in np.array(V)[j]])
        fill = -np.linalg.solve(prec[np.ix_(k, k)], prec[np.ix_(k, j)] @ sj)
        s = np.zeros(len(V))
        s[j], s[k] = sj, fill
        np.testing.assert_allclose(res.surprises.iloc[i].to_numpy(), s, rtol=1e-9, atol=1e-15)
        expected = BOOK.to_numpy() @ (M.to_numpy() @ s)
        assert res.table.loc[i, "unhedged"] == pytest.approx(expected, rel=1e-9)


def test_comove_on_leading_variables_shocks_only_those_factors():
    """Conditioning on the first j variables in the order leaves later orthogonal shocks at
    zero: Gram-Schmidt innovations are uncorrelated with earlier raw ones (methods.md 1)."""
    surprises = pd.DataFrame([{"mkt": -0.2}, {"mkt": -0.2, "dy": 0.002}], columns=V)
    _, shocks = scenario_shocks(M, SIGMA, surprises, ["comove", "comove"])
    np.testing.assert_allclose(shocks.iloc[0, 1:].to_numpy(), 0.0, atol=1e-14)
    np.testing.assert_allclose(shocks.iloc[1, 2:].to_numpy(), 0.0, atol=1e-13)
    assert shocks.iloc[0, 0] == pytest.approx(-0.2)


def test_hedge_and_intervals():
    """Hedged P&L = (b + B_H h)'g; se = sqrt(sum g^2 (se_b^2 + se_o^2)) under independence
    (module docstring); 95 % interval uses z = 1.959964 (normal quantile, textbook)."""
    inst = pd.DataFrame(TRUTH["instrument_betas"]).T.loc[:, V]
    h = pd.Series({"rate_future_10y": -0.3, "credit_index_hy": -0.25})
    inst_se = inst.abs() * 0.05 + 0.001
    o, o_se = overlay_exposure(h, inst, inst_se)
    np.testing.assert_allclose(o.to_numpy(), -0.3 * inst.loc["rate_future_10y"].to_numpy()
                               - 0.25 * inst.loc["credit_index_hy"].to_numpy())
    se_b = BOOK.abs() * 0.1
    res = run_stress(BOOK, M, SIGMA, nav=NAV, overlay_betas=o, book_se=se_b, overlay_se=o_se)
    same = run_stress(BOOK, M, SIGMA, nav=NAV, positions=h, instrument_betas=inst,
                      instrument_se=inst_se, book_se=se_b)
    pd.testing.assert_frame_equal(same.to_frame(), res.to_frame())
    g = res.shocks.to_numpy()
    np.testing.assert_allclose(res.table["hedged"], g @ (BOOK + o).to_numpy(), rtol=1e-12)
    se = np.sqrt(g ** 2 @ (se_b.to_numpy() ** 2 + o_se.to_numpy() ** 2))
    np.testing.assert_allclose(res.table["hedged_se"], se, rtol=1e-12)
    np.testing.assert_allclose(res.table["hedged_hi"] - res.table["hedged"], 1.959963985 * se,
                               rtol=1e-8)
    np.testing.assert_allclose(res.table["hedged_ccy_lo"], res.table["hedged_lo"] * NAV)
    # the overlay that cancels term and def exposure removes the isolated def scenario P&L
    # up to the rf shock M_rf,def s_def times b_rf (what is left through the rf factor)
    full = run_stress(BOOK, M, SIGMA, nav=NAV,
                      overlay_betas=pd.Series({"term": -BOOK["term"], "def": -BOOK["def"]})
                      .reindex(V, fill_value=0.0))
    row = full.table.set_index(["scenario", "reading"]).loc[("credit_spreads_widen_150bp",
                                                            "isolated")]
    assert row["hedged"] == pytest.approx(BOOK["rf"] * M.loc["rf", "def"] * 0.015, rel=1e-10)


@settings(max_examples=30, deadline=None)
@given(scale=st.floats(0.1, 10.0), nav=st.floats(1e5, 1e10), size=st.floats(-0.01, 0.01))
def test_linear_in_size_and_nav(scale, nav, size):
    """Invariants: P&L is linear in the surprise; currency P&L scales with NAV (sizes up to
    0.10, the bound on a level shock: SHOCK_BOUNDS)."""
    sc = [{"name": "a", "shocks": {"term": size, "rf": -size / 2}}]
    sc2 = [{"name": "a", "shocks": {"term": size * scale, "rf": -size * scale / 2}}]
    r1 = run_stress(BOOK, M, SIGMA, nav=nav, scenarios=sc, include_builtin=False)
    r2 = run_stress(BOOK, M, SIGMA, nav=nav * scale, scenarios=sc2, include_builtin=False)
    np.testing.assert_allclose(r2.table["unhedged"], r1.table["unhedged"] * scale,
                               rtol=1e-9, atol=1e-15)
    np.testing.assert_allclose(r2.table["unhedged_ccy"], r1.table["unhedged_ccy"] * scale ** 2,
                               rtol=1e-9, atol=1e-6)


def test_sample_recession_and_replay(demo_sample):
    """Recession = mean raw innovation over the 5 % worst months of b'M u_t, checked with
    pandas nsmallest; replay ranks and quarter sums checked by direct computation."""
    raw, factors, book = demo_sample
    res = run_stress(BOOK, M, SIGMA, nav=NAV, raw_innovations=raw, factors=factors,
                     book_returns=book, worst_k=4)
    pnl = raw @ (M.to_numpy().T @ BOOK.to_numpy())
    n = int(np.ceil(0.05 * len(raw)))
    worst = pnl.nsmallest(n).index
    assert res.recession["n_months"] == n == 24
    assert sorted(res.recession["dates"]) == sorted(str(d) for d in worst)
    s = raw.loc[worst].mean().to_numpy()
    rec = res.table[res.table.scenario == "sample_recession"].iloc[0]
    assert rec["unhedged"] == pytest.approx(BOOK.to_numpy() @ M.to_numpy() @ s, rel=1e-10)
    assert rec["unhedged"] < 0

    months = res.replay_months
    model = factors @ BOOK.to_numpy()
    top = months[months.ranked_by == "book"]
    assert list(top["date"]) == list(model.nsmallest(4).index)
    np.testing.assert_allclose(top["realised"], book.loc[top["date"]].to_numpy())
    # the model tracks the realised fund return in its worst months (alpha and noise only)
    assert np.max(np.abs(top["realised"] - top["model_unhedged"])) < 0.03
    term = months[months.ranked_by == "term"]
    assert list(term["date"]) == list((factors["term"] * BOOK["term"]).nsmallest(4).index)

    q = res.replay_quarters[res.replay_quarters.ranked_by == "book"]
    first = q.iloc[0]
    months_in = [p for p in factors.index if p.asfreq("Q") == first["date"]]
    assert len(months_in) == 3
    assert first["model_unhedged"] == pytest.approx(model.loc[months_in].sum(), rel=1e-12)
    assert first["realised"] == pytest.approx(book.loc[months_in].sum(), rel=1e-12)
    # and it is the worst complete quarter
    qs = model.groupby(model.index.asfreq("Q")).sum()
    assert first["model_unhedged"] == pytest.approx(qs.min(), rel=1e-12)

    out = res.to_dict()
    json.dumps(out, allow_nan=False)
    assert {"scenarios", "replay", "recession", "factors"} <= set(out)
    assert out["replay"]["months"][0]["date"] == str(months.iloc[0]["date"])


def test_replay_without_realised():
    """Replay works with factors only; realised is None in JSON."""
    idx = pd.period_range("2000-01", periods=36, freq="M", name="date")
    rng = np.random.default_rng(7)
    f = pd.DataFrame(rng.normal(0, 0.04, (36, len(V))), index=idx, columns=V)
    m, q = historical_replay(f, BOOK, BOOK * 0.5, worst_k=3)
    assert len(m) == 3 * (len(V) + 1) and len(q) == 3 * (len(V) + 1)
    assert m["realised"].isna().all()


def test_bad_input_names_the_problem():
    """Unknown variable -> InputError with the nearest valid name; unknown reading too."""
    with pytest.raises(InputError, match="did you mean 'term'"):
        run_stress(BOOK, M, SIGMA, nav=NAV, scenarios=[{"name": "x", "shocks": {"trem": 0.01}}])
    with pytest.raises(InputError, match="unknown reading"):
        run_stress(BOOK, M, SIGMA, nav=NAV,
                   scenarios=[{"name": "x", "shocks": {"term": 0.01}, "reading": "iso"}])
    with pytest.raises(InputError, match="not a number"):
        run_stress(BOOK, M, SIGMA, nav=NAV, scenarios=[{"name": "x", "shocks": {"term": "a"}}])
    with pytest.raises(InputError, match="NAV"):
        run_stress(BOOK, M, SIGMA, nav=-1.0)
    with pytest.raises(InputError, match="lower triangular"):
        run_stress(BOOK, M.T.set_axis(V).set_axis(V, axis=1), SIGMA, nav=NAV)
    with pytest.raises(InputError, match="market"):
        run_stress(BOOK, M, SIGMA, nav=NAV, market="dy")
    with pytest.raises(InputError, match="lack"):
        run_stress(BOOK.drop("rf"), M, SIGMA, nav=NAV)


def test_user_scenario_both_readings_and_frame():
    """A user scenario with no reading runs in both; to_frame has one row per reading."""
    res = run_stress(BOOK, M, SIGMA, nav=NAV, include_builtin=False,
                     scenarios=[{"name": "bear_steepener", "shocks": {"term": 0.005}}])
    frame = res.to_frame()
    assert list(frame["reading"]) == ["isolated", "comove"]
    assert (frame["scenario"] == "bear_steepener").all()
    assert not any("sample_recession" in w for w in res.warnings)


def test_agrees_with_states_surprise_map():
    """Scenario shocks agree with hedgekit.states.surprise_to_shocks, a separate
    implementation of methods.md section 1 (isolated and co-move readings)."""
    from hedgekit.states import surprise_to_shocks

    scen = [{"name": "a", "shocks": {"term": 0.01, "rf": -0.005}},
            {"name": "b", "shocks": {"def": 0.015}}]
    res = run_stress(BOOK, M, SIGMA, nav=NAV, scenarios=scen, include_builtin=False)
    for i, row in res.table.iterrows():
        sc = next(s for s in scen if s["name"] == row["scenario"])
        other = surprise_to_shocks(M, SIGMA, sc["shocks"], reading=row["reading"])
        np.testing.assert_allclose(res.shocks.loc[i].to_numpy(), other.loc[V].to_numpy(),
                                   rtol=1e-10, atol=1e-14)


def test_plausibility_columns():
    """largest_sd = max |s_j| / sd_j over named variables; the co-move completion has the
    smallest Mahalanobis distance of all completions (it minimises s' Sigma^{-1} s given
    s_J, which leaves sqrt(s_J' Sigma_JJ^{-1} s_J): the Gaussian conditional-mean property,
    textbook, from memory), so it is never above the isolated one."""
    scen = [{"name": "a", "shocks": {"term": 0.01, "def": 0.015}}]
    res = run_stress(BOOK, M, SIGMA, nav=NAV, scenarios=scen, include_builtin=False)
    sd = np.sqrt(np.diag(SIGMA.to_numpy()))
    t = res.table.set_index("reading")
    expected_sd = max(0.01 / sd[V.index("term")], 0.015 / sd[V.index("def")])
    assert t.loc["isolated", "largest_sd"] == pytest.approx(expected_sd)
    j = [V.index("term"), V.index("def")]
    sj = np.array([0.01, 0.015])
    floor = np.sqrt(sj @ np.linalg.solve(SIGMA.to_numpy()[np.ix_(j, j)], sj))
    assert t.loc["comove", "mahalanobis"] == pytest.approx(floor, rel=1e-9)
    assert t.loc["isolated", "mahalanobis"] >= t.loc["comove", "mahalanobis"]


def test_interval_coverage_monte_carlo(demo_sample):
    """Monte Carlo (seeded): 200 books with the true demo betas and iid noise on the demo's
    own factors; betas and OLS errors from hedgekit.exposures.time_series_betas; the 95 %
    scenario interval under the independence assumption covers the true P&L b'M s in
    about 95 % of books for every built-in scenario (binomial sd 1.5 %)."""
    from hedgekit.exposures import time_series_betas

    _, factors, _ = demo_sample
    rng = np.random.default_rng(20261201)
    n_books = 200
    f = factors.to_numpy()
    noise = rng.normal(0.0, 0.02, (len(f), n_books))
    books = pd.DataFrame(f @ BOOK.to_numpy()[:, None] + noise, index=factors.index)
    books.columns = [f"book_{i}" for i in range(n_books)]
    est = time_series_betas(books, factors)
    truth_pnl = run_stress(BOOK, M, SIGMA, nav=NAV).table["unhedged"].to_numpy()
    hits = []
    for name in books.columns:    # one stress run per simulated book
        res = run_stress(est.betas.loc[name], M, SIGMA, nav=NAV, book_se=est.se_ols.loc[name])
        t = res.table
        hits.append((t["unhedged_lo"].to_numpy() <= truth_pnl)
                    & (truth_pnl <= t["unhedged_hi"].to_numpy()))
    coverage = np.mean(hits, axis=0)
    assert np.all(coverage > 0.9) and np.all(coverage < 0.99), coverage


def test_user_scenario_replaces_builtin_of_the_same_name(demo_sample):
    """A user scenario named like a built-in replaces it: one pair of rows with that name,
    the user's size (P&L = b' M s with the user's s), and a warning saying so; the same
    holds for sample_recession; two user scenarios may not share a name."""
    raw, _, _ = demo_sample
    scen = [{"name": "curve_steepens_100bp", "shocks": {"term": 0.02}}]
    res = run_stress(BOOK, M, SIGMA, nav=NAV, scenarios=scen)
    rows = res.table[res.table.scenario == "curve_steepens_100bp"]
    assert list(rows["reading"]) == ["isolated", "comove"]
    s = np.array([0.02 if v == "term" else 0.0 for v in V])
    iso = rows[rows.reading == "isolated"].iloc[0]
    assert iso["unhedged"] == pytest.approx(BOOK.to_numpy() @ M.to_numpy() @ s, rel=1e-10)
    assert any("replaces the built-in scenario" in w and "curve_steepens_100bp" in w
               for w in res.warnings)
    assert not res.table.duplicated(["scenario", "reading"]).any()
    names = [r["name"] for r in res.to_dict()["scenarios"]]
    assert names.count("curve_steepens_100bp") == 2
    # the other built-ins are all still there
    assert {"credit_spreads_widen_150bp", "equity_drawdown_20pct"} <= set(res.table.scenario)
    rec = run_stress(BOOK, M, SIGMA, nav=NAV, raw_innovations=raw,
                     scenarios=[{"name": "sample_recession", "shocks": {"mkt": -0.1},
                                 "reading": "isolated"}])
    r = rec.table[rec.table.scenario == "sample_recession"]
    expected = -0.1 * float(BOOK.to_numpy() @ M["mkt"].to_numpy())     # b' M e_mkt s_mkt
    assert len(r) == 1 and r.iloc[0]["unhedged"] == pytest.approx(expected, rel=1e-10)
    assert rec.recession is None
    assert any("sample_recession" in w and "replaces" in w for w in rec.warnings)
    plain = run_stress(BOOK, M, SIGMA, nav=NAV, raw_innovations=raw)
    assert plain.recession["period_label"] == "months"
    assert not any("replaces" in w for w in plain.warnings)
    with pytest.raises(InputError) as e:
        run_stress(BOOK, M, SIGMA, nav=NAV, scenarios=[{"name": "a", "shocks": {"term": 0.01}},
                                                      {"name": "a", "shocks": {"def": 0.01}}])
    assert str(e.value).startswith("[[stress.scenarios]] number 2 repeats the name 'a' of "
                                   "number 1. Fix: ")


def test_tables_have_a_named_index_for_csv(demo_sample):
    """to_frame() and the replay frames have a named index, so a CSV written with its index
    has a header for every column (no blank first header)."""
    import io

    raw, factors, book = demo_sample
    res = run_stress(BOOK, M, SIGMA, nav=NAV, raw_innovations=raw, factors=factors,
                     book_returns=book, worst_k=3)
    for frame in (res.to_frame(), res.replay_months, res.replay_quarters, res.shocks,
                  res.contributions_hedged):
        assert frame.index.name == "row"
        header = frame.to_csv().splitlines()[0].split(",")
        assert header[0] == "row" and all(header)
        back = pd.read_csv(io.StringIO(frame.to_csv()), index_col="row")
        assert list(back.columns) == [str(c) for c in frame.columns]


def test_messages_name_the_configuration_key():
    """Bad settings and scenarios are named as the user writes them in the configuration,
    as whole sentences, never as a data column."""
    cases = [
        (dict(nav=-1.0), "[portfolio] nav = -1.0: the NAV must be a positive number."),
        (dict(nav=NAV, worst_k=0), "[stress] worst_k = 0 must be at least 1."),
        (dict(nav=NAV, recession_quantile=1.5),
         "[stress] recession_quantile = 1.5 must lie between 0 and 1."),
        (dict(nav=NAV, scenarios=[{"name": "x", "shocks": {"trem": 0.01}}]),
         "[[stress.scenarios]] number 1 ('x') shocks 'trem', which is not a state variable "
         "(mkt, dy, term, def, rf)."),
        (dict(nav=NAV, scenarios=[{"name": "y", "shocks": {"term": 0.01}},
                                  {"name": "x", "shocks": {"term": "a"}}]),
         "[[stress.scenarios]] number 2 ('x'): shocks.term = 'a' is not a number."),
        (dict(nav=NAV, scenarios=[{"name": "x", "shocks": {"term": 0.01}, "reading": "iso"}]),
         "[[stress.scenarios]] number 1 ('x'): reading = 'iso' is an unknown reading."),
        (dict(nav=NAV, market="dy"),
         "[states] market = 'dy' must come first in the orthogonalisation order, but 'mkt' "
         "is first."),
    ]
    for kw, expected in cases:
        with pytest.raises(InputError) as e:
            run_stress(BOOK, M, SIGMA, **kw)
        assert str(e.value).split(" Fix: ")[0] == expected
        assert e.value.column is None and e.value.row is None
        assert e.value.fix.endswith((".", "?"))
