"""The overlay optimiser checked against outside references.

Sources: the KKT system of an equality-constrained quadratic program (Boyd and
Vandenberghe 2004, *Convex Optimization*, section 10.1); scipy.optimize SLSQP and HiGHS
linprog on the same problems; the Ledoit-Wolf shrinkage formula (Ledoit and Wolf 2004,
*Journal of Multivariate Analysis*); numpy's sample covariance; the demo scenario's true
parameters in truth.json.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import optimize

from hedgekit.hedge import HedgeSpec, design_overlay, instrument_covariance

DEMO = Path(__file__).resolve().parents[1] / "demo_portfolios"


def _market(seed: int, n_inst: int = 6, n_fac: int = 5):
    """Random instruments: betas, a positive-definite annual covariance, a book."""
    rng = np.random.default_rng(seed)
    factors = [f"f{k}" for k in range(n_fac)]
    names = [f"i{j}" for j in range(n_inst)]
    betas = pd.DataFrame(rng.normal(0, 0.5, (n_inst, n_fac)), index=names, columns=factors)
    load = rng.normal(0, 0.04, (n_inst, n_inst + 3))
    cov = pd.DataFrame(load @ load.T + np.diag(rng.uniform(1e-4, 4e-4, n_inst)),
                       index=names, columns=names)
    book = pd.Series(rng.normal(0, 0.4, n_fac), index=factors)
    sheet = pd.DataFrame({"multiplier": 50.0, "price": 100.0, "cost_bps": 0.0,
                          "min_weight": np.nan, "max_weight": np.nan}, index=names)
    return betas, cov, book, sheet


def test_equality_targets_match_closed_form_kkt():
    """Boyd and Vandenberghe 2004, Convex Optimization, section 10.1: with equality
    constraints C h = d only, the minimiser of h' S h is h* = S^-1 C'(C S^-1 C')^-1 d."""
    betas, cov, book, sheet = _market(1)
    neutral = ("f1", "f2", "f4")
    targets = {"f2": 0.1}
    spec = HedgeSpec(neutralise=neutral, targets=targets)
    res = design_overlay(book, betas, cov, sheet, nav=1e8, spec=spec)
    assert res.status == "optimal"
    C = betas[list(neutral)].to_numpy().T
    d = np.array([targets.get(f, 0.0) - book[f] for f in neutral])
    S_inv = np.linalg.inv(cov.to_numpy())
    h_star = S_inv @ C.T @ np.linalg.solve(C @ S_inv @ C.T, d)
    np.testing.assert_allclose(res.positions.to_numpy(), h_star, atol=1e-6, rtol=0)
    assert res.tracking_error == pytest.approx(np.sqrt(h_star @ cov.to_numpy() @ h_star),
                                               rel=1e-6)


def test_total_variance_objective_matches_kkt_system():
    """Boyd and Vandenberghe 2004, section 10.1.1: the equality-constrained QP
    min h'Sh + 2c'h s.t. Ch = d solves [[2S, C'], [C, 0]] [h; nu] = [-2c; d]."""
    betas, _, book, sheet = _market(2)
    rng = np.random.default_rng(22)
    load = rng.normal(0, 0.05, (len(betas) + 1, len(betas) + 4))
    joint = load @ load.T                     # book first, then the instruments
    cov = pd.DataFrame(joint[1:, 1:], index=betas.index, columns=betas.index)
    c = pd.Series(joint[0, 1:], index=betas.index)
    book_var = float(joint[0, 0])
    neutral = ("f0", "f3")
    spec = HedgeSpec(neutralise=neutral, objective="total")
    res = design_overlay(book, betas, cov, sheet, nav=1e8, spec=spec, book_variance=book_var,
                         book_instrument_cov=c)
    C = betas[list(neutral)].to_numpy().T
    d = -book[list(neutral)].to_numpy()
    S = cov.to_numpy()
    n, m = S.shape[0], C.shape[0]
    kkt = np.block([[2 * S, C.T], [C, np.zeros((m, m))]])
    sol = np.linalg.solve(kkt, np.concatenate([-2 * c.to_numpy(), d]))
    np.testing.assert_allclose(res.positions.to_numpy(), sol[:n], atol=1e-6, rtol=0)
    h = sol[:n]
    assert res.total_risk_after == pytest.approx(np.sqrt(book_var + 2 * c.to_numpy() @ h
                                                         + h @ S @ h), rel=1e-6)
    assert res.total_risk_before == pytest.approx(np.sqrt(book_var))


def _slsqp(cov, C, d, lo, hi, cap, cost):
    """Same problem for SLSQP with h = u - v, u, v >= 0 so |h| is smooth."""
    S, n = cov, len(lo)

    def obj(x):
        u, v = x[:n], x[n:]
        h = u - v
        return h @ S @ h + cost @ (u + v)

    def grad(x):
        u, v = x[:n], x[n:]
        g = 2 * S @ (u - v)
        return np.concatenate([g + cost, -g + cost])

    cons = [
        {"type": "eq", "fun": lambda x: C @ (x[:n] - x[n:]) - d,
         "jac": lambda x: np.hstack([C, -C])},
        {"type": "ineq", "fun": lambda x: cap - np.sum(x),
         "jac": lambda x: -np.ones((1, 2 * n))},
        {"type": "ineq", "fun": lambda x: (x[:n] - x[n:]) - lo,
         "jac": lambda x: np.hstack([np.eye(n), -np.eye(n)])},
        {"type": "ineq", "fun": lambda x: hi - (x[:n] - x[n:]),
         "jac": lambda x: np.hstack([-np.eye(n), np.eye(n)])},
    ]
    best = None
    for start in (np.zeros(2 * n), np.full(2 * n, 0.05)):
        out = optimize.minimize(obj, start, jac=grad, method="SLSQP", constraints=cons,
                                bounds=[(0, None)] * (2 * n),
                                options={"ftol": 1e-14, "maxiter": 2000})
        if out.success and (best is None or out.fun < best.fun):
            best = out
    assert best is not None
    return best.fun


@pytest.mark.parametrize("seed", [3, 4, 5])
def test_bounds_and_gross_cap_match_scipy_slsqp(seed):
    """scipy.optimize.minimize(method="SLSQP") on the same bounded, capped, costed
    problem: hedgekit's objective equals SLSQP's to 1e-5 or is better."""
    betas, cov, book, sheet = _market(seed)
    rng = np.random.default_rng(seed + 100)
    neutral = ("f1", "f2")
    C = betas[list(neutral)].to_numpy().T
    d = -book[list(neutral)].to_numpy()
    # bounds that bind (tighter than the unconstrained answer), then a cap that binds too
    free = design_overlay(book, betas, cov, sheet, nav=1e8, spec=HedgeSpec(neutralise=neutral))
    hi = np.abs(free.positions.to_numpy()).max() * 0.8 * np.ones(len(betas))
    lo = -hi
    cost_bps = rng.uniform(0, 5, len(hi))
    sheet = sheet.assign(min_weight=lo, max_weight=hi, cost_bps=cost_bps)
    bounded = design_overlay(book, betas, cov, sheet, nav=1e8,
                             spec=HedgeSpec.from_sheet(sheet, neutralise=neutral))
    assert bounded.status == "optimal"
    cap = bounded.gross * 0.99
    spec = HedgeSpec.from_sheet(sheet, neutralise=neutral, max_gross=cap)
    res = design_overlay(book, betas, cov, sheet, nav=1e8, spec=spec)
    assert res.status == "optimal", res.message
    assert any("cap" in b for b in res.binding), res.binding
    h = res.positions.to_numpy()
    ours = h @ cov.to_numpy() @ h + (cost_bps / 1e4) @ np.abs(h)
    assert res.objective_value == pytest.approx(ours, abs=1e-9)
    theirs = _slsqp(cov.to_numpy(), C, d, lo, hi, cap, cost_bps / 1e4)
    assert ours <= theirs + 1e-5
    # and the answer is feasible
    np.testing.assert_allclose(C @ h, d, atol=1e-7)
    assert np.abs(h).sum() <= cap + 1e-7
    assert np.all(h <= hi + 1e-8) and np.all(h >= lo - 1e-8)


def test_closest_overlay_remaining_exposure_matches_highs_linprog():
    """scipy.optimize.linprog (HiGHS): the least total remaining exposure
    sum_f |b_f + B_f h| under bounds |h_j| <= u is an LP; the closest overlay's
    remaining exposure must equal its optimum."""
    betas, cov, book, sheet = _market(6)
    neutral = ("f0", "f1", "f2")
    u = 0.05                                       # far too tight to neutralise
    sheet = sheet.assign(min_weight=-u, max_weight=u)
    spec = HedgeSpec.from_sheet(sheet, neutralise=neutral)
    res = design_overlay(book, betas, cov, sheet, nav=1e8, spec=spec, closest=True)
    assert res.status == "unreachable"
    C = betas[list(neutral)].to_numpy().T
    b = book[list(neutral)].to_numpy()
    n, m = C.shape[1], C.shape[0]
    # variables [h (n), s (m)]: minimise sum s, -s <= b + C h <= s
    A_ub = np.block([[C, -np.eye(m)], [-C, -np.eye(m)]])
    b_ub = np.concatenate([-b, b])
    lp = optimize.linprog(np.concatenate([np.zeros(n), np.ones(m)]), A_ub=A_ub, b_ub=b_ub,
                          bounds=[(-u, u)] * n + [(0, None)] * m, method="highs")
    assert lp.status == 0
    assert res.remaining.sum() == pytest.approx(lp.fun, abs=1e-7)
    after = res.exposure_after[list(neutral)].abs().sum()
    assert after == pytest.approx(lp.fun, abs=1e-7)


def test_sample_covariance_matches_numpy():
    """numpy.cov (divisor T - 1) on the listwise-complete rows, times 12."""
    rets = pd.read_csv(DEMO / "instruments.csv", index_col="date")
    rets.iloc[5:9, 2] = np.nan
    ours = instrument_covariance(rets)
    complete = rets.dropna().to_numpy()
    np.testing.assert_allclose(ours.to_numpy(), np.cov(complete, rowvar=False) * 12,
                               rtol=1e-12, atol=0)


def test_ledoit_wolf_matches_published_formula():
    """Ledoit and Wolf 2004, JMVA 88, Lemma 3.2 and Theorem 3.4: S* = (b2/d2) m I +
    (a2/d2) S, written out term by term (a loop over months, as in the paper)."""
    rng = np.random.default_rng(7)
    x = rng.standard_t(5, size=(40, 12)) @ rng.normal(0, 0.02, (12, 12))
    frame = pd.DataFrame(x)
    ours = instrument_covariance(frame, method="ledoit-wolf", periods_per_year=1).to_numpy()
    t, p = x.shape
    xc = x - x.mean(axis=0)
    S = xc.T @ xc / t

    def norm2(a):
        return np.trace(a @ a.T) / p

    m = np.trace(S) / p
    d2 = norm2(S - m * np.eye(p))
    b2_bar = sum(norm2(np.outer(xc[k], xc[k]) - S) for k in range(t)) / t ** 2
    b2 = min(b2_bar, d2)
    a2 = d2 - b2
    expected = b2 / d2 * m * np.eye(p) + a2 / d2 * S
    np.testing.assert_allclose(ours, expected, rtol=1e-10)
    assert np.linalg.eigvalsh(ours).min() > 0


def _demo_fit():
    """Demo factors from the true VAR and transform in truth.json; OLS betas and SEs."""
    truth = json.loads((DEMO / "truth.json").read_text())
    names = truth["variables"]
    states = pd.read_csv(DEMO / "states.csv", index_col="date")[names]
    c = np.array([truth["var"]["intercept"][v] for v in names])
    A = np.array([[truth["var"]["coef"][eq][f"{v}.L1"] for v in names] for eq in names])
    M = np.array([[truth["transform"][r][col] for col in names] for r in names])
    states = states.iloc[1:]                     # the first month has levels but no return
    z = states.to_numpy()
    u = z[1:] - c - z[:-1] @ A.T
    ortho = u @ M.T
    f = np.column_stack([z[1:, 0], ortho[:, 1:]])
    dates = states.index[1:]
    assets = pd.read_csv(DEMO / "assets.csv", index_col="date").loc[dates]
    hold = pd.read_csv(DEMO / "holdings.csv", index_col="asset")["weight"]
    book_ret = assets[hold.index].to_numpy() @ hold.to_numpy()
    inst = pd.read_csv(DEMO / "instruments.csv", index_col="date").loc[dates]
    y = np.column_stack([book_ret, inst.to_numpy()])
    X = np.column_stack([np.ones(len(f)), f])
    coef, *_ = np.linalg.lstsq(X, y, rcond=None)
    resid = y - X @ coef
    s2 = (resid ** 2).sum(axis=0) / (len(X) - X.shape[1])
    xtx_inv = np.diag(np.linalg.inv(X.T @ X))[1:]
    se = np.sqrt(np.outer(xtx_inv, s2))             # K x series
    cols = ["book"] + list(inst.columns)
    betas = pd.DataFrame(coef[1:], index=names, columns=cols)
    ses = pd.DataFrame(se, index=names, columns=cols)
    return truth, betas, ses, inst


def test_demo_post_hedge_true_exposures_within_two_standard_errors():
    """Demo scenario (truth.json): after hedging term and def with estimated betas, the
    exposures recomputed with the true betas lie within two standard errors of zero."""
    truth, betas, ses, inst = _demo_fit()
    sheet = pd.read_csv(DEMO / "instrument_sheet.csv")
    cov = instrument_covariance(inst)
    spec = HedgeSpec.from_sheet(sheet, neutralise=("term", "def"),
                                keep={"mkt": (0.95, 1.05)}, max_gross=1.5)
    inst_b = betas.drop(columns="book").T
    inst_se = ses.drop(columns="book").T
    res = design_overlay(betas["book"], inst_b, cov, sheet, nav=truth["nav"], spec=spec,
                         book_se=ses["book"], instrument_se=inst_se,
                         premia=pd.Series(truth["prices_of_risk"]))
    assert res.status == "optimal", res.message
    true_inst = pd.DataFrame(truth["instrument_betas"]).T.loc[inst_b.index, inst_b.columns]
    true_after = pd.Series(truth["book_betas"])[inst_b.columns] + true_inst.T @ res.positions
    for f in ("term", "def"):
        assert abs(res.exposure_after[f]) < 1e-7
        assert abs(true_after[f]) <= 2 * res.exposure_after_se[f], (f, true_after[f])
    # the unhedged book is clearly exposed: the hedge did something measurable
    assert abs(truth["book_betas"]["def"]) > 4 * res.exposure_before_se["def"]
    assert 0.95 - 1e-7 <= res.exposure_after["mkt"] <= 1.05 + 1e-7
