"""Overlay optimiser: invariants, reachability, reuse of the compiled program, ticket."""

from __future__ import annotations

import json
import math

import cvxpy as cp
import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from hedgekit.errors import InputError
from hedgekit.hedge import (
    HedgeSpec,
    OverlayProblem,
    OverlaySolveError,
    design_overlay,
    instrument_covariance,
)

FACTORS = ["mkt", "dy", "term", "def", "rf", "extra"]


def make_case(seed: int, n_inst: int = 8, cost: bool = True):
    """Seeded instruments x 6 factors: betas, covariance, book, sheet with wide limits."""
    rng = np.random.default_rng(seed)
    names = [f"inst_{j}" for j in range(n_inst)]
    betas = pd.DataFrame(rng.normal(0.0, 0.4, (n_inst, len(FACTORS))), index=names,
                         columns=FACTORS)
    betas["mkt"] += np.where(np.arange(n_inst) == 0, 1.0, 0.0)
    monthly = rng.normal(0.0, 0.02, (240, n_inst))
    cov = instrument_covariance(pd.DataFrame(monthly, columns=names))
    book = pd.Series(rng.normal(0.2, 0.3, len(FACTORS)), index=FACTORS)
    book["mkt"] = 1.0
    sheet = pd.DataFrame({
        "instrument": names,
        "multiplier": rng.choice([50.0, 1000.0, 100000.0], n_inst),
        "price": rng.uniform(90.0, 110.0, n_inst),
        "cost_bps": rng.uniform(0.5, 5.0, n_inst) if cost else 0.0,
        "min_weight": -3.0, "max_weight": 3.0,
    })
    return betas, cov, book, sheet


BASE = dict(neutralise=("term", "def"), keep={"mkt": (0.9, 1.1)}, max_gross=10.0)


def solve(seed=0, *, spec_kw=None, nav=1e8, n_inst=8, cost=True, **kw):
    betas, cov, book, sheet = make_case(seed, n_inst, cost)
    spec = HedgeSpec.from_sheet(sheet, **(BASE if spec_kw is None else spec_kw))
    return design_overlay(book, betas, cov, sheet, nav=nav, spec=spec, **kw)


# ------------------------------------------------------------------ basic ticket

def test_ticket_numbers_follow_from_the_positions():
    """Contracts = round(h NAV / (price x multiplier)) (methods.md section 4); exposures,
    tracking error, premium and cost recomputed by hand from the positions."""
    betas, cov, book, sheet = make_case(1)
    lam = pd.Series(0.003, index=FACTORS)
    current = pd.Series({"inst_2": 0.1})
    spec = HedgeSpec.from_sheet(sheet, **BASE)
    res = design_overlay(book, betas, cov, sheet, nav=2.5e8, spec=spec, premia=lam,
                         current=current)
    assert res.status == "optimal"
    h = res.positions
    unit = (sheet.set_index("instrument")["price"] * sheet.set_index("instrument")["multiplier"])
    np.testing.assert_array_equal(res.contracts.to_numpy(),
                                  np.rint(h * 2.5e8 / unit).astype(int).to_numpy())
    np.testing.assert_allclose(res.exposure_after, book + betas.T @ h, atol=1e-12)
    assert abs(res.exposure_after["term"]) < 1e-7 and abs(res.exposure_after["def"]) < 1e-7
    h_r = res.contracts * unit / 2.5e8
    np.testing.assert_allclose(res.exposure_after_rounded, book + betas.T @ h_r, atol=1e-12)
    assert res.tracking_error == pytest.approx(math.sqrt(h @ cov @ h), rel=1e-12)
    assert res.premium_given_up == pytest.approx(-(betas.T @ h) @ lam * 12, rel=1e-12)
    h0 = current.reindex(h.index).fillna(0.0)
    bps = sheet.set_index("instrument")["cost_bps"] / 1e4
    cost = (bps * (h - h0).abs()).sum()                 # the optimiser's continuous trade
    assert res.cost_unrounded == pytest.approx(cost, rel=1e-12)
    assert res.cost_unrounded_currency == pytest.approx(cost * 2.5e8, rel=1e-12)
    cost_r = (bps * (h_r - h0).abs()).sum()             # the whole-contract trade placed
    assert res.cost == pytest.approx(cost_r, rel=1e-12)
    assert res.cost_currency == pytest.approx(cost_r * 2.5e8, rel=1e-12)
    np.testing.assert_allclose(res.trades_rounded, h_r - h0, atol=1e-15)
    assert res.cautions == ()       # the standing cautions live in hedgekit.cautions only
    ticket = res.to_frame()
    assert list(ticket.index) == list(betas.index)
    assert {"weight", "notional", "contracts", "cost", "trade"} <= set(ticket.columns)


