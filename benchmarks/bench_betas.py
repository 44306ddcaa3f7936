"""Benchmark: rolling 60-month betas on 5 factors, 5,000 assets x 600 months, 10 % missing.

Targets (issue 4): under 1.5 s on 2 cores, at least 100x faster than a per-asset
statsmodels RollingOLS loop measured in the same run (a sample of assets timed and
extrapolated), max abs difference 1e-8, peak memory under 2 GB.

Shared design (issue 14 item 2): ``--shapes`` times rolling_betas at one thread on three
panel shapes of the same size -- balanced, listing gaps only (each asset starts at a random
month, some stop early) and 10 % of cells missing at random -- against, in the same run,
(a) the tight balanced kernel below (window sums by cumulative sums, one K x K inverse per
window shared by every asset, one batched multiply), (b) the per-series path every window
took before (hedgekit's own per-series route forced on all series) and (c) statsmodels
RollingOLS (a sample of assets, extrapolated); wall and CPU seconds.  Goals: balanced and
listing gaps within 1.3x of the kernel, random gaps no slower than the per-series path.

Run: python benchmarks/bench_betas.py [--assets 5000] [--months 600] [--sample 40]
     python benchmarks/bench_betas.py --shapes [--assets 5000] [--months 600]
"""

from __future__ import annotations

import argparse
import time
import tracemalloc

import numpy as np
import pandas as pd
import statsmodels.api as sm
from statsmodels.regression.rolling import RollingOLS

import hedgekit.exposures as exposures_module
from hedgekit.exposures import rolling_betas, time_series_betas


def make_panel(assets: int, months: int, factors: int, missing: float, seed: int = 0):
    rng = np.random.default_rng(seed)
    idx = pd.period_range("1975-01", periods=months, freq="M", name="date")
    f = rng.normal(0.0, 0.045, (months, factors))
    b = rng.normal(0.5, 0.5, (assets, factors))
    r = f @ b.T + rng.normal(0.0, 0.03, (months, assets))
    r[rng.random(r.shape) < missing] = np.nan
    return (pd.DataFrame(r, index=idx, columns=[f"a{i:05d}" for i in range(assets)]),
            pd.DataFrame(f, index=idx, columns=[f"f{j}" for j in range(factors)]))


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--assets", type=int, default=5000)
    ap.add_argument("--months", type=int, default=600)
    ap.add_argument("--factors", type=int, default=5)
    ap.add_argument("--sample", type=int, default=40)
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--shapes", action="store_true")
    args = ap.parse_args()
    window, min_obs = 60, 36
    if args.shapes:
        shapes(args.assets, args.months, args.factors, args.sample, args.repeat)
        return
    returns, factors = make_panel(args.assets, args.months, args.factors, 0.10)

    times, cpu = [], []
    for _ in range(args.repeat):
        t0, c0 = time.perf_counter(), time.process_time()
        rb = rolling_betas(returns, factors, window=window, min_obs=min_obs)
        times.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
    ours = min(times)

    tracemalloc.start()
    rolling_betas(returns, factors, window=window, min_obs=min_obs)
    peak = tracemalloc.get_traced_memory()[1] / 2**30
    tracemalloc.stop()

    # Reference: statsmodels RollingOLS per asset; missing="drop" keeps calendar windows
    # and drops the blank months inside each one; min_nobs = 36; expanding=True gives the
    # first windows (fewer than 60 months, at least 36 valid) as hedgekit does.
    x = np.column_stack([np.ones(args.months), factors.to_numpy()])
    pick = np.random.default_rng(1).choice(args.assets, args.sample, replace=False)
    worst = 0.0
    t0 = time.perf_counter()
    for i in pick:  # the reference loop being measured
        ref = RollingOLS(returns.iloc[:, i].to_numpy(), x, window=window, min_nobs=min_obs,
                         missing="drop", expanding=True).fit(params_only=True).params[:, 1:]
        both = np.isfinite(ref) & np.isfinite(rb.values[:, i, :])
        if not np.array_equal(np.isfinite(ref), np.isfinite(rb.values[:, i, :])):
            raise SystemExit(f"blank windows differ for asset {i}")
        worst = max(worst, float(np.abs(ref[both] - rb.values[:, i, :][both]).max()))
    ref_time = (time.perf_counter() - t0) / args.sample * args.assets

    # Full-sample betas with HAC errors on the same panel, against statsmodels OLS HAC.
    t0 = time.perf_counter()
    full = time_series_betas(returns, factors)
    full_time = time.perf_counter() - t0
    worst_full = 0.0
    t0 = time.perf_counter()
    for i in pick:  # the reference loop being measured
        ok = returns.iloc[:, i].notna().to_numpy()
        fit = sm.OLS(returns.iloc[:, i].to_numpy()[ok], x[ok]).fit(
            cov_type="HAC", cov_kwds={"maxlags": full.hac_lags})
        worst_full = max(worst_full, float(np.abs(fit.params[1:] - full.betas.iloc[i].to_numpy()).max()))
    ref_full = (time.perf_counter() - t0) / args.sample * args.assets

    print(f"panel: {args.assets} assets x {args.months} months x {args.factors} factors, 10% missing")
    print(f"hedgekit rolling_betas: {ours:.3f} s wall, {min(cpu):.3f} s CPU "
          f"(best of {args.repeat}; target < 1.5 s on 2 cores)")
    print(f"statsmodels RollingOLS loop: {ref_time:.1f} s (extrapolated from {args.sample} assets)")
    print(f"speed ratio: {ref_time / ours:.0f}x (target >= 100x)")
    print(f"max abs difference: {worst:.2e} (target <= 1e-8)")
    print(f"peak traced memory: {peak:.3f} GB (target < 2 GB)")
    print(f"full-sample betas + HAC errors: {full_time:.3f} s; statsmodels OLS(HAC) loop "
          f"{ref_full:.1f} s (extrapolated); max abs beta difference {worst_full:.1e}")


