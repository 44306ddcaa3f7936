"""Tests of the SQLite run store: round trip, re-runs, history side by side, change flags."""

from __future__ import annotations

import json
import sqlite3
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from hedgekit.errors import InputError
from hedgekit.present import plots, report
from hedgekit.store import RunStore, fingerprint

FACTORS = ["mkt", "dy", "term", "def", "rf"]
INSTRUMENTS = ["rate_future_10y", "credit_index_ig"]
CONFIG = '[portfolio]\nname = "Test Book"\nnav = 100_000_000\n'


def quarter_run(quarter: str, *, shift: float = 0.0, fund: str = "Test Book", seed: int = 0) -> dict:
    """A small run dict for one quarter end; ``shift`` moves the term exposure and the 10y leg."""
    rng = np.random.default_rng(seed)
    beta = dict(zip(FACTORS, (np.array([0.95, 0.10, 0.08, 0.27, -0.08])
                              + rng.normal(0, 0.005, 5)).tolist(), strict=True))
    beta["term"] += shift
    lam = {"const": 0.0004, "mkt": 0.006, "dy": -0.001, "term": 0.003, "def": 0.004, "rf": -0.002}
    return {
        "meta": {"fund": fund, "nav": 1e8, "currency": "USD", "sample_start": "1990-01",
                 "sample_end": quarter, "frequency": "monthly", "version": "0.1.0",
                 "config": "book.toml", "run_at": f"{quarter}-28T08:00:00+00:00",
                 "input_hashes": {"states": f"s{quarter}", "assets": f"a{quarter}"},
                 "neutralise": ["term"], "keep": {}},
        "states": None,
        "exposures": {"factors": FACTORS, "portfolio": beta,
                      "portfolio_se": dict.fromkeys(FACTORS, 0.008)},
        "premia": {"factors": ["const", *FACTORS], "lambda": lam,
                   "se_fm": dict.fromkeys(lam, 0.0012), "se_shanken": dict.fromkeys(lam, 0.0014),
                   "t_shanken": {k: v / 0.0014 for k, v in lam.items()},
                   "r2_cs": float("nan")},
        "hedge": {"status": "optimal",
                  "positions": {"rate_future_10y": 0.2 + shift, "credit_index_ig": 0.4},
                  "exposure_after": {**beta, "term": 0.0}, "tracking_error": 0.03},
        "stress": None, "backtest": None, "warnings": [], "cautions": [],
    }


def test_round_trip(tmp_path: Path) -> None:
    store = RunStore(tmp_path / "runs.sqlite")
    run = quarter_run("2025-03")
    run_id = store.record(run, CONFIG, tmp_path / "report.html")
    rec = store.get(run_id)
    assert rec.config_text == CONFIG
    assert rec.input_hashes == run["meta"]["input_hashes"]
    assert rec.version == "0.1.0" and rec.fund == "Test Book" and rec.sample_end == "2025-03"
    assert rec.report_path == str(tmp_path / "report.html")
    # the results come back as stored, NaN as None (strict JSON)
    assert rec.run["exposures"] == run["exposures"]
    assert rec.run["premia"]["r2_cs"] is None
    odd = quarter_run("2025-06")
    odd["hedge"]["tracking_error"] = np.float32(0.03)  # numpy scalars and paths are stored plainly
    odd["report"] = {"html": tmp_path / "r.html"}
    rec2 = store.get(store.record(odd, CONFIG))
    assert rec2.run["report"]["html"] == str(tmp_path / "r.html")
    assert rec2.run["hedge"]["tracking_error"] == pytest.approx(0.03)
    assert rec.fingerprint == fingerprint(CONFIG, run["meta"]["input_hashes"], "0.1.0")
    assert json.dumps(rec.to_dict(), allow_nan=False)
    assert store.get(run_id) == rec
    with pytest.raises(InputError, match="no run with id"):
        store.get(9999)
    # a second handle on the same file sees the same records
    assert RunStore(tmp_path / "runs.sqlite").history() == [rec, rec2]


def test_identical_rerun_is_recognised(tmp_path: Path) -> None:
    store = RunStore(tmp_path / "runs.sqlite")
    first = store.record(quarter_run("2025-03"), CONFIG)
    again = quarter_run("2025-03")
    again["meta"]["run_at"] = "2025-04-02T10:00:00+00:00"  # a later re-run of the same job
    assert store.record(again, CONFIG, "later/report.html") == first
    assert len(store.history()) == 1
    assert store.history()[0].report_path == "later/report.html"  # filled in, not duplicated
    # a changed configuration or input is a new run
    assert store.record(again, CONFIG + "# note\n") != first
    changed = quarter_run("2025-03")
    changed["meta"]["input_hashes"]["assets"] = "different"
    assert store.record(changed, CONFIG) not in (first,)
    assert len(store.history()) == 3


