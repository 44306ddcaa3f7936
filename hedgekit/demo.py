"""The invented demo scenario: the Larkspur Balanced Equity Fund.

Everything here is made up: the fund, its 25 industry baskets and its 7 hedge
instruments. Data are simulated from a known process so tests can check that
hedgekit recovers what went in:

1. State vector z_t = [mkt, dy, term, def, rf] follows a VAR(1)
   z_t = c + A z_{t-1} + u_t, u_t ~ N(0, Sigma_u), with monthly persistence of the
   state levels between 0.95 and 0.99 (common practice, from memory).
2. Orthogonal innovations are the population Gram-Schmidt of u_t in that order,
   scaled to the market innovation's standard deviation: u~_t = M u_t with
   M = D L^{-1}, L = chol(Sigma_u), D = L[0, 0] I.
3. Factors f_t = [mkt_t, u~_dy, u~_term, u~_def, u~_rf].  Test-asset and instrument
   excess returns are R_t = b' lambda + b'(f_t - E f) + e_t, so expected returns
   follow the known prices of risk lambda exactly (zero pricing errors).

Run ``python -m hedgekit.demo --out demo_portfolios`` to write the files; the same
seed gives byte-identical files.
"""

from __future__ import annotations

import argparse
import hashlib
import json
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import InputError
from .present.publish import atomic_write_text

SEED = 20261201
START = "1985-12"          # first month of levels; returns start one month later
N_MONTHS = 481             # 1985-12 .. 2025-12
BURN_IN = 300
VARIABLES = ["mkt", "dy", "term", "def", "rf"]

# Unconditional means (decimals, monthly returns; levels as decimals).
MEAN = np.array([0.0060, 0.0300, 0.0150, 0.0100, 0.0350])
# VAR(1) slope matrix: rows are equations, columns lagged variables.
A = np.array([
    #  mkt     dy     term    def     rf
    [0.050, 0.450, 0.250, 0.150, -0.120],   # mkt: predicted by dy, term, def
    [-0.004, 0.985, 0.000, 0.010, 0.000],   # dy
    [0.000, 0.000, 0.955, 0.000, -0.020],   # term
    [-0.002, 0.010, 0.000, 0.970, 0.000],   # def
    [0.002, 0.000, 0.015, -0.010, 0.985],   # rf
])
SD_U = np.array([0.0450, 0.0014, 0.0022, 0.0007, 0.0018])
CORR_U = np.array([
    [1.00, -0.85, 0.05, -0.30, 0.05],
    [-0.85, 1.00, 0.00, 0.30, 0.00],
    [0.05, 0.00, 1.00, 0.15, -0.55],
    [-0.30, 0.30, 0.15, 1.00, -0.10],
    [0.05, 0.00, -0.55, -0.10, 1.00],
])
# Monthly prices of risk per unit of factor (factor sd is 0.045 a month for all).
LAMBDA = {"mkt": float(MEAN[0]), "dy": -0.0010, "term": 0.0030, "def": 0.0040, "rf": -0.0020}

ASSETS = [
    "banks", "insurers", "utilities", "reits", "energy", "materials", "chemicals",
    "autos", "retail", "staples", "media", "software", "semis", "hardware", "telecom",
    "pharma", "biotech", "medtech", "airlines", "transport", "homebuilders",
    "machinery", "defense", "leisure", "food",
]
# Tilts on [dy, term, def, rf] that give each basket a character; noise is added.
TILTS = {
    "banks": [0.1, 0.5, -0.6, -0.2], "insurers": [0.0, 0.4, -0.4, 0.1],
    "utilities": [0.2, -0.1, -0.1, -0.5], "reits": [0.2, 0.2, -0.5, -0.4],
    "homebuilders": [0.1, 0.3, -0.5, -0.5], "software": [-0.3, 0.1, -0.2, 0.2],
    "semis": [-0.2, 0.2, -0.2, 0.1], "staples": [0.1, -0.1, -0.2, -0.1],
    "airlines": [0.0, 0.1, -0.5, 0.0], "energy": [0.2, 0.3, 0.1, 0.3],
}
LATE_START = {"biotech": "1993-01", "semis": "1990-07"}
HOLDINGS = {
    "banks": 0.16, "insurers": 0.10, "reits": 0.09, "homebuilders": 0.08,
    "utilities": 0.07, "energy": 0.07, "materials": 0.06, "software": 0.08,
    "pharma": 0.07, "retail": 0.06, "transport": 0.06, "airlines": 0.05,
    "food": 0.05,
}
FUND = "Larkspur Balanced Equity Fund"
NAV = 250_000_000

