"""Tests of hedgekit.backtest: effectiveness per neutralised factor, intervals at the run's
level, the period-counting keyword ``min_periods`` and the evaluated sample."""

from __future__ import annotations

import json

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

from hedgekit.backtest import NEAR_ZERO_T, walk_forward
from hedgekit.backtest.evaluate import effectiveness_by_factor as _effectiveness_by_factor
from hedgekit.hedge import HedgeSpec

from .test_backtest import NAV, _short, demo  # noqa: F401 (a fixture)


@pytest.fixture(scope="module")
def short(demo):  # noqa: F811
    """The first 240 months of the demo with its hedge of term and def."""
    return {"args": _short(demo, 240), "spec": demo["spec"]}


@pytest.fixture(scope="module")
def run80(short):
    return walk_forward(*short["args"], spec=short["spec"], nav=NAV, min_periods=60,
                        confidence=0.80)


def test_effectiveness_for_each_neutralised_factor(run80):
    """effectiveness_by_factor = 1 - b_h^2 / b_u^2 for term and def only, with b the slopes of
    statsmodels OLS (HAC, Bartlett, maxlags floor(4 (T/100)^(2/9))) of the out-of-sample
    unhedged and hedged returns on the real-time factors (methods.md section 5); the demo
    book's term and def exposures are far from zero, so both have a figure."""
    res = run80
    s = res.series.dropna(subset=["book"])
    x = sm.add_constant(s[[f"factor.{f}" for f in res.factors]].to_numpy())
    lags = int(np.floor(4 * (len(s) / 100) ** (2 / 9)))
    fits = {c: sm.OLS(s[c].to_numpy(), x).fit(cov_type="HAC", cov_kwds={"maxlags": lags})
            for c in ("book", "hedged")}
    assert list(res.effectiveness_by_factor.index) == ["term", "def"]
    for f in ("term", "def"):
        j = 1 + res.factors.index(f)
        bu, bh = fits["book"].params[j], fits["hedged"].params[j]
        assert abs(bu) > NEAR_ZERO_T * fits["book"].bse[j]
        assert res.effectiveness_by_factor[f] == pytest.approx(1 - bh ** 2 / bu ** 2, rel=1e-8)
    out = res.to_dict()
    assert set(out["effectiveness_by_factor"]) == {"term", "def"}
    assert out["effectiveness_note"] == {}
    json.dumps(out, allow_nan=False)


def test_near_zero_denominator_gives_null_and_a_reason():
    """No percentage where the unhedged exposure is within one standard error of zero (the
    documented threshold, common practice): an rf exposure of 0.0002 (se 0.004) hedged to
    0.006 would read -89,900 %; a negative figure on a real exposure stays (and is warned)."""
    factors = ("mkt", "def", "rf")
    bu = np.array([1.0, 0.011, 0.0002])
    bh = np.array([1.0, 0.019, 0.006])
    se = np.array([0.05, 0.004, 0.004])
    eff, note = _effectiveness_by_factor(("def", "rf"), factors, bu, bh, se)
    assert eff["def"] == pytest.approx(1 - 0.019 ** 2 / 0.011 ** 2, rel=1e-12)
    assert np.isnan(eff["rf"]) and list(note) == ["rf"]
    assert "within 1 standard error of zero" in note["rf"]
    zero, why = _effectiveness_by_factor(("def",), factors, np.zeros(3), bh, se)
    assert np.isnan(zero["def"]) and "def" in why


def test_null_and_negative_effectiveness_on_a_book_without_state_exposure(short):
    """The equity index future alone as the book (true dy, term, def and rf exposures zero in
    the demo's truth.json), all four state factors neutralised: the out-of-sample unhedged
    exposures to dy, term and def are within one se of zero, so null with a reason; rf's
    (noise, |t| > 1) is hedged into a larger one, so negative and named in warnings."""
    states, _, inst, sheet = short["args"]
    spec = HedgeSpec.from_sheet(sheet, neutralise=("dy", "term", "def", "rf"), max_gross=1.5)
    res = walk_forward(states, inst["equity_index_future"], inst, sheet, spec=spec, nav=NAV,
                       min_periods=60)
    out = res.to_dict()
    assert list(out["effectiveness_by_factor"]) == ["dy", "term", "def", "rf"]
    for f in ("dy", "term", "def"):
        assert out["effectiveness_by_factor"][f] is None
        assert "no percentage" in out["effectiveness_note"][f]
        bu, se = res.realised_exposure.loc["unhedged", f], res.realised_exposure_se.loc["unhedged", f]
        assert abs(bu) <= se
    assert out["effectiveness_by_factor"]["rf"] < 0 and "rf" not in out["effectiveness_note"]
    said = [w for w in res.warnings if w.startswith("out of sample the hedge of rf made")]
    assert len(said) == 1 and f"{100 * out['effectiveness_by_factor']['rf']:.1f} %" in said[0]
    assert not any(f"hedge of {f} made" in w for f in ("dy", "term", "def") for w in res.warnings)


def test_intervals_at_the_run_level(run80):
    """At confidence 0.80 the realised-exposure intervals are b +/- z se with
    z = scipy.stats.norm.ppf(0.90); conf_int(level) gives another level (statsmodels-style)."""
    res = run80
    z = stats.norm.ppf(0.90)
    b, se = res.realised_exposure.loc["hedged"], res.realised_exposure_se.loc["hedged"]
    ci = res.conf_int()
    np.testing.assert_allclose(ci["high"], b + z * se, rtol=1e-12)
    np.testing.assert_allclose(res.conf_int(0.99, side="unhedged")["low"],
                               res.realised_exposure.loc["unhedged"]
                               - stats.norm.ppf(0.995) * res.realised_exposure_se.loc["unhedged"],
                               rtol=1e-12)
    out = res.to_dict()
    assert out["confidence"] == 0.80 and out["level_label"] == "80 %"
    pair = out["realised_exposure_interval_pairs"]["hedged"]["term"]
    assert pair == pytest.approx([b["term"] - z * se["term"], b["term"] + z * se["term"]])


def test_min_periods_and_the_sample(short, run80):
    """min_periods counts periods of the first VAR fit; min_window is the same setting under
    its earlier name (same decisions to the bit); sample spans the evaluated periods."""
    old = walk_forward(*short["args"], spec=short["spec"], nav=NAV, min_window=60,
                       confidence=0.80)
    assert np.array_equal(old.decisions.to_numpy(), run80.decisions.to_numpy())
    assert run80.settings["min_periods"] == 60
    used = run80.series.dropna(subset=["book"]).index
    assert run80.to_dict()["sample"] == {"first": str(used[0]), "last": str(used[-1]),
                                         "periods": run80.n_periods}
