"""Tests of hedgekit.backtest's settings record and the call through it: run_walk_forward
with a BacktestSettings gives what walk_forward's keywords give; bad settings are refused
when the record is made, naming the configuration key and the period word."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from hedgekit.backtest import BacktestSettings, run_walk_forward, walk_forward
from hedgekit.errors import InputError

from .test_backtest import NAV, _short, demo  # noqa: F401 (a fixture)


def test_settings_record_and_keywords_give_the_same_run(demo):  # noqa: F811
    """The thin wrapper only builds the record: same decisions and evaluation to the bit."""
    args = _short(demo, 200)
    settings = BacktestSettings(nav=NAV, min_periods=60, beta_window=48, rebalance="monthly",
                                start="2000-06")
    a = run_walk_forward(*args, spec=demo["spec"], settings=settings)
    b = walk_forward(*args, spec=demo["spec"], nav=NAV, min_periods=60, beta_window=48,
                     rebalance="monthly", start="2000-06")
    assert np.array_equal(a.decisions.to_numpy(), b.decisions.to_numpy())
    assert a.effectiveness == b.effectiveness and a.to_dict() == b.to_dict()
    with pytest.raises(dataclasses.FrozenInstanceError):
        settings.nav = 1.0                                    # type: ignore[misc]


@pytest.mark.parametrize("kw, text", [
    (dict(nav=NAV, min_periods=0, periods_per_year=4),
     "[backtest] min_periods = 0 must be a positive whole number of quarters."),
    (dict(nav=NAV, beta_window=12, beta_min_obs=36),
     "[exposures] window = 12 must be a whole number of at least [exposures] min_obs = 36 "
     "months."),
    (dict(nav=-5.0), "[portfolio] nav = -5.0: the NAV must be a positive number."),
    (dict(nav=NAV, confidence=1.2), "[intervals] confidence = 1.2 must lie in [0.5, 1)."),
])
def test_bad_settings_are_refused_when_the_record_is_made(kw, text):
    with pytest.raises(InputError) as e:
        BacktestSettings(**kw)
    assert str(e.value).split(" Fix: ")[0] == text
