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
    assert cfg["intervals"]["confidence"] == 0.95
    assert cfg["backtest"]["min_periods"] == 120
    assert cfg["data"]["accept_extreme"] == {}
    for section, keys in SCHEMA.items():
        assert set(cfg.sections[section]) == set(keys)


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
    ("[portfolio]\nnav = 1e30\n", "beyond any plausible fund size"),
    ("[portfolio]\nnav = inf\n", "not a finite number"),
    ("[portfolio]\nnav = nan\n", "not a finite number"),
    ("[hedge]\nconfidence = 0.8\n", "[hedge] confidence has moved to [intervals] confidence"),
    ("[backtest]\nmin_months = 60\n", "[backtest] min_months has moved to [backtest] min_periods"),
    ("[intervals]\nconfidence = 1.0\n", "must be below 1"),
    ("[intervals]\nconfidence = 0.4\n", "below the smallest allowed value 0.5"),
    ("[intervals]\nconfidense = 0.9\n", "did you mean 'confidence'"),
    ("[data]\nfrequency = 'dayly'\n", "did you mean 'daily'"),
    ("[data]\nunits = 'percnt'\n", "did you mean 'percent'"),
    ("[data]\nunits = { asets = 'percent' }\n", "did you mean 'assets'"),
    ("[data]\nunits = { states = { dy = 'pct' } }\n", "units.states.dy"),
    ("[data]\naccept_extreme = { assets = 'biotech' }\n", "not a list of column names"),
    ("[data]\naccept_extreme = { asset = ['biotech'] }\n", "did you mean 'assets'"),
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


def test_one_confidence_level_and_min_periods(tmp_path: Path):
    """[intervals] confidence is the one level; the old places are not readable at all
    (common practice: one source of truth)."""
    cfg = parse_config(MINIMAL + "[intervals]\nconfidence = 0.8\n[backtest]\nmin_periods = 60\n",
                       path=tmp_path / "c.toml", base=tmp_path)
    assert cfg["intervals"]["confidence"] == 0.8
    assert "confidence" not in cfg["hedge"] and "min_months" not in cfg["backtest"]  # no read aliases
    assert "confidence" not in cfg.to_dict()["hedge"]
    assert cfg.to_dict()["intervals"] == {"confidence": 0.8}


def test_units_table_and_accept_extreme_parse(tmp_path: Path):
    text = MINIMAL.replace("[portfolio]", 'units = { states = { dy = "percent", rf = "percent" }, '
                           'assets = "decimal" }\naccept_extreme = { assets = ["biotech"] }\n[portfolio]')
    cfg = parse_config(text, path=tmp_path / "c.toml", base=tmp_path)
    assert cfg.to_dict()["data"]["units"] == {"states": {"dy": "percent", "rf": "percent"}, "assets": "decimal"}
    assert cfg.to_dict()["data"]["accept_extreme"] == {"assets": ["biotech"]}


def test_only_path_keys_are_paths(tmp_path: Path):
    """Issue 11 item 1: a folder named like a value (``monthly``) beside the config is never opened."""
    cfg = parse_config(MINIMAL.replace("[portfolio]", 'frequency = "monthly"\n'
                       'units = "decimal"\n[portfolio]'), path=tmp_path / "c.toml", base=tmp_path)
    assert cfg["data"]["frequency"] == "monthly"
    assert cfg.data_path("frequency") is None and cfg.data_path("units") is None
    assert cfg.data_path("states") == tmp_path / "states.csv"


@pytest.mark.parametrize("kind", ["device", "fifo", "big", "folder"])
def test_config_file_must_be_a_small_regular_file(tmp_path: Path, kind: str, capsys):
    """/dev/zero and a FIFO are refused before reading (exit 2 naming the file, no hang)."""
    import os

    from hedgekit.cli import main
    if kind == "device":
        path = Path("/dev/zero")
    elif kind == "fifo":
        path = tmp_path / "book.toml"
        os.mkfifo(path)
    elif kind == "big":
        path = tmp_path / "book.toml"
        path.write_text("# padding\n" * 200_000)
    else:
        path = tmp_path / "book.toml"
        path.mkdir()
    with pytest.raises(InputError) as err:
        load_config(path)
    assert str(path) in str(err.value)
    assert main(["validate", str(path)]) == 2
    out = capsys.readouterr().err
    assert str(path) in out and len(out.strip().splitlines()) == 1
