"""Overlay optimiser speed: first build against re-solves of the compiled program.

Targets (issue 5): a re-solve after the first build under 10 ms median for 8 instruments
and 6 factors; a 200-instrument problem under 1 s.  Prints the ratio of re-solve to
first-build time, both measured in this run.  Run: python benchmarks/bench_hedge.py
"""

from __future__ import annotations

import statistics
import time

import numpy as np
import pandas as pd

from hedgekit.hedge import HedgeSpec, OverlayProblem, design_overlay, instrument_covariance

FACTORS = ["mkt", "dy", "term", "def", "rf", "extra"]


def case(n_inst: int, seed: int = 0):
    rng = np.random.default_rng(seed)
    names = [f"inst_{j}" for j in range(n_inst)]
    betas = pd.DataFrame(rng.normal(0, 0.4, (n_inst, len(FACTORS))), index=names,
                         columns=FACTORS)
    cov = instrument_covariance(pd.DataFrame(rng.normal(0, 0.02, (max(240, 2 * n_inst),
                                                                  n_inst)), columns=names))
    book = pd.Series(rng.normal(0.2, 0.3, len(FACTORS)), index=FACTORS)
    book["mkt"] = 1.0
    sheet = pd.DataFrame({"multiplier": 1000.0, "price": 100.0,
                          "cost_bps": rng.uniform(0.5, 5, n_inst),
                          "min_weight": -2.0, "max_weight": 2.0}, index=names)
    spec = HedgeSpec.from_sheet(sheet, neutralise=("term", "def", "rf"),
                                keep={"mkt": (0.9, 1.1)}, max_gross=10.0)
    return betas, cov, book, sheet, spec


def run(n_inst: int, repeats: int) -> None:
    betas, cov, book, sheet, spec = case(n_inst)
    rng = np.random.default_rng(1)
    t0 = time.perf_counter()
    problem = OverlayProblem.for_inputs(betas.index, spec, sheet)
    first = design_overlay(book, betas, cov, sheet, nav=1e8, spec=spec, problem=problem)
    build = time.perf_counter() - t0
    assert first.status == "optimal", first.message
    full, core = [], []
    for _ in range(repeats):
        b2 = betas + rng.normal(0, 0.01, betas.shape)
        t1 = time.perf_counter()
        res = design_overlay(book, b2, cov, sheet, nav=1e8, spec=spec, problem=problem)
        full.append(time.perf_counter() - t1)
        assert res.status == "optimal"
        # the program alone: new Parameter values already set, solve again
        t2 = time.perf_counter()
        outcome, _ = problem.solve_main()
        core.append(time.perf_counter() - t2)
        assert outcome == "optimal"
    rebuild = []
    for _ in range(max(3, repeats // 10)):
        t3 = time.perf_counter()
        design_overlay(book, betas, cov, sheet, nav=1e8, spec=spec,
                       problem=OverlayProblem.for_inputs(betas.index, spec, sheet))
        rebuild.append(time.perf_counter() - t3)
    med_full, med_core = statistics.median(full), statistics.median(core)
    med_rebuild = statistics.median(rebuild)
    print(f"{n_inst:4d} instruments x {len(FACTORS)} factors: first build + solve "
          f"{build * 1e3:8.1f} ms; re-solve median {med_core * 1e3:7.2f} ms (program), "
          f"{med_full * 1e3:7.2f} ms (design_overlay with ticket)")
    print(f"      ratio re-solve / first build: program {med_core / build:.3f}, "
          f"design_overlay {med_full / build:.3f}")
    print(f"      reference: rebuilding the program every time {med_rebuild * 1e3:8.1f} ms; "
          f"re-solve / rebuild {med_full / med_rebuild:.3f}")


if __name__ == "__main__":
    run(8, repeats=50)
    run(200, repeats=5)
