"""The states stage: recovery on the demo, orthogonality, no look-ahead, scenarios, errors."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from hedgekit.errors import InputError
from hedgekit.states import (
    comove_surprise,
    estimate_states,
    orthogonalise,
    realtime_innovations,
    select_lags,
    surprise_to_shocks,
)

DEMO = Path(__file__).resolve().parents[1] / "demo_portfolios"
VARS = ["mkt", "dy", "term", "def", "rf"]


@pytest.fixture(scope="module")
def demo() -> pd.DataFrame:
    frame = pd.read_csv(DEMO / "states.csv")
    frame.index = pd.PeriodIndex(frame.pop("date"), freq="M", name="date")
    return frame


@pytest.fixture(scope="module")
def truth() -> dict:
    return json.loads((DEMO / "truth.json").read_text())["var"]


@pytest.fixture(scope="module")
def fit(demo: pd.DataFrame):
    return estimate_states(demo)


def _simulate(seed: int, t: int = 300, k: int = 4, rho: float = 0.9) -> pd.DataFrame:
    """A stable VAR(1) with correlated shocks (test data, common practice)."""
    rng = np.random.default_rng(seed)
    a = rho * np.eye(k) + 0.05 * rng.standard_normal((k, k))
    a *= min(1.0, 0.95 / np.abs(np.linalg.eigvals(a)).max())
    chol = np.tril(rng.standard_normal((k, k))) * 0.3 + np.eye(k)
    z = np.zeros((t + 50, k))
    for i in range(1, t + 50):
        z[i] = 0.1 + a @ z[i - 1] + chol @ rng.standard_normal(k) * 0.01
    idx = pd.period_range("1980-01", periods=t, freq="M", name="date")
    return pd.DataFrame(z[50:], index=idx, columns=[f"s{j}" for j in range(k)])


# ---------------------------------------------------------------------- recovery


def test_recovers_true_var_coefficients(demo, fit, truth) -> None:
    """Source: OLS asymptotics of a stationary VAR, vec(B̂) ≈ N(vec B, (X'X)^{-1} ⊗ Σ_u)
    (Lütkepohl 2005, prop. 3.1).  Every true coefficient (truth.json "var") lies within
    4 standard errors, and the joint Wald statistic over all 30 has χ²(30) p-value > 0.001."""
    coef_true = pd.DataFrame(truth["coef"]).T.loc[VARS, fit.coef.columns]
    c_true = pd.Series(truth["intercept"])[VARS]
    z_coef = ((fit.coef - coef_true) / fit.coef_se).to_numpy()
    z_c = ((fit.intercept - c_true) / fit.intercept_se).to_numpy()
    assert np.abs(z_coef).max() < 4.0
    assert np.abs(z_c).max() < 4.0
    z = demo.dropna().to_numpy()
    x = np.column_stack([np.ones(len(z) - 1), z[:-1]])
    cov = np.kron(fit.sigma_u.to_numpy(), np.linalg.inv(x.T @ x))   # equation-major vec
    b_hat = np.column_stack([fit.intercept, fit.coef]).ravel()
    b_true = np.column_stack([c_true, coef_true]).ravel()
    d = b_hat - b_true
    wald = d @ np.linalg.solve(cov, d)
    assert stats.chi2.sf(wald, d.size) > 1e-3


def test_recovers_true_innovation_covariance(fit, truth) -> None:
    """Source: asymptotic variance of a sample covariance element of normal innovations,
    (σ_ii σ_jj + σ_ij²)/T (Anderson 2003, *An Introduction to Multivariate Statistical
    Analysis*, 3.4; Lütkepohl 2005, prop. 3.4).  Every element within 4 of those errors."""
    true = pd.DataFrame(truth["sigma_u"]).loc[VARS, VARS].to_numpy()
    d = np.diag(true)
    se = np.sqrt((np.outer(d, d) + true**2) / fit.nobs)
    assert np.abs((fit.sigma_u.to_numpy() - true) / se).max() < 4.0
    assert fit.stable and 0.9 < fit.max_eigen_modulus < 1.0


# ------------------------------------------------------------------ orthogonality


def test_orthogonal_innovations_are_orthogonal_with_equal_variance(fit) -> None:
    """Gram-Schmidt by construction (methods.md 1): off-diagonal sample correlations below
    1e-12, every standard deviation equal to the market innovation's, ũ_1 = u_1."""
    corr = fit.orthogonal_corr.to_numpy()
    assert np.abs(corr - np.eye(len(VARS))).max() < 1e-12
    sd = fit.orthogonal.std(ddof=1).to_numpy()
    np.testing.assert_allclose(sd, sd[0], rtol=1e-12)
    np.testing.assert_allclose(fit.orthogonal["mkt"], fit.raw["mkt"], rtol=1e-14)
    m = fit.transform.to_numpy()
    np.testing.assert_array_equal(np.triu(m, 1), 0.0)
    assert (np.diag(m) > 0).all() and m[0, 0] == pytest.approx(1.0, rel=1e-14)
    np.testing.assert_allclose(fit.orthogonal.to_numpy(), fit.raw.to_numpy() @ m.T, rtol=1e-12)
    # positive = upward surprise: each ũ_j moves with its own raw u_j
    own = [np.corrcoef(fit.raw[v], fit.orthogonal[v])[0, 1] for v in VARS]
    assert min(own) > 0
    assert fit.raw_corr.loc["mkt", "dy"] < -0.5     # the demo's strong mkt/dy co-move shows


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2**31 - 1), k=st.integers(2, 5), t=st.integers(80, 250))
def test_property_orthogonal_for_random_data(seed: int, k: int, t: int) -> None:
    """Property: for random well-conditioned VAR data, orthogonalised innovations are
    uncorrelated (< 1e-11) with one common variance, and M is lower triangular."""
    res = estimate_states(_simulate(seed, t=t, k=k))
    corr = res.orthogonal_corr.to_numpy()
    assert np.abs(corr - np.eye(k)).max() < 1e-11
    sd = res.orthogonal.std(ddof=1).to_numpy()
    np.testing.assert_allclose(sd, sd[0], rtol=1e-11)
    np.testing.assert_array_equal(np.triu(res.transform.to_numpy(), 1), 0.0)