def test_to_dict_is_json_with_contract_keys():
    """interface.md `hedge` keys, plain JSON (NaN -> null)."""
    res = solve(2, premia=pd.Series(0.002, index=FACTORS))
    out = res.to_dict()
    for key in ("status", "positions", "contracts", "exposure_before", "exposure_after",
                "tracking_error", "cost", "premium_given_up", "unreachable"):
        assert key in out
    text = json.dumps(out, allow_nan=False)
    back = json.loads(text)
    assert back["status"] == "optimal" and back["unreachable"] == []
    assert all(isinstance(v, int) for v in back["contracts"].values())
    assert set(back["positions"]) == {f"inst_{j}" for j in range(8)}


def test_objective_value_is_variance_plus_cost_plus_premium_term():
    """The objective is h'Sh + sum c|h - h0| + w x premium given up (methods.md 4)."""
    lam = pd.Series([0.006, -0.001, 0.003, 0.004, -0.002, 0.001], index=FACTORS)
    betas, cov, book, sheet = make_case(3)
    spec = HedgeSpec.from_sheet(sheet, premium_weight=0.5, **BASE)
    res = design_overlay(book, betas, cov, sheet, nav=1e8, spec=spec, premia=lam)
    h = res.positions
    expect = h @ cov @ h + res.cost_unrounded + 0.5 * res.premium_given_up
    assert res.objective_value == pytest.approx(expect, rel=1e-7, abs=1e-10)
    plain = design_overlay(book, betas, cov, sheet, nav=1e8,
                           spec=HedgeSpec.from_sheet(sheet, **BASE), premia=lam)
    assert res.premium_given_up <= plain.premium_given_up + 1e-9


def test_current_optimal_overlay_is_not_traded():
    """With costs measured from the current overlay, holding the zero-cost optimum is
    optimal: any trade raises both variance and cost (first-order condition)."""
    betas, cov, book, sheet = make_case(4, cost=False)
    free = design_overlay(book, betas, cov, sheet, nav=1e8, spec=HedgeSpec.from_sheet(sheet, **BASE))
    sheet = sheet.assign(cost_bps=4.0)
    res = design_overlay(book, betas, cov, sheet, nav=1e8,
                         spec=HedgeSpec.from_sheet(sheet, **BASE), current=free.positions)
    assert res.status == "optimal"
    np.testing.assert_allclose(res.trades.to_numpy(), 0.0, atol=1e-6)
    assert res.cost_unrounded < 1e-8
    # what is placed is the whole-contract position minus the current one
    assert res.cost == pytest.approx(4e-4 * np.abs(res.positions_rounded - free.positions).sum(),
                                     rel=1e-12)


def test_excluded_instruments_get_no_position():
    res = solve(5, spec_kw={**BASE, "exclude": ("inst_1", "inst_3")})
    assert res.status == "optimal"
    assert res.positions["inst_1"] == 0.0 and res.positions["inst_3"] == 0.0
    assert res.to_frame().loc["inst_1", "excluded"] == 1.0


def test_weight_bounds_and_cap_respected_and_reported():
    betas, cov, book, sheet = make_case(6)
    free = design_overlay(book, betas, cov, sheet, nav=1e8, spec=HedgeSpec.from_sheet(sheet, **BASE))
    cap = free.gross * 1.5
    bound = np.abs(free.positions).max() * 0.9
    sheet = sheet.assign(min_weight=-bound, max_weight=bound)
    res = design_overlay(book, betas, cov, sheet, nav=1e8,
                         spec=HedgeSpec.from_sheet(sheet, **{**BASE, "max_gross": cap}))
    assert res.status == "optimal"
    assert res.positions.abs().max() <= bound + 1e-8
    assert res.gross <= cap + 1e-8
    assert any("weight" in b for b in res.binding)
    assert res.objective_value >= free.objective_value - 1e-9


# ------------------------------------------------------------------ whole contracts