def kernel(y: np.ndarray, f: np.ndarray, window: int, first: int = 35) -> np.ndarray:
    """The tight balanced kernel: rolling slopes (T - first, K, N) of every column of y on
    [1, f] for the windows ending at rows first.. when no value is missing.  Window sums by
    cumulative sums, one K x K inverse per window shared by all assets, one batched multiply."""
    t = len(f)
    fc = f - f.mean(axis=0)

    def wsum(a: np.ndarray) -> np.ndarray:
        c = np.cumsum(a, axis=0)
        c[window:] -= c[:-window].copy()
        return c

    n_t = np.minimum(np.arange(1, t + 1), window).astype(float)
    s_f = wsum(fc)
    a = wsum(fc[:, :, None] * fc[:, None, :]) - s_f[:, :, None] * s_f[:, None, :] / n_t[:, None, None]
    inv = np.linalg.inv(a[first:])
    s_y = wsum(y)[first:]
    c = wsum(fc[:, :, None] * y[:, None, :])[first:] - s_f[first:, :, None] * (s_y / n_t[first:, None])[:, None, :]
    return np.matmul(inv, c)


def _timed(fn, repeat: int) -> tuple[float, float, object]:
    walls, cpus, out = [], [], None
    for _ in range(repeat):
        t0, c0 = time.perf_counter(), time.process_time()
        out = fn()
        walls.append(time.perf_counter() - t0)
        cpus.append(time.process_time() - c0)
    return min(walls), min(cpus), out


def shapes(assets: int, months: int, factors: int, sample: int, repeat: int) -> None:
    window, min_obs = 60, 36
    base, fac = make_panel(assets, months, factors, 0.0)
    rng = np.random.default_rng(2)
    listing = base.copy()
    start = rng.integers(0, months // 2, assets)
    stop = np.where(rng.random(assets) < 0.3, rng.integers(months // 2, months, assets), months)
    rows = np.arange(months)[:, None]
    listing = listing.where((rows >= start) & (rows < stop))
    random_gaps = base.where(rng.random(base.shape) >= 0.10)
    exposures_module._THREADS = 1
    k_wall, k_cpu, kb = _timed(lambda: kernel(base.to_numpy(), fac.to_numpy(), window), repeat)
    print(f"panel {assets} x {months} x {factors}, window {window}, one thread; "
          f"balanced kernel {k_wall:.3f} s wall, {k_cpu:.3f} s CPU")
    x = np.column_stack([np.ones(months), fac.to_numpy()])
    for label, panel in (("balanced", base), ("listing gaps", listing), ("random 10 % gaps", random_gaps)):
        wall, cpu, rb = _timed(lambda p=panel: rolling_betas(p, fac, window=window, min_obs=min_obs), repeat)
        if label == "balanced":
            ok = np.isfinite(rb.values)
            ok[:min_obs - 1] = False
            diff = float(np.abs(kb.transpose(0, 2, 1)[ok[min_obs - 1:]] - rb.values[ok]).max())
            print(f"  kernel against hedgekit on the balanced panel: max abs difference {diff:.1e}")
        # The per-series path for every series (how every window was estimated before).
        saved = exposures_module._shared_block
        exposures_module._shared_block = _per_series_block
        try:
            o_wall, o_cpu, ob = _timed(lambda p=panel: rolling_betas(p, fac, window=window, min_obs=min_obs),
                                       max(1, repeat // 2))
        finally:
            exposures_module._shared_block = saved
        both = np.isfinite(ob.values)
        diff = float(np.abs(ob.values[both] - rb.values[both]).max())
        pick = np.random.default_rng(1).choice(assets, sample, replace=False)
        t0, c0 = time.perf_counter(), time.process_time()
        for i in pick:  # the reference loop being measured
            RollingOLS(panel.iloc[:, i].to_numpy(), x, window=window, min_nobs=min_obs, missing="drop",
                       expanding=True).fit(params_only=True)
        ref_wall = (time.perf_counter() - t0) / sample * assets
        ref_cpu = (time.process_time() - c0) / sample * assets
        print(f"  {label}: hedgekit {wall:.3f} s wall / {cpu:.3f} s CPU; "
              f"x kernel {wall / k_wall:.2f} wall, {cpu / k_cpu:.2f} CPU (goal <= 1.3 for the first two); "
              f"per-series path {o_wall:.3f} s ({o_wall / wall:.2f}x hedgekit, goal >= 1 for random gaps), "
              f"max abs difference {diff:.1e}; RollingOLS {ref_wall:.1f} s wall "
              f"({ref_wall / wall:.0f}x), {ref_cpu:.1f} s CPU ({ref_cpu / cpu:.0f}x per CPU-second)",
              flush=True)


def _per_series_block(y, design, window, need, *, out, counts):
    """Stand-in for the shared path: the per-series route on every series."""
    fc = design.fc
    exposures_module._rolling_block(y, fc, window, need, out=out, counts=counts)


if __name__ == "__main__":
    main()
