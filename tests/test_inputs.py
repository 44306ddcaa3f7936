"""Input layer: every bad input gives exit 2 and a message naming file, row or column and the fix."""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from hedgekit.cli import main
from hedgekit.config import load_config
from hedgekit.errors import InputError
from hedgekit.inputs import load_dataset, read_holdings, read_series

from .helpers import demo_copy


def _edit(path: Path, fn) -> None:
    lines = path.read_text().splitlines()
    path.write_text("\n".join(fn(lines)) + "\n")


def _set_cell(path: Path, row: int, col: int, value: str) -> None:
    def fn(lines):
        cells = lines[row - 1].split(",")
        cells[col] = value
        lines[row - 1] = ",".join(cells)
        return lines
    _edit(path, fn)


def _set_data(cfg: Path, lines: str) -> None:
    """Add ``lines`` at the top of the config's [data] table."""
    cfg.write_text(cfg.read_text().replace("[data]\n", "[data]\n" + lines + "\n", 1))


def _hashes(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in folder.iterdir() if p.is_file()}


def run_case(tmp_path: Path, capsys, mutate, needles: list[str]) -> str:
    """Mutate a copy of the demo, run ``hedgekit validate``: exit 2, one line with every needle,
    no traceback, the input files untouched. Returns the message."""
    cfg = demo_copy(tmp_path)
    mutate(cfg.parent, cfg)
    before = _hashes(cfg.parent)
    code = main(["validate", str(cfg)])
    err = capsys.readouterr().err
    assert code == 2, err
    assert "Traceback" not in err
    assert len(err.strip().splitlines()) == 1, err
    for needle in needles:
        assert needle in err, f"{needle!r} not in {err!r}"
    assert _hashes(cfg.parent) == before, "inputs must never be modified"
    return err


def _set_config(cfg: Path, old: str, new: str) -> None:
    text = cfg.read_text()
    assert old in text
    cfg.write_text(text.replace(old, new))


def _percent(path: Path) -> None:
    frame = pd.read_csv(path)
    frame.iloc[:, 1:] *= 100
    frame.to_csv(path, index=False)


