"""Frequencies: daily files stay daily, only path keys are files, quarterly files need the setting,
monthly files compound into quarterly runs (issues 11 and 14)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from hedgekit.cli import main
from hedgekit.config import load_config
from hedgekit.inputs import load_dataset

from .helpers import demo_copy
from .test_inputs import _hashes, _set_data


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


def _hand_quarters(path: Path, returns: bool) -> pd.DataFrame:
    """Hand aggregation with pandas groupby, apart from hedgekit's reshape: compounded returns
    (a quarter short of a month is missing) or the quarter's last-month level."""
    frame = pd.read_csv(path, dtype={"date": str})
    frame.index = pd.PeriodIndex(frame.pop("date"), freq="M")
    frame = frame.reindex(pd.period_range(frame.index[0].asfreq("Q").asfreq("M", "start"),
                                          frame.index[-1].asfreq("Q").asfreq("M", "end"), freq="M"))
    groups = frame.groupby(frame.index.asfreq("Q"))
    if returns:
        out = ((1 + frame).groupby(frame.index.asfreq("Q")).prod() - 1).where(groups.count() == 3)
    else:
        out = groups.apply(lambda g: g.iloc[-1])
    return out


def test_monthly_files_compound_into_a_quarterly_run(tmp_path, capsys):
    """Issue 11 item 5: returns (1+r1)(1+r2)(1+r3)-1, levels at the quarter's last month, a note."""
    cfg = demo_copy(tmp_path)
    _set_data(cfg, 'frequency = "quarterly"')
    data = load_dataset(load_config(cfg))
    assert data.frequency == "quarterly" and data.periods_per_year == 4
    assert data.assets.index.freqstr.startswith("Q")
    want = _hand_quarters(cfg.parent / "assets.csv", returns=True)
    got = data.assets.reindex(want.index)
    np.testing.assert_allclose(got.to_numpy(), want.to_numpy(), rtol=1e-13, atol=1e-15, equal_nan=True)
    # the blank month 1992-12 of 'media' leaves 1992Q4 missing, not a two-month return
    assert np.isnan(data.assets.loc[pd.Period("1992Q4", "Q"), "media"])
    levels = _hand_quarters(cfg.parent / "states.csv", returns=False)
    for col in ("dy", "term", "def", "rf"):
        np.testing.assert_array_equal(data.states[col].to_numpy(), levels[col].reindex(data.states.index).to_numpy())
    np.testing.assert_allclose(data.states["mkt"].dropna().to_numpy(),
                               _hand_quarters(cfg.parent / "states.csv", returns=True)["mkt"]
                               .reindex(data.states["mkt"].dropna().index).to_numpy(), rtol=1e-13)
    notes = [w for w in data.warnings if "aggregated to quarters" in w]
    assert len(notes) == 4  # states, assets, portfolio returns, instruments
    assert main(["validate", str(cfg)]) == 0, capsys.readouterr().err


def _quarter_ends(path: Path) -> None:
    frame = pd.read_csv(path, dtype={"date": str})
    frame[frame["date"].str[-2:].isin(["03", "06", "09", "12"])].to_csv(path, index=False)


def test_quarterly_files_without_the_setting(tmp_path, capsys):
    """Quarter-end rows in a monthly run: the error names the likely cause (frequency), not a gap."""
    cfg = demo_copy(tmp_path)
    _quarter_ends(cfg.parent / "states.csv")
    before = _hashes(cfg.parent)
    assert main(["validate", str(cfg)]) == 2
    err = capsys.readouterr().err
    assert "states.csv" in err and "looks quarterly" in err and 'set frequency = "quarterly"' in err
    assert "carry" not in err and len(err.strip().splitlines()) == 1
    assert _hashes(cfg.parent) == before


def test_quarterly_files_with_the_setting_read_as_they_are(tmp_path):
    cfg = demo_copy(tmp_path)
    for name in ("states", "assets", "instruments", "portfolio_returns"):
        _quarter_ends(cfg.parent / f"{name}.csv")
    _set_data(cfg, 'frequency = "quarterly"')
    data = load_dataset(load_config(cfg))
    raw = pd.read_csv(cfg.parent / "assets.csv", dtype={"date": str})
    assert len(data.assets) == len(raw)
    np.testing.assert_array_equal(data.assets.to_numpy(), raw.iloc[:, 1:].to_numpy())
    assert not [w for w in data.warnings if "aggregated" in w]


def test_coverage_and_gaps(tmp_path):
    """Issue 11 item 4: spans per file and column, absent rows and blank stretches inside a span,
    and the stretches outside a given sample; checked against pandas counts."""
    cfg = demo_copy(tmp_path)
    path = cfg.parent / "assets.csv"
    lines = path.read_text().splitlines()
    removed = lines[120].split(",")[0]
    path.write_text("\n".join(lines[:120] + lines[121:]) + "\n")  # one whole month absent
    data = load_dataset(load_config(cfg))
    raw = pd.read_csv(path, dtype={"date": str}).set_index("date")
    spans = {(r["file"], r["column"]): r for r in data.coverage}
    for col in raw.columns:
        valid = raw[col].dropna()
        rec = spans[("assets.csv", col)]
        assert (rec["first"], rec["last"], rec["periods"]) == (valid.index[0], valid.index[-1], len(valid))
    absent = [g for g in data.gaps if g["column"] is None]
    assert absent == [{"file": "assets.csv", "column": None, "first": removed, "last": removed, "periods": 1,
                       "reason": "no row in the file"}]
    blank = [g for g in data.gaps if g["file"] == "assets.csv" and g["column"] == "media"]
    assert {"first": "1992-12", "last": "1992-12", "periods": 1} == {k: blank[0][k] for k in ("first", "last",
                                                                                               "periods")}
    for g in data.gaps:  # every blank record is blank in the file
        if g["column"] is not None and g["file"] == "assets.csv":
            assert raw.loc[g["first"]:g["last"], g["column"]].isna().all()
    dropped = data.dropped("1990-01", "2020-12")
    before = [d for d in dropped if d["file"] == "states.csv" and d["reason"].startswith("before")]
    assert before == [{"file": "states.csv", "column": None, "first": "1985-12", "last": "1989-12",
                       "periods": 49, "reason": "before the sample the estimates used (from 1990-01)"}]
    assert all(set(d) == {"file", "column", "first", "last", "periods", "reason"} for d in dropped)


def test_overlap_of_all_files_in_validate_json(tmp_path, capsys):
    """``hedgekit validate --json`` carries the overlap of every time-series file and the gaps."""
    import json
    cfg = demo_copy(tmp_path)
    path = cfg.parent / "instruments.csv"
    lines = path.read_text().splitlines()
    path.write_text("\n".join(lines[:1] + lines[100:]) + "\n")  # instruments start 99 months later
    assert main(["validate", str(cfg), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)["data"]
    first = lines[100].split(",")[0]
    assert data["overlap"]["first"] == first and data["overlap"]["last"] == "2025-12"
    assert data["overlap"]["periods"] == len(pd.period_range(first, "2025-12", freq="M"))
    assert all(set(g) == {"file", "column", "first", "last", "periods", "reason"} for g in data["gaps"])
