"""Tests of hedgekit.stress: scenario sizes beside the sample, unit checks of user shocks,
one label per row, intervals at the run's level, period words that follow the data."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from hedgekit.cli import main
from hedgekit.errors import InputError
from hedgekit.stress import BUILTIN_SCENARIOS, SIZE_WARN_SD, run_stress

from .helpers import demo_copy
from .test_stress import BOOK, NAV, SIGMA, M, V, demo_sample  # noqa: F401 (a fixture)

SD = pd.Series(np.sqrt(np.diag(SIGMA.to_numpy())), index=V)


def test_sizes_beside_the_samples_largest_move(demo_sample):  # noqa: F811
    """largest_sd = |s| / sqrt(Sigma_u[j, j]); sample_max_sd = the largest raw innovation of
    that variable in the shock's direction over the same sd, both computed here with pandas
    (the definitions of the module docstring, common practice).  The +150 bp credit shock is
    far beyond the demo's largest widening and is warned about, naming the default spread;
    the sample recession (a mean of sample moves) never is.  One warning names every
    scenario beyond the sample."""
    raw, _, _ = demo_sample
    res = run_stress(BOOK, M, SIGMA, nav=NAV, raw_innovations=raw)
    t = res.table.set_index(["scenario", "reading"])
    credit = t.loc[("credit_spreads_widen_150bp", "isolated")]
    assert credit["largest_sd"] == pytest.approx(0.015 / SD["def"], rel=1e-12)
    assert credit["largest_sd_variable"] == "def"
    assert credit["sample_max_sd"] == pytest.approx(raw["def"].max() / SD["def"], rel=1e-12)
    assert credit["sample_max_date"] == str(raw["def"].idxmax())
    assert credit["beyond_sample"] and credit["largest_sd"] > 10
    cut = t.loc[("policy_rate_cut_100bp", "comove")]          # a fall: the largest fall
    assert cut["sample_max_sd"] == pytest.approx(-raw["rf"].min() / SD["rf"], rel=1e-12)
    assert cut["sample_max_date"] == str(raw["rf"].idxmin())
    rec = t.loc[("sample_recession", "isolated")]
    assert not rec["beyond_sample"] and rec["largest_sd"] <= rec["sample_max_sd"]
    said = [w for w in res.warnings if "credit_spreads_widen_150bp" in w]
    assert said == [w for w in res.warnings if " sd" in w]      # one warning names them all
    beyond = set(res.table.scenario[res.table.beyond_sample])
    assert all(f"'{name}'" in said[0] for name in beyond) and len(beyond) >= 2
    assert len(said) == 1 and "default spread" in said[0] and "never saw" in said[0]
    assert f"{credit['largest_sd']:.1f} sd" in said[0]
    assert not any("sample_recession" in w and "sd" in w for w in res.warnings)
    row = next(r for r in res.to_dict()["scenarios"] if r["name"] == "credit_spreads_widen_150bp")
    assert row["sample_max_sd"] == pytest.approx(credit["sample_max_sd"])
    assert row["size_by_variable"]["def"]["shock_sd"] == pytest.approx(credit["largest_sd"])
    json.dumps(res.to_dict(), allow_nan=False)


def test_size_warning_without_the_sample_uses_the_documented_bound():
    """Without raw innovations sample_max_sd is null and the warning fires beyond
    SIZE_WARN_SD (5 sd, common practice) only."""
    half = 0.5 * SIZE_WARN_SD * SD["term"]
    scen = [{"name": "small", "shocks": {"term": half}},
            {"name": "large", "shocks": {"term": 3 * half}}]
    res = run_stress(BOOK, M, SIGMA, nav=NAV, scenarios=scen, include_builtin=False)
    assert res.table["sample_max_sd"].isna().all()
    assert list(res.table["beyond_sample"]) == [False, False, True, True]
    assert [w for w in res.warnings if "sd" in w] == [
        f"scenario 'large' moves the term spread by {1.5 * SIZE_WARN_SD:.1f} sd of its "
        f"innovation, beyond {SIZE_WARN_SD:g} sd."]
    assert res.to_dict()["scenarios"][0]["sample_max_sd"] is None


@pytest.mark.parametrize("var, value, fix", [
    ("def", 150, "write 0.015 for +150 bp."),
    ("term", -25, "write -0.0025 for -25 bp."),
    ("dy", 0.5, "write 0.005 for +0.5 % (+50 bp)."),
    ("mkt", -20, "write -0.2 for -20 %."),
])
def test_user_shocks_in_the_wrong_unit_are_refused(var, value, fix):
    """A level shock beyond 0.10 (1,000 bp) or a market shock beyond 1.0 (100 %) is a unit
    slip (SHOCK_BOUNDS, common practice): InputError with the decimal to write instead."""
    with pytest.raises(InputError) as e:
        run_stress(BOOK, M, SIGMA, nav=NAV, scenarios=[{"name": "x", "shocks": {var: value}}])
    assert e.value.fix == fix
    assert str(e.value).startswith(f"[[stress.scenarios]] number 1 ('x'): shocks.{var} = ")
    # at the bound itself the shock is accepted
    bound = 1.0 if var == "mkt" else 0.10
    run_stress(BOOK, M, SIGMA, nav=NAV, scenarios=[{"name": "x", "shocks": {var: -bound}}])


def test_shock_in_basis_points_exits_2_from_the_command_line(tmp_path, capsys):
    """The whole command: a [[stress.scenarios]] shock of 150 on the default spread exits 2
    with the fix on standard error (interface: bad input exits 2, no traceback)."""
    cfg = demo_copy(tmp_path)
    cfg.write_text(cfg.read_text() + '\n[[stress.scenarios]]\nname = "typo"\n'
                                     'shocks = { def = 150 }\n')
    code = main(["stress", str(cfg)])
    err = capsys.readouterr().err
    assert code == 2
    assert "write 0.015 for +150 bp" in err and "Traceback" not in err


def test_one_label_per_row_and_unambiguous_ids():
    """Each row's label is its description and reading, the same in the table and the JSON;
    no built-in id or description says "yield" without "dividend"; descriptions written
    from the shocks name the variable and its unit."""
    scen = [{"name": "mine", "shocks": {"def": 0.0125, "mkt": -0.1}}]
    res = run_stress(BOOK, M, SIGMA, nav=NAV, scenarios=scen)
    for name, spec in BUILTIN_SCENARIOS.items():
        for text in (name, spec["description"]):
            if "yield" in text:
                assert "dividend" in text, text
    t = res.table
    assert (t["label"] == t["description"] + " (" + t["reading"] + ")").all()
    assert not t["label"].duplicated().any()
    rows = res.to_dict()["scenarios"]
    assert [r["label"] for r in rows] == list(t["label"])
    mine = t[t.scenario == "mine"].iloc[0]
    assert mine["description"] == "default spread +125 bp, market excess return -10 %"
    assert "dividend yield +1 point" in " ".join(t["label"])


def test_intervals_at_the_run_level():
    """At confidence 0.80 every interval is P&L +/- z se with z = scipy.stats.norm.ppf(0.90)
    (the reference library); conf_int(level) gives any other level, like statsmodels."""
    se = BOOK.abs() * 0.1
    res = run_stress(BOOK, M, SIGMA, nav=NAV, book_se=se, confidence=0.80)
    t = res.table
    z80 = stats.norm.ppf(0.90)
    np.testing.assert_allclose(t["unhedged_hi"] - t["unhedged"], z80 * t["unhedged_se"],
                               rtol=1e-12)
    np.testing.assert_allclose(t["hedged_ccy_lo"], (t["hedged"] - z80 * t["hedged_se"]) * NAV,
                               rtol=1e-12)
    ci = res.conf_int()
    np.testing.assert_allclose(ci["low"], t["hedged_lo"], rtol=1e-14)
    wide = res.conf_int(0.99, side="unhedged")
    np.testing.assert_allclose(wide["high"] - t["unhedged"],
                               stats.norm.ppf(0.995) * t["unhedged_se"], rtol=1e-12)
    out = res.to_dict()
    assert out["confidence"] == 0.80 and out["level_label"] == "80 %"
    assert out["scenarios"][0]["pnl"]["hedged"]["interval"] == [t["hedged_lo"].iloc[0],
                                                                t["hedged_hi"].iloc[0]]
    with pytest.raises(InputError, match=r"\[intervals\] confidence"):
        run_stress(BOOK, M, SIGMA, nav=NAV, confidence=1.5)


def test_period_words_and_sample_follow_the_data(demo_sample):  # noqa: F811
    """Monthly data replay months (and complete quarters besides); quarterly data (the demo
    summed to calendar quarters) replay quarters only and say quarters in the recession's
    description; sample = first, last and count of the innovations used (the contract)."""
    raw, factors, book = demo_sample
    monthly = run_stress(BOOK, M, SIGMA, nav=NAV, raw_innovations=raw, factors=factors,
                         book_returns=book, worst_k=3)
    assert monthly.period_label == "months" and monthly.replay is monthly.replay_months
    out = monthly.to_dict()
    used = raw.dropna().index
    assert out["sample"] == {"first": str(used[0]), "last": str(used[-1]), "periods": len(used)}
    assert out["replay"]["period_label"] == "months" and out["replay"]["quarters"]
    assert out["replay"]["periods"] == out["replay"]["months"]

    raw, factors = raw.dropna(), factors.dropna()
    q = raw.index.asfreq("Q")
    full = raw.groupby(q).size() == 3
    raw_q = raw.groupby(q).sum()[full]
    fac_q = factors.groupby(q).sum()[full]
    book_q = book.groupby(book.index.asfreq("Q")).sum()
    quarterly = run_stress(BOOK, M, SIGMA, nav=NAV, raw_innovations=raw_q, factors=fac_q,
                           book_returns=book_q, worst_k=3)
    assert quarterly.period_label == "quarters" and quarterly.replay_months is None
    assert quarterly.replay is quarterly.replay_quarters
    worst = quarterly.replay[quarterly.replay.ranked_by == "book"]
    assert list(worst["date"]) == list((fac_q @ BOOK.to_numpy()).nsmallest(3).index)
    rec = quarterly.table[quarterly.table.scenario == "sample_recession"].iloc[0]
    assert "worst quarters of the sample" in rec["description"] and "month" not in rec["label"]
    qout = quarterly.to_dict()
    assert qout["replay"]["months"] == [] and qout["replay"]["period_label"] == "quarters"
    assert qout["sample"]["first"] == str(raw_q.index[0]) and "Q" in qout["sample"]["first"]
    assert quarterly.recession["period_label"] == "quarters"