def test_costs_are_those_of_the_whole_contract_trade():
    """The ticket's cost is |contracts x price x multiplier - h0 x NAV| x cost_bps (the trade
    placed); a leg that rounds to zero contracts from a flat start costs nothing."""
    betas, cov, book, sheet = make_case(1)
    nav = 3e7
    res = design_overlay(book, betas, cov, sheet, nav=nav, spec=HedgeSpec.from_sheet(sheet, **BASE))
    s = sheet.set_index("instrument")
    placed = (res.contracts * s["price"] * s["multiplier"]).abs()
    np.testing.assert_allclose(res.ticket["cost"], placed * s["cost_bps"] / 1e4, rtol=1e-12)
    np.testing.assert_allclose(res.ticket["cost_unrounded"],
                               res.notional.abs() * s["cost_bps"] / 1e4, rtol=1e-12)
    assert res.cost_currency == pytest.approx(res.ticket["cost"].sum(), rel=1e-12)
    zero = res.contracts == 0
    assert zero.any() and (res.ticket.loc[zero, "cost"] == 0).all()
    assert (res.positions[zero] != 0).any()           # a real position that rounded away
    out = res.to_dict()
    assert out["cost_unrounded"] == pytest.approx(res.cost_unrounded)
    assert out["trades_rounded"] == pytest.approx(res.trades_rounded.to_dict())


def test_rounding_breaches_follow_the_rounded_exposures():
    """A neutralised factor is reported when |b~_f - t_f| > tol_f + rounding_slack after
    rounding, and only then; status stays the optimiser's "optimal"."""
    betas, cov, book, sheet = make_case(2)
    spec = HedgeSpec.from_sheet(sheet, **{**BASE, "tolerance": 0.01})
    seen = set()
    for nav in (3e5, 5e5, 1e6, 2e6, 5e6, 1e8, 1e9):
        res = design_overlay(book, betas, cov, sheet, nav=nav, spec=spec)
        assert res.status == "optimal"
        for f in ("term", "def"):
            miss = abs(res.exposure_after_rounded[f]) - 0.01 > spec.rounding_slack
            named = [b for b in res.rounding_breaches if b.startswith(f"'{f}' is")]
            assert bool(named) == miss, (nav, f, res.exposure_after_rounded[f])
            seen.add(miss)
        assert all(f"Rounding to whole contracts: {b}." in res.warnings
                   for b in res.rounding_breaches)
        if res.rounding_breaches:
            assert "rounding to whole contracts breaks the overlay" in res.message
            assert "small relative to contract sizes" in res.message
        else:
            assert res.message == "Targets reached at minimum tracking variance."
        assert json.loads(json.dumps(res.to_dict()))["rounding_breaches"] == \
            list(res.rounding_breaches)
    assert seen == {True, False}                 # both sides exercised


def test_rounding_breaches_are_found_at_a_small_nav_and_not_at_a_large_one():
    """Contracts up to ~10 % of a NAV of 1m miss the 'def' target by more than the slack;
    at a NAV of 1e10 rounding is negligible."""
    small = solve(2, nav=1e6)
    large = solve(2, nav=1e10)
    assert any("outside its tolerance" in b for b in small.rounding_breaches)
    assert small.status == "optimal" and large.rounding_breaches == ()


def test_every_position_rounding_to_zero_is_said_plainly():
    """NAV 1,000 against contracts of 5,000 and more: nothing is traded, and the message
    says so instead of a bare "Targets reached"."""
    res = solve(3, nav=1e3)
    assert res.status == "optimal"
    assert (res.contracts == 0).all() and res.positions.abs().sum() > 0.1
    assert res.cost == 0.0 and res.cost_unrounded > 0
    assert "every position rounds to zero contracts" in res.rounding_breaches[0]
    assert "no trade would be placed" in res.message
    assert "before rounding" in res.message
    np.testing.assert_allclose(res.exposure_after_rounded, res.exposure_before)


def test_rounded_gross_above_the_cap_and_bounds_are_reported():
    """With the cap and weight bounds binding, a rounded overlay that lands above them is
    reported (cap: sum |h~_j| > max_gross; bounds: h~_j outside [min, max])."""
    betas, cov, book, sheet = make_case(6)
    free = design_overlay(book, betas, cov, sheet, nav=1e8, spec=HedgeSpec.from_sheet(sheet, **BASE))
    cap = free.gross * 0.95
    bound = float(np.abs(free.positions).max() * 0.9)
    sheet = sheet.assign(min_weight=-bound, max_weight=bound)
    spec = HedgeSpec.from_sheet(sheet, **{**BASE, "max_gross": cap})
    seen_cap = seen_bound = 0
    for nav in np.geomspace(2e7, 2e9, 9):
        res = design_overlay(book, betas, cov, sheet, nav=nav, spec=spec, closest=True)
        over_cap = res.gross_rounded > cap + 1e-9
        assert any("above the cap max_gross" in b for b in res.rounding_breaches) == over_cap
        out = (res.positions_rounded.abs() > bound + 1e-9)
        for name, flag in out.items():
            assert any(b.startswith(f"{name}'s rounded weight") for b in res.rounding_breaches) \
                == flag
        seen_cap += over_cap
        seen_bound += out.any()
    assert seen_cap and seen_bound               # the check is exercised both ways


