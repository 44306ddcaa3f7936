"""Many books: `hedgekit batch` against one `hedgekit run` per book, measured in the same run.

Two cases (issue 15):
- ``demo``: N books (default 50) on the demo universe, each with its own holdings drawn
  from the demo's 25 baskets and its own NAV;
- ``wide``: 10 books on an invented 5,000-asset universe (the demo's states and
  instruments, asset returns simulated from the demo's factors with known betas).

Both sides write their reports and skip the run store; the walk-forward is included unless
``--no-backtest``. Prints wall times and the ratio separate / batch.
Run: python benchmarks/bench_batch.py [--books 50] [--case demo|wide|both] [--no-backtest]
"""

from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_portfolios"


def make_books(folder: Path, n: int, assets: list[str], seed: int = 0) -> list[Path]:
    rng = np.random.default_rng(seed)
    text = (DEMO / "larkspur.toml").read_text()
    paths = []
    for i in range(n):
        held = rng.choice(assets, size=min(12, len(assets)), replace=False)
        w = rng.dirichlet(np.ones(len(held))) * rng.uniform(0.9, 1.0)
        pd.DataFrame({"asset": held, "weight": np.round(w, 6)}).to_csv(folder / f"holdings_{i}.csv", index=False)
        body = text.replace('name = "Larkspur Balanced Equity Fund"', f'name = "Book {i:03d}"')
        body = body.replace('holdings = "holdings.csv"', f'holdings = "holdings_{i}.csv"')
        body = body.replace('portfolio_returns = "portfolio_returns.csv"\n', "")
        body = body.replace("nav = 250_000_000", f"nav = {int(rng.uniform(1e8, 1e9))}")
        body = body.replace('output = "hedgekit_output"', f'output = "out/book_{i:03d}"')
        body = body.replace("[store]", "[store]\nenabled = false") if "[store]" in body else body + \
            "\n[store]\nenabled = false\n"
        p = folder / f"book_{i:03d}.toml"
        p.write_text(body)
        paths.append(p)
    return paths


def wide_universe(folder: Path, n_assets: int = 5000, seed: int = 1) -> list[str]:
    """Replace the demo's 25 assets by n_assets simulated from the demo's factors (invented data)."""
    from hedgekit import pipeline
    from hedgekit.config import load_config
    fs = pipeline.factor_set(load_config(folder / "larkspur.toml"),
                             __import__("hedgekit").load_dataset(load_config(folder / "larkspur.toml")))
    f = fs.factors.to_numpy()
    rng = np.random.default_rng(seed)
    b = rng.normal(0, 0.3, (f.shape[1], n_assets))
    b[0] += 1.0
    r = (f - f.mean(0)) @ b + 0.005 + rng.normal(0, 0.04, (len(f), n_assets))
    names = [f"a{j:05d}" for j in range(n_assets)]
    frame = pd.DataFrame(r, index=fs.factors.index.astype(str), columns=names)
    frame.index.name = "date"
    frame.to_csv(folder / "assets.csv", float_format="%.6g")
    return names


def timed(cmd: list[str], cwd: Path) -> float:
    t0 = time.perf_counter()
    subprocess.run(cmd, cwd=cwd, check=False, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return time.perf_counter() - t0


def case(name: str, n_books: int, backtest: bool) -> None:
    folder = Path(tempfile.mkdtemp(prefix=f"hk_batch_{name}_"))
    try:
        shutil.copytree(DEMO, folder, dirs_exist_ok=True)
        assets = wide_universe(folder) if name == "wide" else list(
            pd.read_csv(folder / "assets.csv", nrows=0).columns[1:])
        paths = make_books(folder, n_books, assets)
        extra = [] if backtest else ["--no-backtest"]
        exe = [sys.executable, "-m", "hedgekit.cli"]
        t_sep = sum(timed([*exe, "run", str(p), "--no-store", *extra], folder) for p in paths)
        t_batch = timed([*exe, "batch", *map(str, paths), "--no-store", *extra], folder)
        print(f"{name}: {n_books} books ({len(assets)} assets){' with walk-forward' if backtest else ''}: "
              f"separate runs {t_sep:.1f} s, batch {t_batch:.1f} s, ratio {t_sep / t_batch:.1f}x")
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--books", type=int, default=50)
    ap.add_argument("--case", choices=["demo", "wide", "both"], default="both")
    ap.add_argument("--no-backtest", action="store_true")
    args = ap.parse_args()
    if args.case in ("demo", "both"):
        case("demo", args.books, not args.no_backtest)
    if args.case in ("wide", "both"):
        case("wide", 10, not args.no_backtest)


if __name__ == "__main__":
    main()