def test_reordering_changes_transform_predictably(demo, fit) -> None:
    """Raw VAR residuals do not depend on the order; the first and the last orthogonal
    series do not depend on the order of the variables between them (the last is the part
    of its innovation orthogonal to all others), the middle ones do."""
    order = ["mkt", "def", "term", "dy", "rf"]
    other = estimate_states(demo[order])
    np.testing.assert_allclose(other.raw[VARS].to_numpy(), fit.raw.to_numpy(), rtol=1e-9,
                               atol=1e-15)
    for v in ("mkt", "rf"):
        np.testing.assert_allclose(other.orthogonal[v], fit.orthogonal[v], rtol=1e-8, atol=1e-14)
    assert np.abs(other.orthogonal["term"] - fit.orthogonal["term"]).max() > 1e-3
    # the last row of M, re-indexed to the old order, is the same row
    np.testing.assert_allclose(other.transform.loc["rf", VARS], fit.transform.loc["rf", VARS],
                               rtol=1e-8)
    assert list(other.transform.columns) == order


def test_dropping_and_adding_variables_through_the_order(demo) -> None:
    """Users change the state list by the columns passed: fewer or extra states just work."""
    small = estimate_states(demo[["mkt", "term"]])
    assert small.variables == ("mkt", "term") and small.coef.shape == (2, 2)
    extra = demo.assign(slope=demo["term"] ** 2 + 0.01 * demo["rf"].shift(-1).fillna(0))
    big = estimate_states(extra)
    assert big.variables[-1] == "slope" and big.transform.shape == (6, 6)


# ------------------------------------------------------------------- real time