# ------------------------------------------------------------------ property tests

@settings(max_examples=25, deadline=None, derandomize=True)
@given(seed=st.integers(0, 10_000), nav=st.floats(1e6, 1e10), factor=st.integers(2, 50))
def test_nav_scales_notionals_and_contracts_not_weights(seed, nav, factor):
    """Common practice: weights are fractions of NAV, so NAV only scales money."""
    a = solve(seed % 7, nav=nav)
    b = solve(seed % 7, nav=nav * factor)
    np.testing.assert_allclose(a.positions, b.positions, rtol=0, atol=1e-12)
    np.testing.assert_allclose(b.notional, a.notional * factor, rtol=1e-12)
    # rounding to whole contracts: b's count is within one-half plus factor/2 of factor x a's
    assert np.all(np.abs(b.contracts - factor * a.contracts) <= factor / 2 + 0.5 + 1e-9)
    assert b.cost_unrounded_currency == pytest.approx(a.cost_unrounded_currency * factor,
                                                      rel=1e-10)


@settings(max_examples=25, deadline=None, derandomize=True)
@given(seed=st.integers(0, 5), perm=st.permutations(list(range(8))))
def test_permuting_instruments_permutes_the_answer(seed, perm):
    betas, cov, book, sheet = make_case(seed)
    spec = HedgeSpec.from_sheet(sheet, **BASE)
    base = design_overlay(book, betas, cov, sheet, nav=1e8, spec=spec)
    order = betas.index[list(perm)]
    shuffled = design_overlay(book, betas.loc[order], cov.loc[order, order],
                              sheet.iloc[list(perm)], nav=1e8, spec=spec)
    assert list(shuffled.positions.index) == list(order)
    np.testing.assert_allclose(shuffled.positions.loc[betas.index], base.positions,
                               atol=2e-6, rtol=0)
    assert shuffled.objective_value == pytest.approx(base.objective_value, rel=1e-6, abs=1e-10)


@settings(max_examples=25, deadline=None, derandomize=True)
@given(seed=st.integers(0, 10_000), mkt=st.floats(0.92, 1.08))
def test_already_neutral_zero_cost_book_gets_no_overlay(seed, mkt):
    betas, cov, book, sheet = make_case(seed % 11, cost=False)
    book = book.copy()
    book[["term", "def"]] = 0.0
    book["mkt"] = mkt
    res = design_overlay(book, betas, cov, sheet, nav=1e8, spec=HedgeSpec.from_sheet(sheet, **BASE))
    assert res.status == "optimal"
    # interior-point accuracy: weights below 1e-6 of NAV, i.e. not one contract
    np.testing.assert_allclose(res.positions.to_numpy(), 0.0, atol=1e-6)
    assert (res.contracts == 0).all() and res.cost_currency == 0.0
    assert res.tracking_error < 1e-6


@settings(max_examples=25, deadline=None, derandomize=True)
@given(seed=st.integers(0, 10_000), tol=st.floats(0.0, 0.2), extra=st.floats(0.0, 0.2))
def test_looser_tolerance_never_raises_the_objective(seed, tol, extra):
    betas, cov, book, sheet = make_case(seed % 13)
    tight = design_overlay(book, betas, cov, sheet, nav=1e8,
                           spec=HedgeSpec.from_sheet(sheet, **{**BASE, "tolerance": tol}))
    loose = design_overlay(book, betas, cov, sheet, nav=1e8,
                           spec=HedgeSpec.from_sheet(sheet, **{**BASE, "tolerance": tol + extra}))
    assert tight.status == loose.status == "optimal"
    assert loose.objective_value <= tight.objective_value + 1e-9
    assert loose.exposure_after[["term", "def"]].abs().max() <= tol + extra + 1e-7


# ------------------------------------------------------------------ unreachable

