"""Benchmark: Fama-MacBeth over 5,000 assets x 600 months x 5 factors, 10 % missing.

Targets (issue 4): under 0.5 s and faster than linearmodels' panel FamaMacBeth on the
same data (the same full-sample betas as regressors); point estimates and plain standard
errors are compared.  Rolling (lagged 60-month) betas are timed too.

Scaling in T (issue 14 item 3): ``--scaling`` times Fama-MacBeth at N = 3,000 assets over
T = 600, 2,400 and 6,300 periods, prints the exponent of time in T (goal <= 1.1) and, in the
same run, the pricing-error test by the eigendecomposition of the min(N, T)² Gram matrix
(the former route) with the largest relative difference of the statistics (goal 1e-10).

Run: python benchmarks/bench_fama_macbeth.py [--assets 5000] [--months 600]
     python benchmarks/bench_fama_macbeth.py --scaling [--assets 3000]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
from linearmodels.panel import FamaMacBeth

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_betas import make_panel  # noqa: E402

import hedgekit.premia as premia_module  # noqa: E402
from hedgekit.exposures import rolling_betas, time_series_betas  # noqa: E402
from hedgekit.premia import fama_macbeth  # noqa: E402


def best_of(repeat: int, fn) -> tuple[float, object]:
    out, times = None, []
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return min(times), out


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--assets", type=int, default=5000)
    ap.add_argument("--months", type=int, default=600)
    ap.add_argument("--factors", type=int, default=5)
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--scaling", action="store_true")
    ap.add_argument("--missing", type=float, default=0.10, help="share of blank cells (scaling)")
    args = ap.parse_args()
    if args.scaling:
        scaling(3000 if args.assets == 5000 else args.assets, args.factors, missing=args.missing)
        return
    returns, factors = make_panel(args.assets, args.months, args.factors, 0.10)
    betas = time_series_betas(returns, factors).betas
    rb = rolling_betas(returns, factors, window=60, min_obs=36)

    ours, res = best_of(args.repeat, lambda: fama_macbeth(returns, betas, factors=factors, nw_lags=0))
    ours_roll, _ = best_of(args.repeat, lambda: fama_macbeth(returns, rb, factors=factors, nw_lags=0))

    long = returns.stack().dropna().rename("y").to_frame()
    long.index.names = ["date", "asset"]
    long = long.reset_index()
    long["time"] = long["date"].dt.to_timestamp()
    long = long.merge(betas.rename_axis("asset").reset_index(), on="asset")
    long = long.set_index(["asset", "time"]).sort_index()
    long["const"] = 1.0
    cols = ["const", *betas.columns]
    t0 = time.perf_counter()
    ref = FamaMacBeth(long["y"], long[cols]).fit(cov_type="unadjusted")
    ref_time = time.perf_counter() - t0

    d_lam = float(np.max(np.abs(res.lambda_.to_numpy() - np.asarray(ref.params))))
    d_se = float(np.max(np.abs(res.se_fm.to_numpy() / np.asarray(ref.std_errors) - 1)))
    print(f"panel: {args.assets} assets x {args.months} months x {args.factors} factors, 10% missing")
    print(f"hedgekit fama_macbeth, full-sample betas: {ours:.3f} s (best of {args.repeat}; target < 0.5 s)")
    print(f"hedgekit fama_macbeth, rolling betas: {ours_roll:.3f} s")
    print(f"linearmodels FamaMacBeth (model + fit): {ref_time:.2f} s")
    print(f"speed ratio: {ref_time / ours:.0f}x (target > 1x)")
    print(f"max abs lambda difference: {d_lam:.1e}; max relative se difference: {d_se:.1e}")
    print(f"n_periods {res.n_periods}, n_skipped {res.n_skipped}; "
          f"pricing-error test df {res.pricing_error_test['df']}")


def scaling(assets: int, factors: int, months: tuple[int, ...] = (600, 2400, 6300),
            missing: float = 0.10) -> None:
    """Time in T at fixed N, against the eigendecomposition route in the same run."""
    eigen = premia_module._pinv_quadratic_eigen
    fast = premia_module._pinv_quadratic
    rows = []
    for t in months:
        returns, fac = make_panel(assets, t, factors, missing, seed=t)
        betas = time_series_betas(returns, fac).betas
        def run(returns=returns, betas=betas, fac=fac):
            return fama_macbeth(returns, betas, factors=fac, nw_lags=0)

        new_time, new = best_of(2, run)
        premia_module._pinv_quadratic = lambda e, v, rtol=1e-10, **known: eigen(e, v, rtol)
        try:
            old_time, old = best_of(1, run)
        finally:
            premia_module._pinv_quadratic = fast
        diff = max(abs(new.pricing_error_test["stat"] / old.pricing_error_test["stat"] - 1),
                   abs(new.pricing_error_test_shanken["stat"] / old.pricing_error_test_shanken["stat"] - 1))
        rows.append((t, new_time, old_time, diff, new.pricing_error_test["df"]))
        print(f"N={assets} T={t} ({missing:.0%} blank): fama_macbeth {new_time:.2f} s (eigendecomposition route "
              f"{old_time:.2f} s, ratio {old_time / new_time:.1f}x); test df {rows[-1][4]}; "
              f"max relative difference of the statistics {diff:.1e}", flush=True)
    ts = np.log([r[0] for r in rows])
    for label, col in (("hedgekit", 1), ("eigendecomposition route", 2)):
        slope = np.polyfit(ts, np.log([r[col] for r in rows]), 1)[0]
        print(f"exponent of time in T, {label}: {slope:.2f}" + (" (goal <= 1.1)" if col == 1 else ""))


if __name__ == "__main__":
    main()