def test_realtime_matches_direct_fit(demo) -> None:
    """Row τ+1 equals the one-step forecast error of estimate_states on data up to τ, and
    its orthogonal version uses the M of that fit (expanding and rolling windows)."""
    clean = demo.dropna()
    for kwargs, taus in (({"min_window": 120}, ["1996-02", "2005-06", "2025-11"]),
                         ({"window": 150}, ["1999-06", "2025-11"])):
        rt = realtime_innovations(clean, lags=2, **kwargs)
        for tau in taus:
            tau_p = pd.Period(tau, freq="M")
            hist = clean.loc[:tau_p]
            if "window" in kwargs:
                hist = hist.iloc[-(kwargs["window"] + 2):]
            ref = estimate_states(hist, lags=2)
            nxt = clean.index[clean.index.get_loc(tau_p) + 1]
            x = np.concatenate([[1.0], clean.loc[:tau_p].iloc[-1], clean.loc[:tau_p].iloc[-2]])
            b = np.column_stack([ref.intercept, ref.coef]).T
            err = clean.loc[nxt].to_numpy() - x @ b
            np.testing.assert_allclose(rt.raw.loc[nxt].to_numpy(), err, rtol=1e-8, atol=1e-13)
            m = ref.transform.to_numpy()
            np.testing.assert_allclose(rt.transform_at(tau).to_numpy(), m, rtol=1e-8, atol=1e-12)
            np.testing.assert_allclose(rt.orthogonal.loc[nxt].to_numpy(), m @ err, rtol=1e-7,
                                       atol=1e-12)
            np.testing.assert_allclose(rt.sigma_u_at(tau).to_numpy(), ref.sigma_u.to_numpy(),
                                       rtol=1e-8, atol=1e-18)
            np.testing.assert_allclose(rt.coef_path[clean.index.get_loc(tau_p) - 2], b,
                                       rtol=1e-7, atol=1e-12)
            assert rt.fit_dates[nxt] == tau_p
    # the last real-time fit is the full-sample fit
    full = estimate_states(clean, lags=1)
    rt1 = realtime_innovations(clean, lags=1)
    np.testing.assert_allclose(rt1.transform_path[-1], full.transform.to_numpy(), rtol=1e-8)


def test_realtime_has_no_look_ahead(demo) -> None:
    """Changing any data after τ leaves every real-time innovation up to τ bit-identical
    (methods.md 5: no decision at τ may use later data)."""
    clean = demo.dropna()
    rng = np.random.default_rng(7)
    for kwargs in ({"min_window": 120}, {"window": 100}):
        base = realtime_innovations(clean, **kwargs)
        for tau in ("2001-03", "2015-10"):
            cut = clean.index.get_loc(pd.Period(tau, freq="M"))
            bumped = clean.copy()
            later = bumped.iloc[cut + 1:]
            bumped.iloc[cut + 1:] = later * (1 + 0.3 * rng.standard_normal(later.shape))
            new = realtime_innovations(bumped, **kwargs)
            upto = base.raw.index <= pd.Period(tau, freq="M")
            np.testing.assert_array_equal(new.raw[upto].to_numpy(), base.raw[upto].to_numpy())
            np.testing.assert_array_equal(new.orthogonal[upto].to_numpy(),
                                          base.orthogonal[upto].to_numpy())
            assert not np.allclose(new.raw[~upto].to_numpy(), base.raw[~upto].to_numpy())


def test_realtime_layout_and_factors(demo) -> None:
    """NaN rows before the first fit; first forecast at row min_window; factors like the
    full-sample ones (market return first, or ũ_1 with use='innovation')."""
    rt = realtime_innovations(demo, min_window=120)
    assert rt.raw.index.equals(estimate_states(demo).raw.index)
    assert rt.raw.iloc[:120].isna().all().all() and rt.raw.iloc[120:].notna().all().all()
    assert rt.fit_dates.iloc[120] == rt.raw.index[119] and pd.isna(rt.fit_dates.iloc[119])
    assert rt.n_obs.iloc[119] == 120 and rt.n_obs.iloc[-1] == len(rt.raw)
    f = rt.factors()
    assert list(f.columns) == VARS
    np.testing.assert_array_equal(f["mkt"].iloc[120:], demo["mkt"].loc[f.index[120:]])
    assert f.iloc[:120].isna().all().all()
    g = rt.factors(use="innovation")
    np.testing.assert_array_equal(g["mkt"].iloc[120:], rt.raw["mkt"].iloc[120:])
    json.dumps(rt.to_dict())
    assert rt.to_dict()["innovations"]["raw"]["mkt"][0] is None
    assert rt.to_dict()["sample"] == {"first": str(rt.raw.index[120]), "last": str(rt.raw.index[-1]),
                                      "periods": len(rt.raw) - 120}


# ---------------------------------------------------------------------- scenarios