def test_instruments_without_exposure_to_a_factor_are_unreachable():
    betas, cov, book, sheet = make_case(7)
    betas = betas.assign(extra=0.0)
    book["extra"] = 0.3
    spec = HedgeSpec.from_sheet(sheet, neutralise=("term", "extra"))
    res = design_overlay(book, betas, cov, sheet, nav=1e8, spec=spec)
    assert res.status == "unreachable"
    assert res.unreachable == ("extra",)
    assert any("extra" in b and "no active instrument" in b for b in res.binding)
    np.testing.assert_array_equal(res.positions.to_numpy(), 0.0)      # no overlay proposed
    np.testing.assert_allclose(res.exposure_after, res.exposure_before)
    assert res.message.startswith("Targets for 'extra' cannot be reached")
    assert ("use --closest (or [hedge] closest = true) for the closest reachable overlay."
            in res.message) and "closest=True" not in res.message
    closest = design_overlay(book, betas, cov, sheet, nav=1e8, spec=spec, closest=True)
    assert closest.status == "unreachable" and closest.unreachable == ("extra",)
    assert abs(closest.exposure_after["term"]) < 1e-7          # what can be hedged is
    assert closest.remaining["extra"] == pytest.approx(0.3, abs=1e-7)


def test_excluding_the_only_loading_instruments_is_unreachable():
    betas, cov, book, sheet = make_case(8)
    betas.loc[:, "extra"] = 0.0
    betas.loc["inst_4", "extra"] = 0.5
    book["extra"] = 0.2
    res = design_overlay(book, betas, cov, sheet, nav=1e8,
                         spec=HedgeSpec.from_sheet(sheet, neutralise=("extra",),
                                                   exclude=("inst_4",)))
    assert res.status == "unreachable" and res.unreachable == ("extra",)


def test_bounds_too_tight_are_unreachable_and_closest_sits_on_them():
    betas, cov, book, sheet = make_case(9)
    sheet = sheet.assign(min_weight=-0.01, max_weight=0.01)
    spec = HedgeSpec.from_sheet(sheet, **BASE)
    res = design_overlay(book, betas, cov, sheet, nav=1e8, spec=spec, closest=True)
    assert res.status == "unreachable"
    assert set(res.unreachable) & {"term", "def"}
    assert any("max_weight" in b or "min_weight" in b for b in res.binding)
    assert res.positions.abs().max() == pytest.approx(0.01, abs=1e-7)
    assert res.remaining.sum() > 0.01
    assert "closest" in res.message


def test_gross_cap_too_small_is_unreachable():
    spec_kw = {**BASE, "max_gross": 0.02}
    res = solve(10, spec_kw=spec_kw, closest=True)
    assert res.status == "unreachable"
    assert set(res.unreachable) <= {"term", "def", "mkt"} and res.unreachable
    assert any("cap" in b for b in res.binding)
    assert res.gross == pytest.approx(0.02, abs=1e-7)


def test_conflicting_bounds_and_cap_admit_no_overlay():
    betas, cov, book, sheet = make_case(11)
    sheet = sheet.assign(min_weight=0.1, max_weight=0.2)
    res = design_overlay(book, betas, cov, sheet, nav=1e8,
                         spec=HedgeSpec.from_sheet(sheet, neutralise=("term",), max_gross=0.1))
    assert res.status == "unreachable" and "term" in res.unreachable
    assert "admit no overlay" in " ".join(res.binding)


# ------------------------------------------------------------------ robust option

def test_robust_overlay_covers_the_confidence_interval_and_is_larger():
    """Robust counterpart (Ben-Tal and Nemirovski 1999, ORL): |e_f| + z se_f(h) <= tol_f."""
    betas, cov, book, sheet = make_case(12)
    book_se = pd.Series(0.01, index=FACTORS)
    inst_se = betas * 0 + 0.03
    kw = {**BASE, "tolerance": 0.06}
    nominal = design_overlay(book, betas, cov, sheet, nav=1e8,
                             spec=HedgeSpec.from_sheet(sheet, **kw),
                             book_se=book_se, instrument_se=inst_se)
    robust = design_overlay(book, betas, cov, sheet, nav=1e8,
                            spec=HedgeSpec.from_sheet(sheet, robust=True, **kw),
                            book_se=book_se, instrument_se=inst_se)
    assert robust.status == "optimal"
    z = 1.959963984540054
    for f in ("term", "def"):
        se = math.sqrt(0.01 ** 2 + (0.03 ** 2 * robust.positions ** 2).sum())
        assert robust.exposure_after_se[f] == pytest.approx(se, rel=1e-10)
        assert abs(robust.exposure_after[f]) + z * se <= 0.06 + 1e-7
    assert robust.robust_gross_ratio == pytest.approx(robust.gross / nominal.gross, rel=1e-9)
    assert robust.tracking_error >= nominal.tracking_error - 1e-9
    interval = robust.to_dict()["exposure_after_interval"]["term"]
    assert interval[0] >= -0.06 - 1e-7 and interval[1] <= 0.06 + 1e-7


