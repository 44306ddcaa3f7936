"""A real-data case for an end-to-end run, built only from open data that Python packages ship.

Sources (no invented numbers; every series below is read from a bundled file or derived from
one by the formula written beside it):

- ``arch.data.frenchdata``: monthly market excess return (Mkt-RF), size (SMB) and value (HML)
  factors and the one-month bill return (RF), in percent, 1926-07 to 2018-11.
- ``arch.data.default``: monthly Moody's AAA and BAA corporate bond yields, percent,
  1919-01 to 2018-12.
- ``linearmodels.datasets.french``: monthly returns of 12 industry and 9 size/value portfolios
  and RF, 1949-01 to 2017-03, shipped in decimals and written in decimals.

Files keep their sources' units, as a user receives them: states and instruments in percent,
assets in decimals; the config says so per file (``[data] units = { states = "percent",
instruments = "percent", assets = "decimal" }``).

State variables (percent in the file):
``mkt`` = Mkt-RF; ``term`` = AAA - 12 x RF, a term-spread PROXY (no Treasury long yield ships
in these packages, so a long corporate yield stands in for the long rate); ``def`` = BAA - AAA;
``rf`` = 12 x RF, the bill return annualised by simple multiplication. No dividend yield ships
in these packages, so the case runs without ``dy``: ``[states] order`` lists the variables used.

Hedge instruments (percent excess returns per unit notional): ``index_future`` = Mkt-RF;
``size_basket`` = SMB; ``value_basket`` = HML (both are long-short portfolios, already
excess returns); ``aaa_bond`` = -D x change(AAA) + AAA/12 - RF with D = 8 (a duration
approximation of an 8-year-duration high-grade bond's excess return, derived from the real
yield); ``credit_spread`` = -D x change(BAA - AAA) + (BAA - AAA)/12 with D = 8 (long BAA,
short AAA, duration-matched: a derived credit-spread position). The contract sizes, prices and
costs in the instrument sheet and the book's weights and NAV are the case's assumptions, not
data; they are written as a user would set them.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

INDUSTRIES = ["NoDur", "Durbl", "Manuf", "Enrgy", "Chems", "BusEq", "Telcm", "Utils", "Shops",
              "Hlth", "Money", "Other"]
SIZE_VALUE = ["S1V1", "S1V3", "S1V5", "S3V1", "S3V3", "S3V5", "S5V1", "S5V3", "S5V5"]
ORDER = ["mkt", "term", "def", "rf"]
DURATION = 8.0
NAV = 40_000_000

# The book: weights of NAV over the industry portfolios (2 % cash). An assumption of the case.
HOLDINGS = {"NoDur": 0.12, "Durbl": 0.04, "Manuf": 0.12, "Enrgy": 0.08, "Chems": 0.06,
            "BusEq": 0.16, "Telcm": 0.05, "Utils": 0.07, "Shops": 0.09, "Hlth": 0.10,
            "Money": 0.09}

# instrument -> (multiplier, price, cost_bps, min_weight, max_weight). Assumptions of the case.
SHEET = {
    "index_future": (50, 2500.0, 0.5, -1.5, 1.5),
    "size_basket": (1000, 100.0, 5.0, -0.5, 0.5),
    "value_basket": (1000, 100.0, 5.0, -0.5, 0.5),
    "aaa_bond": (1000, 110.0, 1.0, -1.0, 1.0),
    "credit_spread": (10000, 100.0, 3.0, -1.0, 1.0),
}

CONFIG = """\
# Real-data case built by tests/realdata.py from open data bundled with arch and linearmodels.
[data]
states = "states.csv"
assets = "assets.csv"
holdings = "holdings.csv"
instruments = "instruments.csv"
instrument_sheet = "instrument_sheet.csv"
units = { states = "percent", instruments = "percent", assets = "decimal" }

[portfolio]
name = "Industry book (real data)"
nav = 40_000_000
currency = "USD"