def test_surprise_isolated_and_comove(fit) -> None:
    """Isolated: M s.  Co-move: unspecified raw surprises at E[u_-J | u_J = s_J] =
    Σ_{-J,J} Σ_JJ^{-1} s_J (Anderson 2003, thm. 2.5.1), checked against the slopes of a
    statsmodels OLS of the other raw innovations on the specified ones (sample moments)."""
    s = {"term": 0.01, "def": -0.002}
    iso = surprise_to_shocks(fit.transform, fit.sigma_u, s)
    vec = np.array([0, 0, 0.01, -0.002, 0])
    np.testing.assert_allclose(iso.to_numpy(), fit.transform.to_numpy() @ vec, rtol=1e-14)
    full = comove_surprise(fit.sigma_u, s)
    assert full["term"] == 0.01 and full["def"] == -0.002
    x = sm.add_constant(fit.raw[["term", "def"]])
    for v in ("mkt", "dy", "rf"):
        slopes = sm.OLS(fit.raw[v], x).fit().params[["term", "def"]].to_numpy()
        assert full[v] == pytest.approx(slopes @ [0.01, -0.002], rel=1e-9)
    co = surprise_to_shocks(fit.transform, fit.sigma_u, s, reading="comove")
    np.testing.assert_allclose(co.to_numpy(), fit.transform.to_numpy() @ full.to_numpy(),
                               rtol=1e-12)
    # a market-only co-move surprise maps to ũ_1 alone (later ones are orthogonal to it)
    mk = surprise_to_shocks(fit.transform, fit.sigma_u, {"mkt": -0.1}, reading="comove")
    assert mk["mkt"] == pytest.approx(-0.1) and np.abs(mk.iloc[1:]).max() < 1e-12


def test_surprise_errors(fit) -> None:
    with pytest.raises(InputError, match="valid variables: mkt, dy, term, def, rf"):
        surprise_to_shocks(fit.transform, fit.sigma_u, {"slope": 0.01})
    with pytest.raises(InputError, match="isolated, comove"):
        surprise_to_shocks(fit.transform, fit.sigma_u, {"term": 0.01}, reading="typical")
    with pytest.raises(InputError):
        comove_surprise(fit.sigma_u, {})


# ------------------------------------------------------------------- results


def test_to_dict_contract_and_frame(fit) -> None:
    """The `states` JSON keys of interface.md, JSON-ready, dates 'YYYY-MM'."""
    d = json.loads(json.dumps(fit.to_dict()))
    for key in ("variables", "intercept", "coef", "max_eigen_modulus", "innovations",
                "transform"):
        assert key in d
    assert d["variables"] == VARS
    assert set(d["coef"]["mkt"]) == {f"{v}.L1" for v in VARS}
    assert d["innovations"]["dates"][0] == "1986-02"
    assert len(d["innovations"]["orthogonal"]["rf"]) == fit.nobs
    assert d["transform"]["mkt"]["dy"] == 0.0
    assert d["sample"]["first"] == "1986-02" and d["sample"]["periods"] == fit.nobs
    assert d["sample"]["last"] == d["innovations"]["dates"][-1]
    table = fit.to_frame()
    assert table.shape == (5 * 6, 3)
    assert table.loc[("dy", "dy.L1"), "coef"] == pytest.approx(fit.coef.loc["dy", "dy.L1"])
    f = fit.factors()
    np.testing.assert_array_equal(f["mkt"], fit.data.loc[f.index, "mkt"])
    np.testing.assert_array_equal(f["term"], fit.orthogonal["term"])
    np.testing.assert_array_equal(fit.factors("innovation")["mkt"], fit.raw["mkt"])


def test_lag_choice_zero_falls_back_to_one() -> None:
    """White noise: BIC picks 0 lags (as select_order would); a VAR(1) is fitted, with a note."""
    rng = np.random.default_rng(3)
    idx = pd.period_range("1990-01", periods=240, freq="M", name="date")
    data = pd.DataFrame(rng.standard_normal((240, 3)) * 0.01, index=idx, columns=["a", "b", "c"])
    assert select_lags(data, 4, "bic").selected == 0
    res = estimate_states(data, lags="bic", max_lags=4)
    assert res.lags == 1 and res.lag_selection["selected"] == 0
    assert any("0 lags" in w for w in res.warnings)


