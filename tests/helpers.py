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
