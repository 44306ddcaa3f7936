"""Walk-forward speed: 40 years monthly, quarterly rebalances, full re-estimation at each.

Target (issue 6): under 10 s on 2 cores for 480 months.  Runs :func:`walk_forward` on the
demo scenario (481 months of states, 7 instruments) and, as the reference measured in the
same run, a naive walk-forward that at each rebalance date re-runs the real-time VAR
from scratch on data up to that date, re-estimates betas and covariance, and compiles a
fresh overlay program (no reuse).  The naive cost is measured on every 8th date and scaled
to all dates.  Prints seconds and the ratio walk_forward / naive; then the batched window
betas of :mod:`hedgekit.backtest.estimators` (on :func:`hedgekit.windows.window_moments`)
against :func:`hedgekit.exposures.time_series_betas` run window by window.
Run: python benchmarks/bench_backtest.py
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np
import pandas as pd

from hedgekit.backtest import walk_forward
from hedgekit.backtest.estimators import window_betas
from hedgekit.exposures import time_series_betas
from hedgekit.hedge import HedgeSpec, OverlayProblem, design_overlay, instrument_covariance
from hedgekit.states import realtime_innovations

DEMO = Path(__file__).resolve().parents[1] / "demo_portfolios"
TARGET_SECONDS = 10.0


def read(name: str) -> pd.DataFrame:
    frame = pd.read_csv(DEMO / f"{name}.csv")
    frame.index = pd.PeriodIndex(frame.pop("date"), freq="M", name="date")
    return frame


def naive_step(states, book, inst, sheet, spec, tau, h_prev):
    """Everything from scratch for one date: real-time VAR, betas, covariance, new program."""
    rt = realtime_innovations(states.loc[:tau])
    f = rt.factors()
    f = f[f.notna().all(axis=1)]
    panel = pd.concat([book.rename("book"), inst], axis=1).reindex(f.index)
    est = time_series_betas(panel, f)
    cov = instrument_covariance(inst.reindex(f.index))
    problem = OverlayProblem.for_inputs(list(inst.columns), spec, sheet)
    res = design_overlay(est.betas.loc["book"], est.betas.loc[list(inst.columns)], cov, sheet,
                         nav=2.5e8, spec=spec, current=h_prev, closest=True, problem=problem)
    return res.positions


def main() -> None:
    states, inst = read("states"), read("instruments")
    book = read("portfolio_returns").iloc[:, 0]
    sheet = pd.read_csv(DEMO / "instrument_sheet.csv")
    spec = HedgeSpec.from_sheet(sheet, neutralise=("term", "def"), keep={"mkt": (0.95, 1.05)},
                                max_gross=1.5)
    walk_forward(states.iloc[:200], book.iloc[:200], inst.iloc[:200], sheet, spec=spec,
                 nav=2.5e8, min_periods=60)            # warm imports and solver libraries
    t0 = time.perf_counter()
    res = walk_forward(states, book, inst, sheet, spec=spec, nav=2.5e8)
    fast = time.perf_counter() - t0
    n = len(res.rebalance_dates)

    sample = res.rebalance_dates[::8]
    h_prev = pd.Series(0.0, index=inst.columns)
    t1 = time.perf_counter()
    for tau in sample:
        h_prev = naive_step(states, book, inst, sheet, spec, tau, h_prev)
    naive = (time.perf_counter() - t1) / len(sample) * n

    months = len(res.series) + int(np.flatnonzero(states.index == res.rebalance_dates[0])[0])
    print(f"walk_forward: {months} months, {n} quarterly rebalances, expanding windows: "
          f"{fast:6.2f} s ({fast / n * 1e3:.1f} ms per rebalance)")
    print(f"naive rebuild at each date (measured on {len(sample)} dates, scaled to {n}): "
          f"{naive:6.2f} s")
    print(f"ratio walk_forward / naive: {fast / naive:.3f}")
    print(f"ratio walk_forward / {TARGET_SECONDS:.0f} s target: {fast / TARGET_SECONDS:.3f} "
          f"({'within' if fast < TARGET_SECONDS else 'OVER'} target)")
    bench_window_betas(states, book, inst)


def bench_window_betas(states, book, inst) -> None:
    """Batched betas for every quarter end against the stage function on each window."""
    f = realtime_innovations(states).factors()
    f = f[f.notna().all(axis=1)]
    panel = pd.concat([book.rename("book"), inst], axis=1).reindex(f.index)
    ends = np.arange(60, len(f) + 1, 3)
    starts = np.zeros_like(ends)
    t0 = time.perf_counter()
    window_betas(panel.to_numpy(), f.to_numpy(), starts, ends)
    batched = time.perf_counter() - t0
    t1 = time.perf_counter()
    for e in ends:
        time_series_betas(panel.iloc[:e], f.iloc[:e])
    looped = time.perf_counter() - t1
    print(f"window betas for {len(ends)} dates: batched {batched * 1e3:.1f} ms, "
          f"window by window {looped * 1e3:.1f} ms, ratio {batched / looped:.4f}")


if __name__ == "__main__":
    main()