def test_unstable_var_warns_loudly() -> None:
    rng = np.random.default_rng(5)
    idx = pd.period_range("1990-01", periods=200, freq="M", name="date")
    e = rng.standard_normal((200, 2)) * 0.01
    level = np.cumprod(np.full(200, 1.01)) * (1 + e[:, 1])
    data = pd.DataFrame({"mkt": e[:, 0], "x": level}, index=idx)
    res = estimate_states(data)
    assert not res.stable and res.max_eigen_modulus >= 1
    assert res.warnings[0].startswith("WARNING: the VAR is not stationary")


# ---------------------------------------------------------------------- errors


def test_leading_nan_dropped_interior_nan_named(demo) -> None:
    res = estimate_states(demo)
    assert res.data.index[0] == pd.Period("1986-01", freq="M")
    bad = demo.copy()
    bad.loc[pd.Period("2000-05", freq="M"), "def"] = np.nan
    with pytest.raises(InputError, match=r"2000-05.*column 'def'"):
        estimate_states(bad)
    with pytest.raises(InputError, match="missing before 2000-05"):
        estimate_states(demo.drop(pd.Period("2000-04", freq="M")))


@pytest.mark.parametrize("case, pattern", [
    ("flat", "no variation: dy"),
    ("twin", "'term' and 'copy' are identical"),
    ("collinear", "'combo' is a linear combination of mkt, dy, term, def, rf"),
    ("lagged", "singular innovation covariance: the innovation of 'lagrf'"),
    ("xsingular", "singular VAR system"),
])
def test_bad_states_raise_naming_variables(demo, case: str, pattern: str) -> None:
    data = demo.dropna().copy()
    if case == "flat":
        data["dy"] = 0.03
    elif case == "twin":
        data["copy"] = data["term"]
    elif case == "collinear":
        data["combo"] = 2 * data["term"] - data["rf"]
    elif case == "lagged":
        data["lagrf"] = data["rf"].shift(1)
        data = data.iloc[1:]
    else:   # collinear on every row but the last: the lagged regressors are singular
        data["almost"] = 2 * data["rf"]
        data.iloc[-1, data.columns.get_loc("almost")] += 0.01
    with pytest.raises(InputError, match=pattern):
        estimate_states(data)


def test_too_few_months(demo) -> None:
    with pytest.raises(InputError, match=r"too few periods for a VAR\(4\) of 5 variables"):
        estimate_states(demo.iloc[:30], lags=4)
    with pytest.raises(InputError, match="too short"):
        realtime_innovations(demo, lags=1, min_window=12)
    with pytest.raises(InputError, match="too large"):
        select_lags(demo.iloc[:40], max_lags=8)
    with pytest.raises(InputError, match="positive integer"):
        estimate_states(demo, lags=0)
    with pytest.raises(InputError, match="unknown lag criterion"):
        estimate_states(demo, lags="xyz")


def test_orthogonalise_rejects_missing(fit) -> None:
    raw = fit.raw.copy()
    raw.iloc[3, 2] = np.nan
    with pytest.raises(InputError, match="column 'term'"):
        orthogonalise(raw)


def test_realtime_options(demo) -> None:
    """A criterion for the real-time lags is applied to the first window only; a rolling
    window keeps a constant count; an outside market series replaces the stored one."""
    rt = realtime_innovations(demo, lags="bic", min_window=120)
    assert rt.lags == 1 and any("first 120 periods" in w for w in rt.warnings)
    roll = realtime_innovations(demo, window=90)
    assert (roll.n_obs.iloc[89:] == 90).all() and roll.raw.iloc[90:].notna().all().all()
    market = demo["mkt"] * 2
    f = estimate_states(demo).factors(market)
    np.testing.assert_array_equal(f["mkt"], market.loc[f.index])
    with pytest.raises(InputError, match="unknown factor choice"):
        roll.factors(use="level")
    with pytest.raises(InputError, match="too short"):
        realtime_innovations(demo, window=12)
    with pytest.raises(InputError, match="too few for a first fit"):
        realtime_innovations(demo.iloc[:100], min_window=120)


def test_orthogonalise_rejects_collinear_innovations() -> None:
    rng = np.random.default_rng(0)
    u = rng.standard_normal((50, 3))
    u[:, 2] = u[:, 0] - u[:, 1]
    with pytest.raises(InputError, match="innovation of 'c' is a linear combination of those of a, b"):
        orthogonalise(pd.DataFrame(u, columns=["a", "b", "c"]))
