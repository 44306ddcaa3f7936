"""[data] units per file and per column (issue 11 item 2): every reader honours it, the factors
file included, and no message suggests a setting that is already set."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from hedgekit.cli import main
from hedgekit.config import load_config
from hedgekit.errors import InputError
from hedgekit.inputs import load_dataset

from .helpers import demo_copy, french_excess
from .test_inputs import _hashes, _set_data


def _scale(path: Path, columns: list[str], factor: float = 100.0) -> None:
    frame = pd.read_csv(path, dtype={"date": str})
    frame[columns] *= factor
    frame.to_csv(path, index=False)


def _validate(cfg: Path, capsys) -> tuple[int, str]:
    before = _hashes(cfg.parent)
    code = main(["validate", str(cfg)])
    err = capsys.readouterr().err
    assert _hashes(cfg.parent) == before, "inputs must never be modified"
    assert "Traceback" not in err
    return code, err


def test_states_columns_in_percent(tmp_path):
    """Yields in percent, the market in decimals, in one states file: converted per column."""
    cfg = demo_copy(tmp_path / "a")
    _scale(cfg.parent / "states.csv", ["dy", "def", "rf"])
    _set_data(cfg, 'units = { states = { dy = "percent", def = "percent", rf = "percent" }, assets = "decimal" }')
    mixed = load_dataset(load_config(cfg))
    plain = load_dataset(load_config(demo_copy(tmp_path / "b")))
    np.testing.assert_allclose(mixed.states.to_numpy(), plain.states.to_numpy(), rtol=1e-12, equal_nan=True)
    np.testing.assert_allclose(mixed.assets.to_numpy(), plain.assets.to_numpy(), rtol=0, equal_nan=True)


def test_percent_yields_without_the_setting(tmp_path, capsys):
    cfg = demo_copy(tmp_path)
    _scale(cfg.parent / "states.csv", ["def"])
    code, err = _validate(cfg, capsys)
    assert code == 2 and len(err.strip().splitlines()) == 1
    for needle in ("states.csv", "row ", "column 'def'", "percent", 'units = { states = { def = "percent" } }'):
        assert needle in err, (needle, err)


def _french_book(folder: Path, factor_scale: float) -> Path:
    """linearmodels' bundled French data (open data): nine size-value portfolios as assets and the
    market, size and value factors as a factors file, the factors written in percent as the
    French data library publishes them when ``factor_scale`` is 100."""
    folder.mkdir(parents=True, exist_ok=True)
    assets, factors = french_excess(["S1M1", "S1M3", "S1M5", "S3M1", "S3M3", "S3M5", "S5M1", "S5M3", "S5M5"])
    a = assets.copy()
    a.index = a.index.astype(str)
    a.to_csv(folder / "assets.csv", index_label="date")
    f = factors * factor_scale
    f.index = f.index.astype(str)
    f.to_csv(folder / "factors.csv", index_label="date")
    (folder / "holdings.csv").write_text("asset,weight\n" + "".join(f"{c},{1 / 9}\n" for c in assets.columns))
    cfg = folder / "book.toml"
    cfg.write_text('[data]\nassets = "assets.csv"\nfactors = "factors.csv"\nholdings = "holdings.csv"\n'
                   '[portfolio]\nnav = 1e8\n'
                   '[states]\nmarket = "MktRF"\n')
    return cfg


def test_factors_file_honours_units(tmp_path, capsys):
    """Real data: the factors in percent with units = { factors = "percent" } equal the decimal ones."""
    pct = _french_book(tmp_path / "pct", 100.0)
    _set_data(pct, 'units = { factors = "percent" }')
    dec = _french_book(tmp_path / "dec", 1.0)
    a, b = load_dataset(load_config(pct)), load_dataset(load_config(dec))
    np.testing.assert_allclose(a.factors.to_numpy(), b.factors.to_numpy(), rtol=1e-12)
    assert main(["premia", str(pct), "--json"]) == 0, capsys.readouterr().err
    capsys.readouterr()


def test_factors_in_percent_without_the_setting(tmp_path, capsys):
    cfg = _french_book(tmp_path, 100.0)
    code, err = _validate(cfg, capsys)
    assert code == 2
    assert "factors.csv" in err and "column 'MktRF'" in err and "percent" in err
    assert 'units = { factors = { MktRF = "percent" } }' in err


def test_no_message_suggests_a_setting_already_set(tmp_path, capsys):
    """A column declared in percent whose values are still too large (basis points): the fix does
    not ask for units = "percent" again."""
    cfg = demo_copy(tmp_path)
    _scale(cfg.parent / "assets.csv", ["banks"], 10_000.0)
    _set_data(cfg, 'units = { assets = { banks = "percent" } }')
    code, err = _validate(cfg, capsys)
    assert code == 2 and "column 'banks'" in err
    assert "declared in percent already" in err
    assert 'banks = "percent"' not in err and 'units = "percent"' not in err


def test_holdings_and_positions_in_percent(tmp_path):
    cfg = demo_copy(tmp_path)
    plain = load_dataset(load_config(cfg)).holdings
    frame = pd.read_csv(cfg.parent / "holdings.csv")
    frame["weight"] *= 100
    frame.to_csv(cfg.parent / "holdings.csv", index=False)
    (cfg.parent / "cur.csv").write_text("instrument,weight\nrate_future_2y,-40\n")
    _set_data(cfg, 'units = { holdings = "percent", current_positions = "percent" }\ncurrent_positions = "cur.csv"')
    data = load_dataset(load_config(cfg))
    np.testing.assert_allclose(data.holdings.to_numpy(), plain.to_numpy(), rtol=1e-12)
    assert data.current_positions["rate_future_2y"] == pytest.approx(-0.4)


def test_units_naming_a_missing_column(tmp_path):
    cfg = demo_copy(tmp_path)
    _set_data(cfg, 'units = { states = { dividend = "percent" } }')
    with pytest.raises(InputError) as err:
        load_dataset(load_config(cfg))
    text = str(err.value)
    assert "larkspur.toml" in text and "units.states" in text and "'dividend'" in text
