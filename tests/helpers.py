"""Shared test helpers (not a conftest: imported explicitly)."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "demo_portfolios"


def demo_copy(tmp_path: Path) -> Path:
    """A private copy of the demo scenario; returns its config path."""
    target = tmp_path / "demo"
    shutil.copytree(DEMO, target)
    return target / "larkspur.toml"


def truth() -> dict:
    return json.loads((DEMO / "truth.json").read_text())


def read_demo(name: str) -> pd.DataFrame:
    frame = pd.read_csv(DEMO / f"{name}.csv")
    frame.index = pd.PeriodIndex(frame.pop("date"), freq="M", name="date")
    return frame


FRENCH_INDUSTRIES = ["NoDur", "Durbl", "Manuf", "Enrgy", "Chems", "BusEq", "Telcm", "Utils", "Shops",
                     "Hlth", "Money", "Other"]
FRENCH_SIZE_VALUE = ["S1V1", "S1V3", "S1V5", "S3V1", "S3V3", "S3V5", "S5V1", "S5V3", "S5V5"]
FRENCH_FACTORS = ["MktRF", "SMB", "HML"]


def french_excess(columns: list[str]) -> tuple[pd.DataFrame, pd.DataFrame]:
    """linearmodels' bundled monthly `french` data: the given portfolios in excess of RF, and
    the market, size and value factors, on a monthly PeriodIndex."""
    from linearmodels.datasets import french
    raw = french.load()
    idx = pd.PeriodIndex(pd.to_datetime(raw["dates"]), freq="M", name="date")
    data = raw.drop(columns="dates").set_index(idx)
    return data[columns].sub(data["RF"], axis=0), data[FRENCH_FACTORS]


def exec_in(folder: Path, code: str, label: str) -> dict:
    """Run documentation code with ``folder`` as the working directory; returns its namespace."""
    import os
    cwd = os.getcwd()
    os.chdir(folder)
    try:
        scope: dict = {}
        exec(compile(code, label, "exec"), scope)  # noqa: S102 - our own documentation
    finally:
        os.chdir(cwd)
    return scope