[states]
market = "mkt"
order = ["mkt", "term", "def", "rf"]
lags = 1

[exposures]
window = 60
min_obs = 36

[premia]
intercept = true
betas = "full"
nw_lags = "auto"
traded = ["mkt"]

[hedge]
neutralise = ["term", "def"]
tolerance = 0.0
keep = { mkt = [0.90, 1.10] }
max_gross = 3.0

[report]
output = "report"

[store]
enabled = false
"""


def _month_index(values) -> pd.PeriodIndex:
    return pd.PeriodIndex(pd.to_datetime(values), freq="M", name="date")


def french_factors() -> pd.DataFrame:
    """arch's frenchdata (percent). Its index stores yyyymm as nanoseconds since 1970."""
    from arch.data import frenchdata
    raw = frenchdata.load()
    code = raw.index.asi8 if hasattr(raw.index, "asi8") else np.asarray(raw.index.view("i8"))
    code = np.asarray(code) - np.asarray(pd.DatetimeIndex(["1970-01-01"]).asi8)[0]
    idx = pd.PeriodIndex([f"{c // 100}-{c % 100:02d}" for c in code], freq="M", name="date")
    return raw.set_axis(idx).rename(columns={"Mkt-RF": "MktRF"})


def bond_yields() -> pd.DataFrame:
    """arch's default data: Moody's AAA and BAA yields, percent."""
    from arch.data import default
    raw = default.load()
    return raw.set_axis(_month_index(raw.index))[["AAA", "BAA"]]


def portfolios() -> pd.DataFrame:
    """linearmodels' french portfolios in excess of RF, in decimals as shipped."""
    from linearmodels.datasets import french
    raw = french.load()
    data = raw.drop(columns="dates").set_axis(_month_index(raw["dates"]))
    return data[INDUSTRIES + SIZE_VALUE].sub(data["RF"], axis=0)


def series() -> dict[str, pd.DataFrame]:
    """Every frame the case writes (states, instruments in percent; assets in decimals)."""
    ff = french_factors()
    yields = bond_yields()
    both = ff.join(yields, how="inner")
    states = pd.DataFrame({
        "mkt": both["MktRF"],
        "term": both["AAA"] - 12.0 * both["RF"],
        "def": both["BAA"] - both["AAA"],
        "rf": 12.0 * both["RF"],
    })[ORDER]
    spread = both["BAA"] - both["AAA"]
    instruments = pd.DataFrame({
        "index_future": both["MktRF"],
        "size_basket": both["SMB"],
        "value_basket": both["HML"],
        "aaa_bond": -DURATION * both["AAA"].diff() + both["AAA"] / 12.0 - both["RF"],
        "credit_spread": -DURATION * spread.diff() + spread / 12.0,
    })
    return {"states": states, "instruments": instruments, "assets": portfolios()}


def _write_wide(frame: pd.DataFrame, path: Path) -> None:
    out = frame.copy()
    out.index = out.index.strftime("%Y-%m")
    out.index.name = "date"
    out.to_csv(path, float_format="%.10g")


def build(folder: Path) -> Path:
    """Write the CSV files and the TOML config of the case into ``folder``; return the config."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    frames = series()
    for name, frame in frames.items():
        _write_wide(frame, folder / f"{name}.csv")
    pd.Series(HOLDINGS, name="weight").rename_axis("asset").to_csv(folder / "holdings.csv")
    sheet = pd.DataFrame.from_dict(SHEET, orient="index",
                                   columns=["multiplier", "price", "cost_bps", "min_weight", "max_weight"])
    sheet.rename_axis("instrument").to_csv(folder / "instrument_sheet.csv")
    config = folder / "realdata.toml"
    config.write_text(CONFIG)
    return config


if __name__ == "__main__":  # pragma: no cover - a convenience for reading the case by hand
    import sys
    print(build(Path(sys.argv[1] if len(sys.argv) > 1 else "realdata_case")))