def test_robust_with_zero_tolerance_is_unreachable_not_an_error():
    betas, cov, book, sheet = make_case(13)
    res = design_overlay(book, betas, cov, sheet, nav=1e8,
                         spec=HedgeSpec.from_sheet(sheet, robust=True, **BASE),
                         book_se=pd.Series(0.01, index=FACTORS), instrument_se=betas * 0 + 0.01)
    assert res.status == "unreachable"
    assert set(res.unreachable) == {"term", "def"}
    assert any("half-width" in b for b in res.binding)


def test_total_objective_lowers_total_risk_against_tracking():
    betas, cov, book, sheet = make_case(14)
    rng = np.random.default_rng(140)
    corr = pd.Series(rng.normal(0, 0.002, len(betas)), index=betas.index)
    args = dict(book_variance=0.03, book_instrument_cov=corr)
    track = design_overlay(book, betas, cov, sheet, nav=1e8, spec=HedgeSpec.from_sheet(sheet, **BASE),
                           **args)
    total = design_overlay(book, betas, cov, sheet, nav=1e8,
                           spec=HedgeSpec.from_sheet(sheet, objective="total", **BASE), **args)
    assert total.total_risk_after <= track.total_risk_after + 1e-9
    assert total.tracking_error >= track.tracking_error - 1e-9


# ------------------------------------------------------------------ reuse

def test_problem_is_built_once_and_re_solved_with_new_numbers():
    betas, cov, book, sheet = make_case(15)
    spec = HedgeSpec.from_sheet(sheet, **BASE)
    problem = OverlayProblem.for_inputs(betas.index, spec, sheet)
    compiled = problem._main
    rng = np.random.default_rng(150)
    for _ in range(3):
        b2 = betas + rng.normal(0, 0.02, betas.shape)
        bk = book + rng.normal(0, 0.02, len(book))
        reused = design_overlay(bk, b2, cov, sheet, nav=1e8, spec=spec, problem=problem)
        fresh = design_overlay(bk, b2, cov, sheet, nav=1e8, spec=spec,
                               problem=OverlayProblem.for_inputs(betas.index, spec, sheet))
        np.testing.assert_allclose(reused.positions, fresh.positions, atol=1e-9)
    assert problem._main is compiled and problem.n_solves == 3
    other = HedgeSpec.from_sheet(sheet, neutralise=("term",))
    with pytest.raises(InputError, match="built for other"):
        design_overlay(book, betas, cov, sheet, nav=1e8, spec=other, problem=problem)


# ------------------------------------------------------------------ bad input

VALID = "valid: mkt, dy, term, def, rf, extra."


@pytest.mark.parametrize("spec_kw, text", [
    ({"neutralise": ("credit",)}, "[hedge] neutralise names unknown factor 'credit'; " + VALID),
    ({"keep": {"mkk": (0.9, 1.1)}}, "[hedge] keep names unknown factor 'mkk'; " + VALID),
    ({"neutralise": ("term",), "targets": {"dfe": 0.1}},
     "[hedge] targets names unknown factor 'dfe'; " + VALID),
    ({"neutralise": ("term",), "targets": {"def": 0.1}},
     "[hedge] targets names 'def', not in neutralise; valid: term."),
    ({"neutralise": ("term",), "tolerance": {"def": 0.1}},
     "[hedge] tolerance names unknown factor 'def'; valid: term."),
    ({"neutralise": ("term",), "exclude": ("inst_99", "inst_x")},
     "[hedge] exclude names unknown instruments 'inst_99' and 'inst_x'; valid: inst_0,"),
])
def test_unknown_names_raise_input_error_naming_the_config_key(spec_kw, text):
    """The message names the key as a user writes it, lists the valid names and ends with a
    period before " Fix:"; no CSV column is named for a configuration key."""
    betas, cov, book, sheet = make_case(16)
    with pytest.raises(InputError) as err:
        design_overlay(book, betas, cov, sheet, nav=1e8, spec=HedgeSpec(**spec_kw))
    msg = str(err.value)
    assert msg.startswith(text)
    assert err.value.fix and ". Fix: " in msg and err.value.column is None