# Instruments: betas on [mkt, dy, term, def, rf], residual sd, sheet row.
INSTRUMENTS = {
    "rate_future_2y": ([0.00, 0.00, -0.05, 0.00, -0.14], 0.0015,
                       dict(multiplier=2000, price=102.5, cost_bps=0.5, min_weight=-2.0, max_weight=2.0)),
    "rate_future_10y": ([0.00, 0.02, -0.42, 0.03, -0.30], 0.0040,
                        dict(multiplier=1000, price=111.0, cost_bps=0.8, min_weight=-1.5, max_weight=1.5)),
    "credit_index_ig": ([0.12, 0.00, -0.08, -0.38, -0.05], 0.0030,
                        dict(multiplier=100000, price=100.0, cost_bps=2.0, min_weight=-1.0, max_weight=1.0)),
    "credit_index_hy": ([0.35, 0.05, 0.00, -0.85, 0.00], 0.0080,
                        dict(multiplier=100000, price=100.0, cost_bps=5.0, min_weight=-0.5, max_weight=0.5)),
    "equity_index_future": ([1.00, 0.00, 0.00, 0.00, 0.00], 0.0040,
                            dict(multiplier=50, price=4800.0, cost_bps=0.6, min_weight=-1.0, max_weight=0.5)),
    "value_basket": ([0.05, 0.35, 0.05, 0.10, 0.00], 0.0150,
                     dict(multiplier=1, price=100.0, cost_bps=8.0, min_weight=-0.25, max_weight=0.25)),
    "quality_basket": ([-0.10, -0.05, 0.00, -0.25, 0.00], 0.0120,
                       dict(multiplier=1, price=100.0, cost_bps=8.0, min_weight=None, max_weight=None)),
}


def population_transform(sigma_u: np.ndarray) -> np.ndarray:
    """M = D L^{-1}: Gram-Schmidt in variable order, scaled to the first series' sd."""
    chol = np.linalg.cholesky(sigma_u)
    return chol[0, 0] * np.linalg.inv(chol)