# (id, mutation, expected substrings). Each mutation gets the demo folder and its config.
CASES = {
    "missing file": (lambda d, c: (d / "assets.csv").unlink(), ["assets.csv", "not found"]),
    "empty file": (lambda d, c: (d / "instruments.csv").write_text(""), ["instruments.csv", "empty"]),
    "semicolons": (lambda d, c: (d / "assets.csv").write_text(
        (d / "assets.csv").read_text().replace(",", ";")), ["assets.csv", "row 1", "semicolons"]),
    "no date column": (lambda d, c: _edit(d / "states.csv", lambda ls: [ls[0].replace("date", "month")] + ls[1:]),
                       ["states.csv", "row 1", "'date'"]),
    "bad date": (lambda d, c: _set_cell(d / "assets.csv", 10, 0, "1986-13"), ["assets.csv", "row 10", "1986-13"]),
    "text date": (lambda d, c: _set_cell(d / "assets.csv", 12, 0, "March 86"), ["assets.csv", "row 12", "date"]),
    "duplicate date": (lambda d, c: _set_cell(d / "instruments.csv", 6, 0, "1986-03"),
                       ["instruments.csv", "row 6", "appears twice"]),
    "day in same month": (lambda d, c: _set_cell(d / "instruments.csv", 6, 0, "1986-03-31"),
                          ["instruments.csv", "row 6", "appears twice"]),
    "out of order": (lambda d, c: _edit(d / "assets.csv", lambda ls: ls[:5] + [ls[6], ls[5]] + ls[7:]),
                     ["assets.csv", "row 7", "out of order"]),
    "non-numeric": (lambda d, c: _set_cell(d / "assets.csv", 40, 3, "n/a?"),
                    ["assets.csv", "row 40", "column 'utilities'", "not a number"]),
    "infinite": (lambda d, c: _set_cell(d / "instruments.csv", 40, 2, "inf"),
                 ["instruments.csv", "row 40", "column 'rate_future_10y'", "infinite"]),
    "blank column": (lambda d, c: _edit(d / "assets.csv", lambda ls: [ls[0]] + [
        ",".join(x.split(",")[:5] + [""] + x.split(",")[6:]) for x in ls[1:]]), ["assets.csv", "column 'energy'", "blank"]),
    "percent returns": (lambda d, c: _percent(d / "assets.csv"), ["assets.csv", "percent", 'units = "percent"']),
    "percent levels": (lambda d, c: _percent(d / "states.csv"), ["states.csv", "percent", "divide by 100"]),
    "unknown holding": (lambda d, c: _set_cell(d / "holdings.csv", 3, 0, "insurer"),
                        ["holdings.csv", "row 3", "'insurer'", "did you mean 'insurers'"]),
    "weight not number": (lambda d, c: _set_cell(d / "holdings.csv", 4, 1, "ten"),
                          ["holdings.csv", "row 4", "column 'weight'", "not a number"]),
    "weights in percent": (lambda d, c: (d / "holdings.csv").write_text("asset,weight\nbanks,60\ninsurers,40\n"),
                           ["holdings.csv", "percent"]),
    "instrument without sheet row": (lambda d, c: _edit(d / "instrument_sheet.csv", lambda ls: ls[:-1]),
                                     ["instrument_sheet.csv", "quality_basket", "no row"]),
    "sheet row without returns": (lambda d, c: _edit(d / "instrument_sheet.csv",
                                                     lambda ls: ls + ["swap_30y,1,100,1,,"]),
                                  ["instrument_sheet.csv", "swap_30y", "no returns"]),
    "negative price": (lambda d, c: _set_cell(d / "instrument_sheet.csv", 3, 2, "-5"),
                       ["instrument_sheet.csv", "row 3", "column 'price'"]),
    "negative nav": (lambda d, c: _set_config(c, "nav = 250_000_000", "nav = -1"), ["larkspur.toml", "nav"]),
    "zero nav": (lambda d, c: _set_config(c, "nav = 250_000_000", "nav = 0"), ["larkspur.toml", "positive"]),
    "toml syntax": (lambda d, c: _set_config(c, 'name = "Larkspur', "name = Larkspur"),
                    ["larkspur.toml", "TOML syntax error", "line"]),
    "unknown key": (lambda d, c: _set_config(c, "max_gross", "max_gros"), ["larkspur.toml", "did you mean 'max_gross'"]),
    "flat state": (lambda d, c: _edit(d / "states.csv", lambda ls: [ls[0]] + [
        ",".join(x.split(",")[:4] + ["0.01"] + x.split(",")[5:]) for x in ls[1:]]),
        ["states.csv", "column 'def'", "no variation"]),
    "state not in file": (lambda d, c: _set_config(c, '"def", "rf"]', '"default", "rf"]'),
                          ["states.csv", "'default'", "not a column"]),
    "market not first": (lambda d, c: _set_config(c, 'order = ["mkt", "dy"', 'order = ["dy", "mkt"'),
                         ["larkspur.toml", "must come first"]),
    "state gap": (lambda d, c: _set_cell(d / "states.csv", 100, 3, ""), ["states.csv", "date 1994-02", "column 'term'"]),
    "impossible day": (lambda d, c: _set_cell(d / "assets.csv", 10, 0, "1986-02-31"), ["assets.csv", "row 10", "1986-02-31"]),
    "lags out of range": (lambda d, c: _set_config(c, "lags = 1", "lags = 40"), ["larkspur.toml", "[states] lags = 40"]),
    "duplicate state": (lambda d, c: _set_config(c, '"def", "rf"]', '"def", "def"]'), ["larkspur.toml", "twice"]),
    "duplicate current position": (lambda d, c: (_set_config(c, "[data]\n", '[data]\ncurrent_positions = "cur.csv"\n'),
                                                 (d / "cur.csv").write_text("instrument,weight\nrate_future_2y,-0.4\n"
                                                                            "rate_future_2y,-0.3\n")),
                                   ["cur.csv", "row 3", "listed twice"]),
    "blank current weight": (lambda d, c: (_set_config(c, "[data]\n", '[data]\ncurrent_positions = "cur.csv"\n'),
                                           (d / "cur.csv").write_text("instrument,weight\nrate_future_2y,\n")),
                             ["cur.csv", "row 2", "column 'weight'", "blank"]),
    "ragged row": (lambda d, c: _edit(d / "instruments.csv", lambda ls: ls[:20] + [ls[20] + ",0.1,0.2"] + ls[21:]),
                   ["instruments.csv", "row 21", "malformed"]),
    "duplicate column": (lambda d, c: _edit(d / "assets.csv", lambda ls: [ls[0].replace("insurers", "banks")] + ls[1:]),
                         ["assets.csv", "row 1", "column 'banks'", "twice"]),
}


