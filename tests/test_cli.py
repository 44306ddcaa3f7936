"""End to end through the command line (subprocess and in-process) on the demo scenario."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from hedgekit.cli import main

from .helpers import DEMO, demo_copy

CONTRACT = {
    "states": ["variables", "intercept", "coef", "max_eigen_modulus", "innovations", "transform"],
    "exposures": ["factors", "portfolio", "portfolio_se", "assets", "instruments", "rolling"],
    "premia": ["factors", "lambda", "se_fm", "se_nw", "se_shanken", "t_fm", "t_shanken", "r2_cs", "n_periods",
               "n_skipped", "pricing_error_test"],
    "hedge": ["status", "positions", "contracts", "exposure_before", "exposure_after", "tracking_error", "cost",
              "premium_given_up", "unreachable"],
    "backtest": ["rebalance_dates", "decisions", "effectiveness", "realised_tracking_error",
                 "predicted_tracking_error"],
}


def _run(args, cwd=None, env=None):
    full_env = dict(os.environ, **(env or {}))
    return subprocess.run([sys.executable, "-m", "hedgekit.cli", *args], capture_output=True, text=True,
                          cwd=cwd, env=full_env, timeout=600)


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo")
    proc = _run(["demo", "--dir", str(folder / "d"), "--json"])
    return folder / "d", proc


def test_demo_whole_job_json_has_every_contract_key(demo_run):
    folder, proc = demo_run
    assert proc.returncode == 0, proc.stderr
    payload = json.loads(proc.stdout)  # stdout is one JSON object and nothing else
    for stage, keys in CONTRACT.items():
        for key in keys:
            assert key in payload[stage], f"{stage}.{key} missing"
    st = payload["states"]
    assert st["variables"] == ["mkt", "dy", "term", "def", "rf"]
    assert set(st["coef"]["mkt"]) == {f"{v}.L1" for v in st["variables"]}
    assert set(st["innovations"]) >= {"dates", "raw", "orthogonal"}
    assert len(st["innovations"]["dates"]) == len(st["innovations"]["orthogonal"]["term"])
    ex = payload["exposures"]
    assert ex["factors"] == ["mkt", "dy", "term", "def", "rf"]
    assert len(ex["rolling"]["dates"]) == len(ex["rolling"]["portfolio"]["term"])
    assert ex["rolling"]["portfolio"]["term"][0] is None  # too few months in the first window
    pr = payload["premia"]
    assert pr["factors"][0] == "const"
    assert set(pr["pricing_error_test"]) >= {"stat", "df", "pvalue"}
    h = payload["hedge"]
    assert h["status"] == "optimal"
    assert all(isinstance(v, int) for v in h["contracts"].values())
    for f in ("term", "def"):
        assert abs(h["exposure_after"][f]) < 1e-6
    assert 0.95 - 1e-6 <= h["exposure_after"]["mkt"] <= 1.05 + 1e-6
    bt = payload["backtest"]
    assert len(bt["rebalance_dates"]) == len(bt["decisions"]) > 10
    assert payload["cautions"] and "not investment advice" in payload["cautions"][0]
    assert "report" in payload and Path(payload["report"]["html"]).exists()
    # the demo stores the previous quarter first, so the run is compared with it
    assert payload["history"]["previous_sample_end"] == "2025-09"
    assert set(payload["history"]["exposure"]) == set(ex["factors"])
    assert "Since the previous run" in Path(payload["report"]["html"]).read_text()


def test_demo_report_and_store_exist(demo_run):
    folder, proc = demo_run
    out = folder / "hedgekit_output"
    html = (out / "report.html").read_text()
    assert "data:image/png;base64," in html
    assert (out / "report.md").exists()
    assert (folder / "hedgekit_runs.sqlite").exists()


def test_terminal_output_plain_when_piped(tmp_path):
    cfg = demo_copy(tmp_path)
    proc = _run(["hedge", str(cfg)], env={"NO_COLOR": "1"})
    assert proc.returncode == 0, proc.stderr
    assert "\x1b[" not in proc.stdout  # no colour codes
    assert "Hedge ticket" in proc.stdout and "not investment advice" in proc.stdout
    assert max(len(line) for line in proc.stdout.splitlines()) <= 100


@pytest.mark.parametrize("command", ["states", "exposures", "premia", "hedge", "stress"])
def test_stage_commands_json_and_out(command, tmp_path, capsys):
    cfg = demo_copy(tmp_path)
    out = tmp_path / "tables"
    code = main([command, str(cfg), "--json", "--out", str(out)])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    payload = json.loads(captured.out)
    for key in CONTRACT.get(command, []):
        assert key in payload
    csvs = list(out.glob("*.csv"))
    assert csvs and all(p.stat().st_size > 0 for p in csvs)
    assert not list(out.glob(".*")), "no temporary files left behind"


def test_unreachable_hedge_exits_3_and_names_factor(tmp_path, capsys):
    cfg = demo_copy(tmp_path)
    text = cfg.read_text().replace('neutralise = ["term", "def"]', 'neutralise = ["term", "def"]\n'
                                   'exclude = ["rate_future_2y", "rate_future_10y", "value_basket", '
                                   '"quality_basket", "credit_index_ig", "credit_index_hy"]')
    cfg.write_text(text)
    code = main(["hedge", str(cfg), "--json"])
    captured = capsys.readouterr()
    assert code == 3
    payload = json.loads(captured.out)
    assert payload["status"] == "unreachable"
    assert set(payload["unreachable"]) & {"term", "def"}
    assert "not reachable" in captured.err


def test_as_of_cuts_the_sample(tmp_path, capsys):
    cfg = demo_copy(tmp_path)
    assert main(["exposures", str(cfg), "--json", "--as-of", "2020-06"]) == 0
    payload = json.loads(capsys.readouterr().out)
    assert payload["rolling"]["dates"][-1] == "2020-06"
    assert main(["exposures", str(cfg), "--as-of", "June"]) == 2
    assert "--as-of" in capsys.readouterr().err


def test_robust_with_zero_tolerance_is_a_config_error(tmp_path, capsys):
    cfg = demo_copy(tmp_path)
    cfg.write_text(cfg.read_text().replace("max_gross = 1.5", "max_gross = 1.5\nrobust = true"))
    assert main(["hedge", str(cfg)]) == 2
    assert "positive tolerance" in capsys.readouterr().err


def test_version_and_help():
    proc = _run(["--version"])
    assert proc.returncode == 0 and "hedgekit" in proc.stdout
    proc = _run(["--help"])
    assert proc.returncode == 0
    for command in ("demo", "run", "states", "exposures", "premia", "hedge", "stress", "backtest", "report",
                    "history"):
        assert command in proc.stdout
    assert "not investment advice" in proc.stdout


def test_history_after_two_runs(tmp_path, capsys):
    cfg = demo_copy(tmp_path)
    assert main(["run", str(cfg), "--json"]) == 0
    first = json.loads(capsys.readouterr().out)
    assert main(["run", str(cfg), "--json"]) == 0
    second = json.loads(capsys.readouterr().out)
    assert first["run_id"] == second["run_id"], "identical inputs are recognised, not stored twice"
    assert main(["history", str(cfg), "--json"]) == 0
    hist = json.loads(capsys.readouterr().out)
    assert len(hist["runs"]) == 1


def test_internal_error_exit_1_without_traceback(tmp_path, capsys, monkeypatch):
    cfg = demo_copy(tmp_path)
    import hedgekit.pipeline as pipeline

    def boom(*a, **k):
        raise RuntimeError("simulated failure")
    monkeypatch.setattr(pipeline, "run_exposures", boom)
    code = main(["exposures", str(cfg)])
    err = capsys.readouterr().err
    assert code == 1 and "simulated failure" in err and "Traceback" not in err


def test_run_out_as_of_and_failed_run_leaves_no_store(tmp_path, capsys):
    cfg = demo_copy(tmp_path)
    out = tmp_path / "tables"
    assert main(["run", str(cfg), "--json", "--as-of", "2024-12", "--out", str(out)]) == 0
    payload = json.loads(capsys.readouterr().out)
    assert payload["meta"]["sample_end"] == "2024-12"
    assert Path(payload["report"]["html"]).name == "report_2024-12.html"  # the current report is not replaced
    assert {"hedge_ticket.csv", "exposures_book.csv", "premia.csv", "stress.csv"} <= {p.name for p in out.iterdir()}
    assert oct((out / "hedge_ticket.csv").stat().st_mode & 0o777) == "0o644"
    # a run that fails on its inputs creates neither a store nor a report
    cfg2 = demo_copy(tmp_path / "b")
    (cfg2.parent / "instruments.csv").write_text("date,x\n")
    assert main(["run", str(cfg2)]) == 2
    assert not (cfg2.parent / "hedgekit_runs.sqlite").exists()
    assert not (cfg2.parent / "hedgekit_output").exists()


def test_out_that_is_a_file_fails_before_any_work(tmp_path, capsys):
    cfg = demo_copy(tmp_path)
    target = tmp_path / "file.txt"
    target.write_text("x")
    assert main(["hedge", str(cfg), "--out", str(target)]) == 2
    assert "--out must name a folder" in capsys.readouterr().err


@pytest.mark.parametrize("command,files", [
    ("states", ("states",)), ("premia", ("states", "assets")), ("premia", ("factors", "assets")),
])
def test_stage_commands_on_minimal_configs(tmp_path, capsys, command, files):
    """A stage command needs only its own inputs: no NAV, no book, no instruments (issue 10 item 3)."""
    import shutil

    from hedgekit import pipeline as pl
    from hedgekit.config import load_config
    for name in ("states", "assets"):
        shutil.copy(DEMO / f"{name}.csv", tmp_path / f"{name}.csv")
    if "factors" in files:
        factors = pl.run_all(load_config(demo_copy(tmp_path / "d")), backtest=False).factor_set.factors.copy()
        factors.index = factors.index.astype(str)
        factors.to_csv(tmp_path / "factors.csv", index_label="date")
    cfg = tmp_path / "min.toml"
    cfg.write_text("[data]\n" + "".join(f'{f} = "{f}.csv"\n' for f in files))
    assert main([command, str(cfg), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out.get("sample", {}).get("periods", 0) > 100


def test_one_confidence_level_everywhere_from_the_config(tmp_path, capsys):
    """[intervals] confidence = 0.80: the JSON, the terminal and the report HTML all carry 80 %
    intervals and no 95 % label; the JSON interval is estimate +/- z(0.80) se (z = 1.2816, textbook)."""
    import re
    cfg = demo_copy(tmp_path)
    cfg.write_text(cfg.read_text() + "\n[intervals]\nconfidence = 0.80\n")
    assert main(["run", str(cfg), "--json", "--no-store"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["meta"]["level_label"] == "80 %"
    for stage in ("exposures", "premia", "hedge", "stress", "backtest"):
        assert out[stage]["confidence"] == 0.80, stage
    h = out["hedge"]
    lo, hi = h["exposure_before_interval"]["rf"]
    assert abs((hi - lo) / 2 - 1.2815515655446004 * h["exposure_before_se"]["rf"]) < 1e-12
    assert set(out["samples"]) >= {"states", "exposures", "premia", "hedge", "backtest"}
    assert isinstance(out["dropped"], list)
    env = dict(os.environ, NO_COLOR="1", COLUMNS="160")
    proc = subprocess.run([sys.executable, "-m", "hedgekit.cli", "run", str(cfg), "--no-store", "--no-backtest"],
                          capture_output=True, text=True, env=env)
    html = (cfg.parent / "hedgekit_output" / "report.html").read_text(encoding="utf-8")
    for text in (proc.stdout, html):
        assert "80 %" in text and not re.search(r"(?<![\d.])95 ?%", text)