def simulate(seed: int = SEED) -> dict:
    """Simulate the scenario; returns frames and the true parameters."""
    rng = np.random.default_rng(seed)
    k = len(VARIABLES)
    sigma_u = np.outer(SD_U, SD_U) * CORR_U
    c = (np.eye(k) - A) @ MEAN
    chol = np.linalg.cholesky(sigma_u)
    total = BURN_IN + N_MONTHS
    u = rng.standard_normal((total, k)) @ chol.T
    z = np.empty((total, k))
    z[0] = MEAN
    for t in range(1, total):  # the simulator's own recursion; not a hot path
        z[t] = c + A @ z[t - 1] + u[t]
    z, u = z[BURN_IN:], u[BURN_IN:]
    dates = pd.period_range(START, periods=N_MONTHS, freq="M")
    m = population_transform(sigma_u)
    u_orth = u @ m.T
    factors = np.column_stack([z[:, 0], u_orth[:, 1:]])
    factor_mean = np.concatenate([[MEAN[0]], np.zeros(k - 1)])
    lam = np.array([LAMBDA[v] for v in VARIABLES])

    # Test assets.
    n = len(ASSETS)
    betas = np.empty((n, k))
    betas[:, 0] = rng.uniform(0.7, 1.3, n)
    betas[:, 1:] = rng.normal(0.0, 0.15, (n, k - 1))
    for i, name in enumerate(ASSETS):
        if name in TILTS:
            betas[i, 1:] += TILTS[name]
    resid_sd = rng.uniform(0.015, 0.035, n)
    eps = rng.standard_normal((N_MONTHS, n)) * resid_sd
    asset_ret = betas @ lam + (factors - factor_mean) @ betas.T + eps
    asset_ret[0] = np.nan  # the first month has no lagged state: blank on purpose
    assets = pd.DataFrame(asset_ret, index=dates, columns=ASSETS)
    for name, first in LATE_START.items():
        assets.loc[assets.index < pd.Period(first, "M"), name] = np.nan
    blank_rows = rng.choice(np.arange(60, N_MONTHS), 3, replace=False)
    assets.iloc[blank_rows, ASSETS.index("media")] = np.nan
    assets.iloc[0] = np.nan

    # Instruments.
    inames = list(INSTRUMENTS)
    ibetas = np.array([INSTRUMENTS[i][0] for i in inames])
    isd = np.array([INSTRUMENTS[i][1] for i in inames])
    ieps = rng.standard_normal((N_MONTHS, len(inames))) * isd
    inst_ret = ibetas @ lam + (factors - factor_mean) @ ibetas.T + ieps
    instruments = pd.DataFrame(inst_ret, index=dates, columns=inames)
    instruments.iloc[0] = np.nan

    weights = pd.Series(HOLDINGS, dtype=float)
    book_ret = assets[weights.index].fillna(0.0) @ weights
    fund_ret = book_ret + rng.standard_normal(N_MONTHS) * 0.0015 - 0.0001
    fund_ret.iloc[0] = np.nan
    portfolio = pd.DataFrame({"larkspur_fund": fund_ret}, index=dates)

    states = pd.DataFrame(z, index=dates, columns=VARIABLES)
    states.iloc[0, 0] = np.nan  # no return for the first month: levels only
    sheet = pd.DataFrame([{"instrument": i, **INSTRUMENTS[i][2]} for i in inames])
    book_beta = weights.values @ betas[[ASSETS.index(a) for a in weights.index]]

    truth = {
        "seed": seed,
        "description": "True parameters of the invented Larkspur scenario (monthly).",
        "variables": VARIABLES,
        "factors": VARIABLES,
        "var": {
            "intercept": dict(zip(VARIABLES, c.tolist(), strict=True)),
            "coef": {eq: {f"{v}.L1": float(A[i, j]) for j, v in enumerate(VARIABLES)}
                     for i, eq in enumerate(VARIABLES)},
            "mean": dict(zip(VARIABLES, MEAN.tolist(), strict=True)),
            "sigma_u": {r: dict(zip(VARIABLES, sigma_u[i].tolist(), strict=True))
                        for i, r in enumerate(VARIABLES)},
        },
        "transform": {r: dict(zip(VARIABLES, m[i].tolist(), strict=True)) for i, r in enumerate(VARIABLES)},
        "factor_sd": float(chol[0, 0]),
        "prices_of_risk": LAMBDA,
        "asset_betas": {a: dict(zip(VARIABLES, betas[i].tolist(), strict=True)) for i, a in enumerate(ASSETS)},
        "asset_resid_sd": dict(zip(ASSETS, resid_sd.tolist(), strict=True)),
        "instrument_betas": {i: dict(zip(VARIABLES, ibetas[j].tolist(), strict=True)) for j, i in enumerate(inames)},
        "instrument_resid_sd": dict(zip(inames, isd.tolist(), strict=True)),
        "holdings": HOLDINGS,
        "book_betas": dict(zip(VARIABLES, book_beta.tolist(), strict=True)),
        "fund": FUND,
        "nav": NAV,
    }
    return {"states": states, "assets": assets, "instruments": instruments,
            "portfolio_returns": portfolio, "holdings": weights, "sheet": sheet, "truth": truth}