@pytest.mark.parametrize("value", [np.nan, np.inf, "abc"])
def test_current_positions_blank_or_infinite_weight_is_named(value):
    """A blank, infinite or text weight in the current positions names the instrument and
    the weight column, never a numpy repr."""
    betas, cov, book, sheet = make_case(16)
    current = pd.Series({"inst_1": 0.1, "inst_3": value}, dtype=object)
    with pytest.raises(InputError) as err:
        design_overlay(book, betas, cov, sheet, nav=1e8, spec=HedgeSpec(neutralise=("term",)),
                       current=current)
    msg = str(err.value)
    assert "weight for 'inst_3' is blank or not finite." in msg
    assert "current-positions file" in msg and "'weight'" in msg and "np." not in msg
    with pytest.raises(InputError, match=r"current-positions file names unknown instrument "
                                         r"'inst_9'; valid: inst_0"):
        design_overlay(book, betas, cov, sheet, nav=1e8, spec=HedgeSpec(neutralise=("term",)),
                       current=pd.Series({"inst_9": 0.1}))


def test_spec_messages_end_with_a_period_and_name_the_key():
    """HedgeSpec's own checks read "[hedge] <key> ...", end with '.', and name no column."""
    cases = [dict(objective="variance"), dict(confidence=1.5), dict(premium_weight=-1.0),
             dict(max_gross=-0.1), dict(tolerance=-0.1), dict(keep={"mkt": (1.1, 0.9)}),
             dict(neutralise=("mkt",), keep={"mkt": (0.9, 1.1)})]
    for kw in cases:
        with pytest.raises(InputError) as err:
            HedgeSpec(**kw)
        msg = str(err.value)
        assert msg.startswith(("[hedge] ", "[intervals] ")), msg  # the level: [intervals]
        assert msg.split(" Fix: ")[0].endswith("."), msg
        assert err.value.column is None


def test_other_bad_input():
    betas, cov, book, sheet = make_case(17)
    spec = HedgeSpec(neutralise=("term",))
    with pytest.raises(InputError, match="robust"):
        design_overlay(book, betas, cov, sheet, nav=1e8, spec=HedgeSpec(neutralise=("term",),
                                                                       robust=True))
    with pytest.raises(InputError, match="book_variance"):
        design_overlay(book, betas, cov, sheet, nav=1e8,
                       spec=HedgeSpec(neutralise=("term",), objective="total"))
    with pytest.raises(InputError, match="prices of risk"):
        design_overlay(book, betas, cov, sheet, nav=1e8,
                       spec=HedgeSpec(neutralise=("term",), premium_weight=1.0))
    with pytest.raises(InputError, match="instrument sheet"):
        design_overlay(book, betas, cov, sheet.iloc[1:], nav=1e8, spec=spec)
    with pytest.raises(InputError, match="nav"):
        design_overlay(book, betas, cov, sheet, nav=-1.0, spec=spec)
    with pytest.raises(InputError, match="objective"):
        HedgeSpec(objective="variance")
    with pytest.raises(InputError, match="both"):
        HedgeSpec(neutralise=("mkt",), keep={"mkt": (0.9, 1.1)})
    with pytest.raises(InputError, match="method"):
        instrument_covariance(pd.DataFrame({"a": [0.1, 0.2]}), method="shrunk")
    with pytest.raises(InputError, match="positive semi-definite"):
        bad = cov.copy()
        bad.iloc[0, 0] = -1.0
        design_overlay(book, betas, bad, sheet, nav=1e8, spec=spec)


# ------------------------------------------------------------------ solvers

def test_falls_back_to_the_next_solver_when_clarabel_fails(monkeypatch):
    """When CLARABEL raises, OSQP solves the same program to the same answer."""
    first = solve(18)
    original = cp.Problem.solve

    def broken(self, *args, solver=None, **kw):
        if solver == "CLARABEL":
            raise cp.error.SolverError("simulated failure")
        return original(self, *args, solver=solver, **kw)

    monkeypatch.setattr("cvxpy.Problem.solve", broken)
    again = solve(18)
    assert again.solver in ("OSQP", "SCS") and again.status == "optimal"
    np.testing.assert_allclose(again.positions, first.positions, atol=1e-5)


