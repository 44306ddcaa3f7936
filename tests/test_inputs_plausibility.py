"""Plausibility by the kind of series (issue 11 items 3 and 6; thresholds in hedgekit.inputs.checks,
common practice). Every bad input: exit 2 through ``hedgekit validate``, one line naming file, row,
column and the fix, inputs untouched."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

from hedgekit.cli import main
from hedgekit.config import load_config
from hedgekit.inputs import load_dataset, read_series

from .helpers import demo_copy
from .test_inputs import _set_cell, _set_data, run_case


def _column(path: Path, name: str, fn) -> None:
    frame = pd.read_csv(path, dtype={"date": str})
    frame[name] = fn(frame[name])
    frame.to_csv(path, index=False)


CASES = {
    "loss beyond -100 %": (lambda d, c: _set_cell(d / "assets.csv", 50, 2, "-1.5"),
                           ["assets.csv", "row 50", "column 'insurers'", "below -100 %", "accept_extreme"]),
    "gain beyond +100 %": (lambda d, c: _set_cell(d / "instruments.csv", 60, 1, "1.8"),
                           ["instruments.csv", "row 60", "column 'rate_future_2y'", "beyond +100 %"]),
    "huge cell": (lambda d, c: _set_cell(d / "assets.csv", 30, 5, "6.2e9"),
                  ["assets.csv", "row 30", "column 'energy'", "6.2e+09", "correct the cell"]),
    "1e300 cell": (lambda d, c: _set_cell(d / "portfolio_returns.csv", 30, 1, "1e300"),
                   ["portfolio_returns.csv", "row 30", "column 'larkspur_fund'", "correct the cell"]),
    "market in percent": (lambda d, c: _column(d / "states.csv", "mkt", lambda s: s * 100),
                          ["states.csv", "column 'mkt'", "percent", 'units = { states = { mkt = "percent" } }']),
    "one spread level in percent": (lambda d, c: _set_cell(d / "states.csv", 200, 4, "0.9"),
                                    ["states.csv", "row 200", "column 'def'", "almost surely in percent"]),
    "dividend yield in percent": (lambda d, c: _column(d / "states.csv", "dy", lambda s: s * 100),
                                  ["states.csv", "column 'dy'", "percent"]),
    "quoted decimal comma": (lambda d, c: _set_cell(d / "assets.csv", 40, 3, '"0,05"'),
                             ["assets.csv", "row 40", "column 'utilities'", "decimal comma", "write 0.05"]),
    "bare decimal comma": (lambda d, c: _set_cell(d / "assets.csv", 40, 3, "0,05"),
                           ["assets.csv", "row 40", "malformed row", "decimal comma"]),
    "decimal comma in holdings": (lambda d, c: _set_cell(d / "holdings.csv", 3, 1, '"0,05"'),
                                  ["holdings.csv", "row 3", "column 'weight'", "not a number"]),
    "dotted date": (lambda d, c: _set_cell(d / "assets.csv", 10, 0, "1986.08"),
                    ["assets.csv", "row 10", "1986.08", "1986-08"]),
    "yyyymm date": (lambda d, c: _set_cell(d / "assets.csv", 10, 0, "198608"),
                    ["assets.csv", "row 10", "198608", "1986-08"]),
    "quarter label in monthly run": (lambda d, c: _set_cell(d / "assets.csv", 10, 0, "1986Q3"),
                                     ["assets.csv", "row 10", "quarter label", 'frequency = "quarterly"']),
    "percent sign": (lambda d, c: _set_cell(d / "assets.csv", 12, 1, "1.2%"),
                     ["assets.csv", "row 12", "column 'banks'", "% sign"]),
    "accept_extreme unknown column": (lambda d, c: _set_data(c, 'accept_extreme = { assets = ["biotek"] }'),
                                      ["larkspur.toml", "accept_extreme.assets", "did you mean 'biotech'"]),
}


@pytest.mark.parametrize("case", list(CASES))
def test_implausible_input_exit_2(case, tmp_path, capsys):
    run_case(tmp_path, capsys, *CASES[case])


def test_accept_extreme_lets_a_genuine_value_through(tmp_path, capsys):
    """A biotech that gained 250 % in a month and a 35 % yield are accepted when named."""
    cfg = demo_copy(tmp_path)
    _set_cell(cfg.parent / "assets.csv", 50, 17, "2.5")
    _set_cell(cfg.parent / "states.csv", 200, 2, "0.35")
    assert main(["validate", str(cfg)]) == 2
    capsys.readouterr()
    _set_data(cfg, 'accept_extreme = { assets = ["biotech"], states = ["dy"] }')
    assert main(["validate", str(cfg)]) == 0, capsys.readouterr().err
    data = load_dataset(load_config(cfg))
    assert data.assets["biotech"].max() == 2.5 and data.states["dy"].max() == 0.35


def test_short_rate_as_a_period_return_warns(tmp_path):
    """A monthly bill return (annual rate / 12, about 0.004) where an annual rate (0.05) is expected."""
    cfg = demo_copy(tmp_path)
    _column(cfg.parent / "states.csv", "rf", lambda s: s / 12)
    data = load_dataset(load_config(cfg))
    notes = [w for w in data.warnings if "column 'rf'" in w]
    assert len(notes) == 1 and "monthly bill return" in notes[0] and "annual rate" in notes[0]
    plain = load_dataset(load_config(demo_copy(tmp_path / "b")))
    assert not [w for w in plain.warnings if "short rate" in w]


def test_quarter_labels_in_a_quarterly_run(tmp_path):
    """``1949Q1`` and ``1949-Q1`` are quarter labels, accepted with frequency = "quarterly"."""
    p = tmp_path / "q.csv"
    p.write_text("date,a\n1949Q1,0.01\n1949-Q2,0.02\n1949Q3,0.03\n")
    frame = read_series(p, "assets", frequency="quarterly")
    assert [str(x) for x in frame.index] == ["1949Q1", "1949Q2", "1949Q3"]
