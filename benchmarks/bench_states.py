"""Speed of real-time VAR innovations against a loop of statsmodels VAR fits.

Run: ``python benchmarks/bench_states.py``.  Both sides compute the same thing: at every
month τ from the minimum window on, a VAR fitted on data up to τ and its one-step forecast
error at τ+1.  The reference refits statsmodels' ``VAR`` at every τ (measured in this run);
hedgekit solves all τ at once from cumulative cross-products.  Prints times and ratios and
checks the two agree.
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np
import pandas as pd
from statsmodels.tsa.api import VAR

from hedgekit.states import realtime_innovations

DEMO = Path(__file__).resolve().parents[1] / "demo_portfolios"


def _demo() -> pd.DataFrame:
    frame = pd.read_csv(DEMO / "states.csv")
    frame.index = pd.PeriodIndex(frame.pop("date"), freq="M", name="date")
    return frame.dropna()


def _synthetic(seed: int = 11, months: int = 480, k: int = 5) -> pd.DataFrame:
    """A 5-variable, 40-year monthly VAR(1) with persistent levels (test data)."""
    rng = np.random.default_rng(seed)
    a = np.diag([0.05, 0.98, 0.95, 0.97, 0.99]) + 0.01 * rng.standard_normal((k, k))
    z = np.zeros((months + 100, k))
    for t in range(1, len(z)):
        z[t] = 0.001 + a @ z[t - 1] + rng.standard_normal(k) * [0.04, 0.002, 0.002, 0.001, 0.002]
    idx = pd.period_range("1985-01", periods=months, freq="M", name="date")
    return pd.DataFrame(z[100:], index=idx, columns=["mkt", "s1", "s2", "s3", "s4"])


def _reference(data: pd.DataFrame, lags: int, min_window: int, window: int | None) -> np.ndarray:
    z = data.to_numpy()
    n = len(z) - lags
    out = np.full((n, z.shape[1]), np.nan)
    for tau in range(min_window - 1 if window is None else window - 1, n - 1):
        start = 0 if window is None else tau + 1 - window
        res = VAR(z[start:tau + 1 + lags]).fit(lags)
        # statsmodels' own one-step forecast from the last `lags` rows known at tau
        fc = res.forecast(z[tau + 1:tau + 1 + lags], 1)[0]
        out[tau + 1] = z[tau + 1 + lags] - fc
    return out


def _time(fn, repeat: int) -> float:
    best = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def main() -> None:
    cases = [
        ("demo, 480 months, VAR(1), expanding from 120", _demo(), 1, 120, None),
        ("5 variables, 40 years, VAR(2), expanding from 120", _synthetic(), 2, 120, None),
        ("5 variables, 40 years, VAR(1), rolling 120", _synthetic(), 1, 120, 120),
    ]
    print(f"{'case':55s} {'hedgekit s':>11s} {'statsmodels loop s':>19s} {'ratio':>8s} {'max diff':>9s}")
    for label, data, lags, min_window, window in cases:
        fast = realtime_innovations(data, lags=lags, min_window=min_window, window=window)
        ref = _reference(data, lags, min_window, window)
        diff = np.nanmax(np.abs(fast.raw.to_numpy() - ref))
        t_fast = _time(lambda d=data, p=lags, m=min_window, w=window:
                       realtime_innovations(d, lags=p, min_window=m, window=w), 5)
        t_ref = _time(lambda d=data, p=lags, m=min_window, w=window: _reference(d, p, m, w), 1)
        print(f"{label:55s} {t_fast:11.4f} {t_ref:19.3f} {t_ref / t_fast:7.0f}x {diff:9.1e}")


if __name__ == "__main__":
    main()