def test_history_frame_and_limits(tmp_path: Path) -> None:
    store = RunStore(tmp_path / "runs.sqlite")
    for i, q in enumerate(["2025-06", "2025-03", "2025-09"]):  # recorded out of order
        store.record(quarter_run(q, shift=0.01 * i, seed=i), CONFIG)
    store.record(quarter_run("2025-03", fund="Other Book", seed=9), CONFIG + "#other\n")
    frame = store.history_frame(fund="Test Book")
    assert list(frame["sample_end"]) == ["2025-03", "2025-06", "2025-09"]
    assert list(frame.columns[:4]) == ["run_id", "fund", "run_at", "sample_end"]
    assert [c for c in frame.columns if c.startswith("exposure:")] == [f"exposure:{f}" for f in FACTORS]
    for col in ("exposure:term", "premium:def", "hedge:rate_future_10y", "exposure_after:term",
                "tracking_error", "t_shanken:mkt"):
        assert col in frame.columns
    assert frame["hedge:rate_future_10y"].tolist() == pytest.approx([0.21, 0.2, 0.22])
    assert [r.sample_end for r in store.history(limit=2)] == ["2025-06", "2025-09"]
    assert store.history(limit=0) == []
    assert len(store.history()) == 4
    assert store.history_frame(fund="nobody").empty


def test_flag_changes(tmp_path: Path) -> None:
    store = RunStore(tmp_path / "runs.sqlite")
    store.record(quarter_run("2025-03", seed=1), CONFIG)
    store.record(quarter_run("2025-06", seed=1), CONFIG)  # same numbers, new data files
    big = quarter_run("2025-09", shift=0.35, seed=1)
    big["premia"]["lambda"]["term"] += 0.01  # 0.01 > 2 × 0.0014
    store.record(big, CONFIG)
    flags = store.flag_changes(threshold=0.2)
    assert set(flags["sample_end"]) == {"2025-09"}
    got = {(q, n) for q, n in zip(flags["quantity"], flags["name"], strict=True)}
    assert got == {("exposure", "term"), ("hedge", "rate_future_10y"), ("premium", "term")}
    row = flags[flags["quantity"] == "exposure"].iloc[0]
    assert row["change"] == pytest.approx(0.35) and row["limit"] == 0.2
    assert row["previous_sample_end"] == "2025-06"
    assert store.flag_changes(threshold=0.5, premium_se_multiple=10).empty
    with pytest.raises(InputError):
        store.flag_changes(threshold=0)


def test_failed_record_leaves_the_store_intact(tmp_path: Path) -> None:
    store = RunStore(tmp_path / "runs.sqlite")
    store.record(quarter_run("2025-03"), CONFIG)
    before = [r.to_dict() for r in store.history()]
    # the run row goes in first; a trigger then aborts the input-file insert half-way,
    # and the transaction must take the run row back out with it
    with sqlite3.connect(tmp_path / "runs.sqlite") as conn:
        conn.execute("CREATE TRIGGER boom BEFORE INSERT ON input_files WHEN NEW.file_key = 'states'"
                     " BEGIN SELECT RAISE(ABORT, 'simulated failure'); END")
    conn.close()
    with pytest.raises(InputError, match="simulated failure"):
        store.record(quarter_run("2025-06"), CONFIG + "#bad\n")
    assert [r.to_dict() for r in store.history()] == before
    with sqlite3.connect(tmp_path / "runs.sqlite") as conn:
        assert conn.execute("SELECT COUNT(*) FROM input_files").fetchone()[0] == 2


def test_interrupted_report_leaves_report_and_store(tmp_path: Path, monkeypatch) -> None:
    """Write report + record; then a plot fails mid-report: earlier files and store unchanged."""
    store = RunStore(tmp_path / "runs.sqlite")
    out = tmp_path / "out"

    def publish(run: dict) -> int:
        paths = report.publish_report(run, out)
        return store.record(run, CONFIG, paths["html"])

    publish(quarter_run("2025-03"))
    files = {p.name: p.read_bytes() for p in out.iterdir()}
    records = [r.to_dict() for r in store.history()]

    def broken(*args, **kwargs):
        raise RuntimeError("figure failed")

    monkeypatch.setattr(plots, "exposure_chart", broken)
    with pytest.raises(RuntimeError, match="figure failed"):
        publish(quarter_run("2025-06", shift=0.3))
    assert {p.name: p.read_bytes() for p in out.iterdir()} == files
    assert [r.to_dict() for r in store.history()] == records


def test_store_path_checks(tmp_path: Path) -> None:
    with pytest.raises(InputError, match="folder"):
        RunStore(tmp_path)
    store = RunStore(tmp_path / "nested" / "runs.sqlite")
    assert store.history() == [] and isinstance(store.history_frame(), pd.DataFrame)
    assert store.history_frame().empty


@pytest.mark.parametrize("kind", ["csv", "truncated", "devnull", "folder"])
def test_store_problems_are_input_errors_naming_the_file(tmp_path, kind):
    """A store path that is a CSV, a damaged store, /dev/null or a folder: exit-2 errors with the file and a fix."""
    from hedgekit.errors import InputError
    if kind == "csv":
        path = tmp_path / "runs.csv"
        path.write_text("a,b\n1,2\n")
    elif kind == "truncated":
        good = tmp_path / "good.sqlite"
        RunStore(good)
        path = tmp_path / "runs.sqlite"
        path.write_bytes(good.read_bytes()[:60])
    elif kind == "devnull":
        path = Path("/dev/null")
    else:
        path = tmp_path
    with pytest.raises(InputError) as err:
        RunStore(path).history()
    assert str(path) in str(err.value) and "Fix:" in str(err.value)
