"""Frequencies: daily files stay daily, only path keys are files, quarterly files need the setting,
monthly files compound into quarterly runs (issues 11 and 14)."""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
import pandas as pd

from hedgekit.cli import main
from hedgekit.config import load_config
from hedgekit.inputs import load_dataset

from .helpers import demo_copy


def _hashes(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in folder.iterdir() if p.is_file()}


def _set_data(cfg: Path, lines: str) -> None:
    text = cfg.read_text()
    cfg.write_text(text.replace("[data]\n", "[data]\n" + lines + "\n", 1))


def test_a_folder_named_like_a_value_is_not_a_file(tmp_path, capsys):
    """Issue 11 item 1: ``frequency = "monthly"`` beside a folder named ``monthly`` runs."""
    cfg = demo_copy(tmp_path)
    (cfg.parent / "monthly").mkdir()
    (cfg.parent / "decimal").mkdir()
    _set_data(cfg, 'frequency = "monthly"\nunits = "decimal"')
    assert main(["validate", str(cfg)]) == 0, capsys.readouterr().err
    data = load_dataset(load_config(cfg))
    assert set(data.hashes) == {"states", "assets", "holdings", "portfolio_returns", "instruments",
                                "instrument_sheet"}


def _daily(folder: Path, days: int = 300) -> Path:
    """A small daily book (business days; simulated numbers, only to exercise the reader)."""
    rng = np.random.default_rng(7)
    dates = pd.bdate_range("2021-01-04", periods=days)
    states = pd.DataFrame({"date": dates.strftime("%Y-%m-%d"), "mkt": rng.normal(0, 0.01, days),
                           "dy": 0.02 + np.cumsum(rng.normal(0, 1e-4, days)),
                           "rf": 0.03 + np.cumsum(rng.normal(0, 1e-4, days))})
    assets = pd.DataFrame({"date": dates.strftime("%Y-%m-%d"), "a": rng.normal(0, 0.012, days),
                           "b": rng.normal(0, 0.015, days)})
    states.to_csv(folder / "states.csv", index=False)
    assets.to_csv(folder / "assets.csv", index=False)
    cfg = folder / "book.toml"
    cfg.write_text('[data]\nstates = "states.csv"\nassets = "assets.csv"\nfrequency = "daily"\n'
                   '[portfolio]\nnav = 1e8\n[states]\nmarket = "mkt"\norder = ["mkt", "dy", "rf"]\n')
    return cfg


def test_daily_dates_stay_daily(tmp_path, capsys):
    """Issue 14 item 5: daily dates are not collapsed to months; annualisation 252 (common practice)."""
    cfg = _daily(tmp_path)
    data = load_dataset(load_config(cfg))
    assert data.frequency == "daily" and data.periods_per_year == 252
    assert data.assets.index.freqstr == "D" and len(data.assets) == 300
    assert str(data.assets.index[0]) == "2021-01-04" and str(data.assets.index[1]) == "2021-01-05"
    assert data.gaps == ()  # weekends and holidays are not gaps
    assert str(data.as_of("2021-02-10").assets.index[-1]) == "2021-02-10"
    assert main(["validate", str(cfg)]) == 0, capsys.readouterr().err


def test_daily_file_in_monthly_run_names_the_setting(tmp_path, capsys):
    cfg = _daily(tmp_path)
    cfg.write_text(cfg.read_text().replace('frequency = "daily"\n', ""))
    before = _hashes(tmp_path)
    assert main(["validate", str(cfg)]) == 2
    err = capsys.readouterr().err
    assert "states.csv" in err and "daily" in err and 'frequency = "daily"' in err
    assert len(err.strip().splitlines()) == 1 and _hashes(tmp_path) == before


def test_month_dates_in_daily_run(tmp_path, capsys):
    cfg = demo_copy(tmp_path)
    _set_data(cfg, 'frequency = "daily"')
    assert main(["validate", str(cfg)]) == 2
    err = capsys.readouterr().err
    assert "row 2" in err and "has no day" in err and 'frequency = "monthly"' in err
