"""Configuration schema: defaults, validation, nearest-key suggestions."""

from __future__ import annotations

from pathlib import Path

import pytest

from hedgekit.config import SCHEMA, load_config, parse_config
from hedgekit.errors import InputError

from .helpers import DEMO

MINIMAL = """
[data]
states = "states.csv"
[portfolio]
nav = 1e6
"""


def test_defaults_filled_and_paths_relative(tmp_path: Path):
    cfg = parse_config(MINIMAL, path=tmp_path / "c.toml", base=tmp_path)
    assert cfg["data"]["states"] == tmp_path / "states.csv"
    assert cfg["exposures"]["window"] == 60
    assert cfg["exposures"]["min_obs"] == 36
    assert cfg["premia"]["intercept"] is True
    assert cfg["premia"]["nw_lags"] == "auto"
    assert cfg["states"]["lags"] == 1
    assert cfg["hedge"]["tolerance"] == 0.0
    assert cfg["report"]["output"] == tmp_path / "hedgekit_output"
    for section, keys in SCHEMA.items():
        assert set(cfg[section]) == set(keys)


def test_demo_config_round_trip():
    cfg = load_config(DEMO / "larkspur.toml")
    assert cfg["hedge"]["neutralise"] == ("term", "def")
    assert cfg["hedge"]["keep"]["mkt"] == (0.95, 1.05)
    assert cfg["portfolio"]["nav"] == 250_000_000
    d = cfg.to_dict()
    assert d["states"]["order"] == ["mkt", "dy", "term", "def", "rf"]
    assert d["hedge"]["keep"] == {"mkt": [0.95, 1.05]}
    again = parse_config(cfg.text, path=cfg.path, base=cfg.base)
    assert again.to_dict() == d


@pytest.mark.parametrize("text, needle", [
    ("[hedge]\nneutralize = ['term']\n", "did you mean 'neutralise'"),
    ("[exposure]\nwindow = 60\n", "did you mean [exposures]"),
    ("[premia]\nnw_lag = 3\n", "did you mean 'nw_lags'"),
    ("[premia]\nbetas = 'rolled'\n", "did you mean 'rolling'"),
    ("[portfolio]\nnav = -5\n", "must be positive"),
    ("[portfolio]\nnav = 0\n", "must be positive"),
    ("[exposures]\nwindow = 'monthly'\n", "neither a whole number"),
    ("[exposures]\nwindow = 20\nmin_obs = 36\n", "shorter than min_obs"),
    ("[hedge]\nkeep = { mkt = [1.1, 0.9] }\n", "low 1.1 above high 0.9"),
    ("[hedge]\nmax_gross = 'big'\n", "is not a number"),
    ("[stress]\nscenarios = [{ name = 'x', shocks = { term = 0.01 }, readng = 'comove' }]\n", "did you mean 'reading'"),
])
def test_bad_config_names_the_key(text: str, needle: str):
    with pytest.raises(InputError) as err:
        parse_config(text, path=Path("book.toml"))
    assert needle in str(err.value)
    assert "book.toml" in str(err.value)


def test_toml_syntax_error_has_line_number():
    with pytest.raises(InputError) as err:
        parse_config("[data]\nstates = states.csv\n", path=Path("book.toml"))
    msg = str(err.value)
    assert "TOML syntax error" in msg and "line 2" in msg


def test_missing_config_file(tmp_path: Path):
    with pytest.raises(InputError, match="configuration file not found"):
        load_config(tmp_path / "nope.toml")