@pytest.mark.parametrize("case", list(CASES))
def test_bad_input_exit_2_names_file_and_place(case, tmp_path, capsys):
    run_case(tmp_path, capsys, *CASES[case])


def test_json_error_payload(tmp_path, capsys):
    cfg = demo_copy(tmp_path)
    (cfg.parent / "assets.csv").unlink()
    code = main(["validate", str(cfg), "--json"])
    out = capsys.readouterr().out
    assert code == 2
    import json
    payload = json.loads(out)
    assert payload["exit_code"] == 2 and "assets.csv" in payload["error"]


def test_units_percent_converts(tmp_path):
    cfg = demo_copy(tmp_path)
    for name in ("assets", "states", "instruments", "portfolio_returns"):
        _percent(cfg.parent / f"{name}.csv")
    _set_config(cfg, "[data]\n", '[data]\nunits = "percent"\n')
    pct = load_dataset(load_config(cfg))
    dec = load_dataset(load_config(demo_copy(tmp_path / "b")))
    np.testing.assert_allclose(pct.assets.to_numpy(), dec.assets.to_numpy(), rtol=1e-9, equal_nan=True)
    np.testing.assert_allclose(pct.states.to_numpy(), dec.states.to_numpy(), rtol=1e-9, equal_nan=True)


def test_weights_not_summing_to_one_warns(tmp_path):
    cfg = demo_copy(tmp_path)
    (cfg.parent / "holdings.csv").write_text("asset,weight\nbanks,0.5\ninsurers,0.3\n")
    data = load_dataset(load_config(cfg))
    assert any("20.00% of NAV is treated as cash" in w for w in data.warnings)
    (cfg.parent / "holdings.csv").write_text("asset,weight\nbanks,0.9\ninsurers,0.4\n")
    data = load_dataset(load_config(cfg))
    assert any("levered 30.00%" in w for w in data.warnings)


def test_only_needed_files_are_read(tmp_path):
    cfg = demo_copy(tmp_path)
    (cfg.parent / "instruments.csv").unlink()
    data = load_dataset(load_config(cfg), need={"states", "assets", "holdings"})
    assert data.instruments is None and data.assets is not None


def test_dates_days_and_quarterly(tmp_path):
    p = tmp_path / "q.csv"
    p.write_text("date,a\n2020-03-31,0.01\n2020-06-30,0.02\n2020-Q3,0.03\n")
    frame = read_series(p, "assets", frequency="quarterly")
    assert [str(x) for x in frame.index] == ["2020Q1", "2020Q2", "2020Q3"]
    p.write_text("date,a\n2020-01-31,0.01\n2020-03,0.02\n")
    frame = read_series(p, "assets", frequency="monthly")
    assert [str(x) for x in frame.index] == ["2020-01", "2020-02", "2020-03"]  # the gap becomes a blank row
    assert np.isnan(frame.loc[pd.Period("2020-02", "M"), "a"])


