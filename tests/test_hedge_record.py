"""The hedge result as a record: every derived figure computed once, at one level, and a
light import (no cvxpy until a program is built, no scipy.stats at all)."""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from hedgekit.hedge import HedgeSpec, design_overlay, instrument_covariance
from tests.test_hedge import BASE, FACTORS, make_case


def _solve(confidence=None, **kw):
    betas, cov, book, sheet = make_case(23)
    spec = HedgeSpec.from_sheet(sheet, **BASE)
    return design_overlay(book, betas, cov, sheet, nav=1e8, spec=spec,
                          book_se=pd.Series(0.02, index=FACTORS), instrument_se=betas * 0 + 0.01,
                          confidence=confidence, **kw), betas, book


def test_import_does_not_pull_in_cvxpy_or_scipy_stats():
    code = ("import sys, hedgekit.hedge; "
            "print(any(m == 'cvxpy' or m.startswith('cvxpy.') for m in sys.modules), "
            "'scipy.stats' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.split() == ["False", "False"]


@pytest.mark.parametrize("level", [0.95, 0.80])
def test_t_p_marks_and_intervals_at_the_level(level):
    """t = b / se, p = 2 (1 - Phi(|t|)), interval b -/+ Phi^-1((1 + level)/2) se (normal
    inference as statsmodels' conf_int with use_t=False; checked with scipy.stats)."""
    res, betas, book = _solve(confidence=level)
    out = json.loads(json.dumps(res.to_dict(), allow_nan=False))
    assert out["confidence"] == level
    z = stats.norm.ppf(0.5 + level / 2)
    w = res.positions_rounded
    se_r = np.sqrt(0.02 ** 2 + (0.01 ** 2 * w ** 2).sum())
    for f in FACTORS:
        b = res.exposure_after_rounded[f]
        assert res.exposure_after_rounded_se[f] == pytest.approx(se_r, rel=1e-12)
        lo, hi = out["exposure_after_rounded_interval"][f]
        assert lo == pytest.approx(b - z * se_r, rel=1e-12, abs=1e-14)
        assert hi == pytest.approx(b + z * se_r, rel=1e-12, abs=1e-14)
        t = book[f] / 0.02
        assert out["exposure_before_t"][f] == pytest.approx(t, rel=1e-12)
        assert out["exposure_before_p"][f] == pytest.approx(2 * stats.norm.sf(abs(t)), rel=1e-9)
    table = res.conf_int()
    assert table.loc["term", "high"] == pytest.approx(out["exposure_after_rounded_interval"]["term"][1])
    wide = res.conf_int(0.99, which="before")
    assert wide.loc["mkt", "high"] - book["mkt"] == pytest.approx(stats.norm.ppf(0.995) * 0.02)


def test_neutralised_exposure_has_no_t_or_marks():
    """A continuous after-hedge exposure of ~1e-12 with a real se still gets a t-statistic,
    but a degenerate se gives none (hedgekit.inference.DEGENERATE_SE, common practice)."""
    betas, cov, book, sheet = make_case(23)
    res = design_overlay(book, betas, cov, sheet, nav=1e8, spec=HedgeSpec.from_sheet(sheet, **BASE),
                         book_se=pd.Series(0.0, index=FACTORS), instrument_se=betas * 0.0)
    out = res.to_dict()
    assert out["exposure_after_marks"]["term"] == "" and out["exposure_after_t"]["term"] is None


def test_sample_comes_from_the_covariance():
    betas, _, book, sheet = make_case(24)
    idx = pd.period_range("2001-01", periods=120, freq="M", name="date")
    rets = pd.DataFrame(np.random.default_rng(5).normal(0, 0.02, (120, len(betas))),
                        index=idx, columns=betas.index)
    rets.iloc[0, 0] = np.nan                      # listwise: the first month drops out
    cov = instrument_covariance(rets)
    res = design_overlay(book, betas, cov, sheet, nav=1e8, spec=HedgeSpec.from_sheet(sheet, **BASE))
    assert res.to_dict()["sample"] == {"first": "2001-02", "last": "2010-12", "periods": 119}
