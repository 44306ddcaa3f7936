"""One confidence level from the record to every label: terminal text and report HTML.

The run record is the demo's (``pipeline.run_all``) with every stage's ``confidence`` set
to 0.80 and its intervals recomputed at 0.80 with :mod:`hedgekit.inference` (standing in
for the stages, which write them under the record contract, docs/interface.md). The
presentation must show those 80 % intervals and say "80 %", and no "95 %" may remain.
Check against the textbook interval estimate +/- z se with z = Phi^-1(0.9) = 1.2816
(any normal table).
"""

from __future__ import annotations

import functools
import io
import json
import re
from pathlib import Path

import pandas as pd

from hedgekit.inference import interval_pairs, z_value
from hedgekit.present import report, terminal
from hedgekit.present.fmt import fmt

DEMO_CONFIG = Path(__file__).resolve().parents[1] / "demo_portfolios" / "larkspur.toml"


@functools.lru_cache(maxsize=1)
def _demo_json() -> str:
    from hedgekit.config import load_config
    from hedgekit.pipeline import run_all
    return json.dumps(run_all(load_config(DEMO_CONFIG), backtest=True).to_dict(), allow_nan=False)


def run_at(level: float) -> dict:
    run = json.loads(_demo_json())
    run["meta"].update(confidence=level, level_label=f"{level * 100:.0f} %")
    z = z_value(level)
    for stage in ("exposures", "premia", "hedge", "stress", "backtest"):
        if run.get(stage):
            run[stage]["confidence"] = level
    h = run["hedge"]
    for key in ("exposure_before", "exposure_after"):
        h[f"{key}_interval"] = interval_pairs(pd.Series(h[key]), pd.Series(h[f"{key}_se"]), level)
    for row in run["stress"]["scenarios"]:
        for side in row["pnl"].values():
            side["lo"], side["hi"] = side["return"] - z * side["se"], side["return"] + z * side["se"]
    bt = run["backtest"]
    for side, per in bt["realised_exposure_interval"].items():
        for f, d in per.items():
            d["lo"], d["hi"] = d["beta"] - z * d["se"], d["beta"] + z * d["se"]
            bt["realised_exposure_interval"][side][f] = [d["lo"], d["hi"]]
    return run


def terminal_text(run: dict) -> str:
    con = terminal.make_console(io.StringIO(), width=100)
    terminal.show_run(con, run)
    meta = run["meta"]
    terminal.show_hedge(con, run["hedge"], meta)
    terminal.show_stress(con, run["stress"], meta)
    terminal.show_backtest(con, run["backtest"], meta)
    terminal.show_exposures(con, run["exposures"], meta)
    terminal.show_premia(con, run["premia"], meta)
    return con.file.getvalue()


def test_z_at_80_percent_is_the_textbook_value() -> None:
    assert abs(z_value(0.80) - 1.2815515655446004) < 1e-12


def test_an_80_percent_run_says_80_percent_everywhere(tmp_path: Path) -> None:
    run = run_at(0.80)
    text = terminal_text(run)
    html = report.publish_report(run, tmp_path / "out")["html"].read_text(encoding="utf-8")
    for out in (text, html):
        assert not re.search(r"(?<![\d.])95 ?%", out)
        assert "80 % interval" in out
    # the numbers shown are the record's 80 % intervals (the whole-contract exposure, the headline)
    lo, hi = run["hedge"]["exposure_after_rounded_interval"]["rf"]
    for out in (html, text):  # the terminal may wrap an interval across lines
        assert fmt(lo) in out and fmt(hi) in out


def test_the_label_follows_the_record_not_a_constant(tmp_path: Path) -> None:
    run = run_at(0.90)
    html = report.publish_report(run, tmp_path / "out")["html"].read_text(encoding="utf-8")
    assert "90 % interval" in html
    assert not re.search(r"(?<![\d.])(95|80) ?%", html)