def test_parquet_reads_like_csv(tmp_path):
    pytest.importorskip("pyarrow")
    csv = tmp_path / "a.csv"
    csv.write_text("date,a,b\n2020-01,0.01,\n2020-02,0.02,0.03\n")
    frame = pd.read_csv(csv)
    frame.to_parquet(tmp_path / "a.parquet", index=False)
    a = read_series(csv, "assets")
    b = read_series(tmp_path / "a.parquet", "assets")
    pd.testing.assert_frame_equal(a, b, check_freq=False)


def test_holdings_blank_name(tmp_path):
    p = tmp_path / "h.csv"
    p.write_text("asset,weight\n,0.5\n")
    with pytest.raises(InputError, match="row 2"):
        read_holdings(p, None)


@settings(max_examples=120, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.text(alphabet=st.sampled_from(list("date,;0123456789-.\n\t eE+naifAQ\"x")), max_size=200))
def test_random_malformed_csv_only_raises_input_error(tmp_path, text):
    """Fuzz the reader: whatever the bytes, the only failure is hedgekit's own InputError."""
    p = tmp_path / "fuzz.csv"
    p.write_text(text)
    for frequency in ("monthly", "quarterly", "daily"):
        try:
            read_series(p, "assets", frequency=frequency)
        except InputError:
            pass


def test_too_few_common_months_for_the_window(tmp_path, capsys):
    cfg = demo_copy(tmp_path)
    path = cfg.parent / "assets.csv"
    lines = path.read_text().splitlines()
    path.write_text("\n".join(lines[:1] + lines[-20:]) + "\n")  # 20 months of asset returns
    code = main(["exposures", str(cfg)])
    err = capsys.readouterr().err
    assert code == 2
    assert "assets.csv" in err and "only 20 months in common" in err and "min_obs" in err


def test_a_command_reads_only_its_files(tmp_path, capsys):
    cfg = demo_copy(tmp_path)
    (cfg.parent / "instruments.csv").unlink()
    (cfg.parent / "instrument_sheet.csv").unlink()
    assert main(["states", str(cfg)]) == 0
    assert main(["premia", str(cfg)]) == 0
    capsys.readouterr()
    assert main(["hedge", str(cfg)]) == 2
    assert "instruments.csv" in capsys.readouterr().err


def test_config_with_byte_order_mark(tmp_path, capsys):
    cfg = demo_copy(tmp_path)
    cfg.write_bytes(b"\xef\xbb\xbf" + cfg.read_bytes())
    assert main(["validate", str(cfg)]) == 0


@pytest.mark.parametrize("as_of, end", [("2025-09", "2025-09"), ("2025Q3", "2025-09"), ("2025-Q2", "2025-06"),
                                        ("2020-06-30", "2020-06")])
def test_as_of_periods(tmp_path, as_of, end):
    data = load_dataset(load_config(demo_copy(tmp_path)))
    assert str(data.as_of(as_of).states.index[-1]) == end


@pytest.mark.parametrize("as_of, needle", [("2025", "not a period"), ("2030-01", "after the last period"),
                                           ("June", "not a period")])
def test_bad_as_of(tmp_path, as_of, needle):
    data = load_dataset(load_config(demo_copy(tmp_path)))
    with pytest.raises(InputError, match=needle):
        data.as_of(as_of)


def test_missing_nav_is_named_by_the_stage_that_needs_it(tmp_path, capsys):
    """Without [portfolio] nav, validate passes but the hedge exits 2 naming the key and the fix."""
    cfg = demo_copy(tmp_path)
    _set_config(cfg, "nav = 250_000_000", "")
    assert main(["validate", str(cfg)]) == 0
    capsys.readouterr()
    assert main(["hedge", str(cfg)]) == 2
    err = capsys.readouterr().err
    assert "nav is required for the hedge" in err and "Fix:" in err and "Traceback" not in err