def test_never_reports_a_non_optimal_status(monkeypatch):
    """A solver that only reaches 'optimal_inaccurate' is not accepted as optimal."""
    original = cp.Problem.solve

    def inaccurate(self, *args, **kw):
        original(self, *args, **kw)
        self._status = cp.OPTIMAL_INACCURATE

    monkeypatch.setattr("cvxpy.Problem.solve", inaccurate)
    with pytest.raises(OverlaySolveError):
        solve(19)


def test_inaccurate_solutions_fall_through_silently(monkeypatch):
    """cvxpy's "Solution may be inaccurate" UserWarning is caught inside the solve and an
    'optimal_inaccurate' status counts as a failed attempt: the next solver answers and no
    library warning reaches the caller (or stderr)."""
    import warnings

    first = solve(18)
    original = cp.Problem.solve

    def noisy(self, *args, solver=None, **kw):
        out = original(self, *args, solver=solver, **kw)
        if solver == "CLARABEL":
            warnings.warn("Solution may be inaccurate. Try another solver, adjusting the "
                          "solver settings, or solve with verbose=True for more information.",
                          UserWarning, stacklevel=2)
            self._status = cp.OPTIMAL_INACCURATE
        return out

    monkeypatch.setattr("cvxpy.Problem.solve", noisy)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        again = solve(18)
    assert not caught, [str(w.message) for w in caught]
    assert again.status == "optimal" and again.solver in ("OSQP", "SCS")
    np.testing.assert_allclose(again.positions, first.positions, atol=1e-5)


def test_ledoit_wolf_covariance_and_quarterly_premium():
    """Premium given up annualises with periods_per_year (4 for quarterly data)."""
    betas, _, book, sheet = make_case(20)
    rng = np.random.default_rng(200)
    rets = pd.DataFrame(rng.normal(0, 0.03, (60, len(betas))), columns=betas.index)
    cov = instrument_covariance(rets, periods_per_year=4, method="ledoit-wolf")
    lam = pd.Series(0.01, index=FACTORS)
    res = design_overlay(book, betas, cov, sheet, nav=1e8, spec=HedgeSpec.from_sheet(sheet, **BASE),
                         premia=lam, periods_per_year=4)
    assert res.status == "optimal"
    assert res.premium_given_up == pytest.approx(-(betas.T @ res.positions) @ lam * 4, rel=1e-12)


def test_keep_band_out_of_reach_is_named():
    betas, cov, book, sheet = make_case(21)
    sheet = sheet.assign(min_weight=-0.01, max_weight=0.01)
    spec = HedgeSpec.from_sheet(sheet, keep={"mkt": (0.2, 0.3)})
    res = design_overlay(book, betas, cov, sheet, nav=1e8, spec=spec, closest=True)
    assert res.status == "unreachable" and res.unreachable == ("mkt",)
    assert res.remaining["mkt"] == pytest.approx(res.exposure_after["mkt"] - 0.3, abs=1e-7)
    assert "Limiting:" in res.message


def test_every_instrument_excluded():
    betas, cov, book, sheet = make_case(22)
    everything = tuple(betas.index)
    res = design_overlay(book, betas, cov, sheet, nav=1e8,
                         spec=HedgeSpec(neutralise=("term",), exclude=everything))
    assert res.status == "unreachable" and res.unreachable == ("term",)
    calm = design_overlay(book, betas, cov, sheet, nav=1e8, spec=HedgeSpec(exclude=everything))
    assert calm.status == "optimal" and calm.gross == 0.0


def test_exposure_table_gives_intervals():
    """95 % bounds b -/+ 1.96 se (normal quantile, common practice)."""
    betas, cov, book, sheet = make_case(23)
    res = design_overlay(book, betas, cov, sheet, nav=1e8, spec=HedgeSpec.from_sheet(sheet, **BASE),
                         book_se=pd.Series(0.02, index=FACTORS), instrument_se=betas * 0 + 0.01)
    table = res.exposure_table()
    assert list(table.index) == FACTORS
    np.testing.assert_allclose(table["after_high"] - table["after"],
                               1.959963984540054 * table["after_se"], rtol=1e-12)
    assert (table["before_se"] == 0.02).all()
    assert res.to_dict()["exposure_after_interval"]["term"][1] == pytest.approx(
        table.loc["term", "after_high"])