CONFIG = """\
# hedgekit configuration for the invented demo scenario (Larkspur Balanced Equity Fund).
# Paths are relative to this file.

[data]
states = "states.csv"
assets = "assets.csv"
holdings = "holdings.csv"
portfolio_returns = "portfolio_returns.csv"
instruments = "instruments.csv"
instrument_sheet = "instrument_sheet.csv"

[portfolio]
name = "Larkspur Balanced Equity Fund"
nav = 250_000_000
currency = "USD"

[states]
market = "mkt"
order = ["mkt", "dy", "term", "def", "rf"]
lags = 1

[exposures]
window = 60
min_obs = 36

[premia]
intercept = true
betas = "full"
nw_lags = "auto"

[hedge]
neutralise = ["term", "def"]
tolerance = 0.0
keep = { mkt = [0.95, 1.05] }
max_gross = 1.5

[report]
output = "hedgekit_output"
"""


MARKER = ".hedgekit-demo.json"   # what an earlier `hedgekit demo` wrote here, with each file's SHA-256


def _csv_text(frame: pd.DataFrame, index: bool = True) -> str:
    out = frame.copy()
    if index:
        out.index = out.index.astype(str)
        out.index.name = "date"
    return out.to_csv(index=index, lineterminator="\n", float_format="%.10g")


def scenario_files(seed: int = SEED) -> dict[str, str]:
    """The scenario's files as text: CSVs, truth.json and the config (nothing is written)."""
    sim = simulate(seed)
    return {
        "states.csv": _csv_text(sim["states"]),
        "assets.csv": _csv_text(sim["assets"]),
        "instruments.csv": _csv_text(sim["instruments"]),
        "portfolio_returns.csv": _csv_text(sim["portfolio_returns"]),
        "holdings.csv": sim["holdings"].rename_axis("asset").rename("weight").to_frame().to_csv(
            lineterminator="\n", float_format="%.10g"),
        "instrument_sheet.csv": _csv_text(sim["sheet"], index=False),
        "truth.json": json.dumps(sim["truth"], indent=2) + "\n",
        "larkspur.toml": CONFIG,
    }


def _sha(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def _check_folder(out: Path, files: dict[str, str]) -> None:
    """Refuse a folder that holds anything the demo did not write (the user's own files are never overwritten).

    A folder is safe when it is new or empty, or when it is an earlier demo folder (it has
    :data:`MARKER`) and every file about to be written is either absent, already identical,
    or unchanged since the demo wrote it.
    """
    if out.exists() and not out.is_dir():
        raise InputError("the demo folder exists and is a file.", file=str(out), fix="pass --dir a folder name.")
    if not out.exists() or not any(out.iterdir()):
        return
    marker = out / MARKER
    if not marker.is_file():
        raise InputError("the folder exists and is not an earlier demo folder; the demo writes states.csv, "
                         "holdings.csv, larkspur.toml and more and would overwrite files of yours.",
                         file=str(out), fix="pass --dir a new or empty folder (e.g. --dir hedgekit_demo).")
    try:
        written = json.loads(marker.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        written = {}
    for name, text in files.items():
        target = out / name
        if not target.exists():
            continue
        current = _sha(target.read_bytes())
        if current not in (_sha(text.encode("utf-8")), written.get(name)):
            raise InputError("this file was changed since the demo wrote it; the demo does not overwrite it.",
                             file=str(target), fix="move the file away or pass --dir a new folder.")


def write_scenario(out: str | Path, seed: int = SEED) -> Path:
    """Write the scenario's CSVs, truth.json and config into ``out``; returns the config path.

    Never overwrites a file the demo did not write (see :func:`_check_folder`); every file
    is written atomically, so an interrupted run leaves no half-written file.
    """
    out = Path(out)
    files = scenario_files(seed)
    _check_folder(out, files)
    out.mkdir(parents=True, exist_ok=True)
    for name, text in files.items():
        atomic_write_text(out / name, text)
    atomic_write_text(out / MARKER, json.dumps({n: _sha(t.encode("utf-8")) for n, t in files.items()},
                                               indent=1, sort_keys=True) + "\n")
    return out / "larkspur.toml"


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description="Write the invented demo scenario.")
    parser.add_argument("--out", default="demo_portfolios")
    parser.add_argument("--seed", type=int, default=SEED)
    args = parser.parse_args(argv)
    print(write_scenario(args.out, args.seed))


if __name__ == "__main__":
    main()
