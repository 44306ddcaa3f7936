"""Tests of the report: self-contained HTML, escaping, all-or-none publishing, content from the run dict."""

from __future__ import annotations

import base64
import copy
import functools
import json
import os
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from hedgekit.demo import simulate
from hedgekit.errors import InputError
from hedgekit.inference import interval_pairs, marks, p_value, t_stat
from hedgekit.present import document, plots, publish, report
from hedgekit.present.fmt import fmt, pct

HOSTILE = "<script>alert(1)</script>"


@functools.lru_cache(maxsize=1)
def _demo_run_json() -> str:
    """A realistic run dict computed here from the simulated demo (until the pipeline is wired).

    VAR(1) by OLS, Cholesky orthogonalisation M = D L^-1 (methods.md section 1), full-sample
    and 60-month rolling OLS betas, the equality-target overlay
    h* = Σ^-1 C'(C Σ^-1 C')^-1 d (the textbook KKT solution, methods.md section 4), and
    isolated scenario P&L b' M s.
    """
    sim = simulate()
    states = sim["states"]
    z = states.to_numpy()[1:]
    x = np.column_stack([np.ones(len(z) - 1), z[:-1]])
    coef, *_ = np.linalg.lstsq(x, z[1:], rcond=None)
    u = z[1:] - x @ coef
    sigma = np.cov(u.T, ddof=x.shape[1])
    chol = np.linalg.cholesky(sigma)
    m = chol[0, 0] * np.linalg.inv(chol)
    orth = u @ m.T
    names = list(states.columns)
    companion = coef[1:].T
    modulus = float(np.max(np.abs(np.linalg.eigvals(companion))))
    factors = np.column_stack([z[1:, 0], orth[:, 1:]])
    dates = [str(d) for d in states.index[2:]]
    f1 = np.column_stack([np.ones(len(factors)), factors])

    def betas(y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        ok = ~np.isnan(y)
        b, *_ = np.linalg.lstsq(f1[ok], y[ok], rcond=None)
        e = y[ok] - f1[ok] @ b
        cov = np.linalg.inv(f1[ok].T @ f1[ok]) * (e @ e) / (ok.sum() - f1.shape[1])
        return b[1:], np.sqrt(np.diag(cov))[1:]

    assets = sim["assets"].iloc[2:]
    book_ret = sim["portfolio_returns"].iloc[2:, 0].to_numpy()
    b_p, se_p = betas(book_ret)
    inst = sim["instruments"].iloc[2:]
    b_h = np.array([betas(inst[c].to_numpy())[0] for c in inst.columns]).T  # K x H
    inst_se = {c: dict(zip(names, betas(inst[c].to_numpy())[1].tolist(), strict=True)) for c in inst.columns}
    cov_h = np.cov(inst.to_numpy().T) * 12
    neutral = [names.index("term"), names.index("def")]
    c_mat = b_h[neutral]
    d = -b_p[neutral]
    si_ct = np.linalg.solve(cov_h, c_mat.T)
    h = si_ct @ np.linalg.solve(c_mat @ si_ct, d)
    after = b_p + b_h @ h
    sheet = sim["sheet"].set_index("instrument")
    nav = float(sim["truth"]["nav"])
    contracts = np.round(h * nav / (sheet["price"] * sheet["multiplier"]).to_numpy())
    window = 60
    roll = np.full((len(book_ret), len(names)), np.nan)
    for t in range(window - 1, len(book_ret)):  # test fixture, not a hot path
        sl = slice(t - window + 1, t + 1)
        b, *_ = np.linalg.lstsq(f1[sl], book_ret[sl], rcond=None)
        roll[t] = b[1:]
    scen = {"curve_steepens_100bp": {"term": 0.01}, "credit_spreads_widen_150bp": {"def": 0.015},
            "equity_drawdown_20pct": {"mkt": -0.20}}
    rows = []
    for name, shock in scen.items():
        s = np.array([shock.get(v, 0.0) for v in names])
        g = m @ s
        rows.append({"name": name, "reading": "isolated", "description": ", ".join(shock),
                     "pnl": {"unhedged": {"return": float(b_p @ g), "currency": float(b_p @ g * nav),
                                          "lo": float(b_p @ g) - 0.01, "hi": float(b_p @ g) + 0.01},
                             "hedged": {"return": float(after @ g), "currency": float(after @ g * nav)}}})
    a_betas = {a: dict(zip(names, betas(assets[a].to_numpy())[0].tolist(), strict=True))
               for a in assets.columns[:6]}
    run = {
        "meta": {"fund": sim["truth"]["fund"], "nav": nav, "currency": "USD",
                 "sample_start": dates[0], "sample_end": dates[-1], "frequency": "monthly",
                 "version": "0.1.0", "config": "demo_portfolios/larkspur.toml",
                 "run_at": "2026-01-15T09:30:00+00:00",
                 "input_hashes": {"states": "ab" * 32, "assets": "cd" * 32},
                 "neutralise": ["term", "def"], "keep": {"mkt": [0.95, 1.05]}},
        "states": {"variables": names, "lags": 1, "max_eigen_modulus": modulus,
                   "intercept": dict(zip(names, coef[0].tolist(), strict=True)),
                   "transform": {r: dict(zip(names, m[i].tolist(), strict=True)) for i, r in enumerate(names)},
                   "r2": {v: float(1 - u[:, i].var() / z[1:, i].var()) for i, v in enumerate(names)}},
        "exposures": {"factors": names, "portfolio": dict(zip(names, b_p.tolist(), strict=True)),
                      "portfolio_se": dict(zip(names, se_p.tolist(), strict=True)),
                      "assets": a_betas,
                      "instruments": {c: dict(zip(names, b_h[:, j].tolist(), strict=True))
                                      for j, c in enumerate(inst.columns)},
                      "instruments_se": inst_se,
                      "factor_sd": dict.fromkeys(names, float(np.sqrt(sigma[0, 0]))),
                      "rolling": {"dates": dates, "portfolio": {
                          v: [None if np.isnan(x) else float(x) for x in roll[:, i]]
                          for i, v in enumerate(names)}}},
        "premia": {"factors": ["const", *names],
                   "lambda": {"const": 0.0004, **sim["truth"]["prices_of_risk"]},
                   "se_fm": dict.fromkeys(["const", *names], 0.0012),
                   "se_shanken": dict.fromkeys(["const", *names], 0.0014),
                   "t_fm": {}, "t_shanken": {}, "r2_cs": 0.83, "n_periods": len(dates),
                   "n_skipped": 0, "pricing_error_test": {"stat": 21.3, "df": 19, "pvalue": 0.32}},
        "hedge": {"status": "optimal",
                  "positions": dict(zip(inst.columns, h.tolist(), strict=True)),
                  "contracts": dict(zip(inst.columns, contracts.astype(int).tolist(), strict=True)),
                  "exposure_before": dict(zip(names, b_p.tolist(), strict=True)),
                  "exposure_after": dict(zip(names, after.tolist(), strict=True)),
                  "tracking_error": float(np.sqrt(h @ cov_h @ h)),
                  "cost": float(np.abs(h) @ sheet["cost_bps"].to_numpy() / 1e4),
                  "premium_given_up": 0.004, "unreachable": []},
        "stress": {"factors": names, "confidence": 0.95, "scenarios": rows},
        "backtest": None,
        "warnings": ["media: 3 blank months were left out"],
        "cautions": [],
    }
    for f in ["const", *names]:
        lam = run["premia"]["lambda"][f]
        run["premia"]["t_fm"][f] = lam / run["premia"]["se_fm"][f]
        run["premia"]["t_shanken"][f] = lam / run["premia"]["se_shanken"][f]
    # What the stages write under the record contract (docs/interface.md), computed here with
    # the shared helpers of hedgekit.inference, standing in for the stages.
    ex = run["exposures"]
    b, se = pd.Series(ex["portfolio"]), pd.Series(ex["portfolio_se"])
    t = t_stat(b, se)
    ex.update(confidence=0.95, portfolio_t=t.to_dict(), portfolio_p=p_value(t).to_dict(),
              portfolio_marks=marks(p_value(t)).to_dict(), portfolio_interval=interval_pairs(b, se, 0.95))
    rounded = pd.Series(after) + 0.001
    run["hedge"].update(confidence=0.95, exposure_after_rounded=dict(zip(names, rounded.tolist(), strict=True)),
                        exposure_after_rounded_interval=interval_pairs(
                            pd.Series(rounded.to_numpy(), index=names), se, 0.95),
                        ticket={c: {"weight": float(h[j]), "contracts": int(contracts[j]),
                                    "weight_rounded": float(h[j]) + 0.0001,
                                    "contract_value": float(sheet["price"].iloc[j] * sheet["multiplier"].iloc[j]),
                                    "cost": 100.0} for j, c in enumerate(inst.columns)})
    pr = run["premia"]
    lam_a, se_a = pd.Series(pr["lambda"]) * 12, pd.Series(pr["se_shanken"]) * 12
    t = t_stat(lam_a, se_a)
    pr.update(confidence=0.95, headline_se="shanken", lambda_annual=lam_a.to_dict(),
              lambda_annual_se=se_a.to_dict(), lambda_interval=interval_pairs(lam_a, se_a, 0.95),
              p=p_value(t).to_dict(), marks=marks(p_value(t)).to_dict(),
              lambda_route=dict.fromkeys(pr["factors"], "cross-section"))
    run["meta"].update(confidence=0.95, level_label="95 %", period="month", period_plural="months",
                       factors=names)
    return json.dumps(run)


def demo_run() -> dict:
    """A fresh copy of the fixture run dict (tests may change it)."""
    return json.loads(_demo_run_json())


def _hostile_run() -> dict:
    run = demo_run()
    run["meta"]["fund"] = HOSTILE + " & Partners"
    pos = run["hedge"]["positions"]
    pos[HOSTILE] = pos.pop("rate_future_10y")
    run["hedge"]["contracts"][HOSTILE] = run["hedge"]["contracts"].pop("rate_future_10y")
    run["exposures"]["assets"][HOSTILE] = run["exposures"]["assets"].pop("banks")
    run["stress"]["scenarios"][0]["name"] = HOSTILE
    run["stress"]["scenarios"][1]["name"] = "costs $5 a_b"  # mathtext must not parse this
    run["warnings"].append(f"instrument {HOSTILE} has $a_b$ in its name")
    return run


def test_html_is_self_contained(tmp_path: Path) -> None:
    paths = report.publish_report(demo_run(), tmp_path)
    text = paths["html"].read_text(encoding="utf-8")
    assert "<script" not in text.lower()
    assert not re.search(r"""(?:src|href)\s*=\s*["']?\s*(?:https?:)?//""", text, re.I)
    assert "url(" not in text and "@import" not in text
    imgs = re.findall(r'<img src="([^"]+)"', text)
    assert len(imgs) >= 4  # exposures, rolling, premia, stress
    for src in imgs:
        assert src.startswith("data:image/png;base64,")
        assert base64.b64decode(src.split(",", 1)[1])[:8] == b"\x89PNG\r\n\x1a\n"
    assert "@page" in text and "break-inside: avoid" in text


def test_hostile_names_are_escaped(tmp_path: Path) -> None:
    paths = report.publish_report(_hostile_run(), tmp_path)
    html_text = paths["html"].read_text(encoding="utf-8")
    assert HOSTILE not in html_text
    assert "<script" not in html_text.lower()
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html_text
    assert "&amp; Partners" in html_text
    md_text = paths["md"].read_text(encoding="utf-8")
    assert HOSTILE not in md_text and "<script" not in md_text.lower()
    assert "&lt;script>alert(1)&lt;/script>" in md_text
    assert not re.search(r"<[A-Za-z/!?]", md_text)  # nothing a Markdown renderer takes as HTML


def test_sections_follow_the_data(tmp_path: Path) -> None:
    doc = document.build_document(demo_run())
    keys = [s.key for s in doc.sections]
    assert keys == ["summary", "exposures", "rolling", "premia", "hedge", "stress",
                    "diagnostics", "methods", "cautions"]
    bare = {"meta": demo_run()["meta"], "exposures": None, "premia": None, "hedge": None,
            "stress": None, "backtest": None, "states": None, "warnings": [], "cautions": []}
    keys = [s.key for s in document.build_document(bare).sections]
    assert keys == ["summary", "diagnostics", "methods", "cautions"]
    paths = report.publish_report(bare, tmp_path)
    assert "Decision support, not investment advice" in paths["html"].read_text(encoding="utf-8")


def test_summary_numbers_come_from_the_run() -> None:
    run = demo_run()
    doc = document.build_document(run)
    summary = doc.sections[0]
    table = next(b for b in summary.blocks if isinstance(b, document.Table))
    row = {r[0]: r for r in table.rows}
    ex, hedge = run["exposures"], run["hedge"]
    assert row["term"][1] == fmt(ex["portfolio"]["term"]) + ex["portfolio_marks"]["term"]
    assert row["term"][2] == fmt(ex["portfolio_t"]["term"], 2)
    lo, hi = ex["portfolio_interval"]["term"]
    assert row["term"][3] == f"[{fmt(lo)}, {fmt(hi)}]"
    # the headline shows what the whole contracts leave, not the continuous solution
    assert row["def"][5] == fmt(hedge["exposure_after_rounded"]["def"])
    assert table.columns[3] == table.columns[6] == "95 % interval"
    text = json.dumps([b.items if isinstance(b, document.Bullets) else getattr(b, "text", "")
                       for b in summary.blocks], ensure_ascii=False)
    worst = min(run["stress"]["scenarios"], key=lambda r: r["pnl"]["unhedged"]["return"])
    assert document.scenario_label(worst) in text and "Worst scenario" in text
    # one rounding convention on the legs line: contracts with the weight they give
    leg = next(iter(hedge["ticket"]))
    assert pct(hedge["ticket"][leg]["weight_rounded"], 1, plus=True) in text


def test_markdown_carries_the_same_tables(tmp_path: Path) -> None:
    run = demo_run()
    paths = report.publish_report(run, tmp_path)
    md = paths["md"].read_text(encoding="utf-8")
    doc = document.build_document(run)
    for sec in doc.sections:
        assert sec.title in md
    for key in ("exposures", "rolling", "premia", "stress"):
        png = paths[f"figure_{key}"]
        assert png.read_bytes()[:4] == b"\x89PNG"
        assert f"]({png.name})" in md
    md_only = report.publish_report(run, tmp_path / "plain", formats=("md",), markdown_figures=False)
    text = md_only["md"].read_text(encoding="utf-8")
    assert "Figure omitted" in text and set(md_only) == {"md"}


def test_failed_render_leaves_the_earlier_report(tmp_path: Path, monkeypatch) -> None:
    first = report.publish_report(demo_run(), tmp_path)
    before = {k: p.read_bytes() for k, p in first.items()}

    def broken(*args, **kwargs):
        raise RuntimeError("plot failed")

    monkeypatch.setattr(plots, "stress_chart", broken)
    changed = demo_run()
    changed["meta"]["fund"] = "Another book"
    with pytest.raises(RuntimeError, match="plot failed"):
        report.publish_report(changed, tmp_path)
    assert {k: p.read_bytes() for k, p in first.items()} == before
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(p.name for p in first.values())


def test_failed_write_leaves_no_half_file(tmp_path: Path, monkeypatch) -> None:
    out = tmp_path / "out"
    first = report.publish_report(demo_run(), out)
    before = {k: p.read_bytes() for k, p in first.items()}
    calls = []
    real = publish._write_bytes

    def fail_on_write(path, data):
        calls.append(path)
        if len(calls) == 3:  # the third file: figures and text partly staged
            raise OSError(28, "No space left on device")
        return real(path, data)

    monkeypatch.setattr(publish, "_write_bytes", fail_on_write)
    with pytest.raises(InputError, match="No space left"):  # exit 2 at the command line, no traceback
        report.publish_report(demo_run(), out)
    assert len(calls) == 3
    assert {k: p.read_bytes() for k, p in first.items()} == before
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted([out.name, os.readlink(out)])


def test_unreachable_hedge_is_flagged() -> None:
    run = demo_run()
    run["hedge"]["status"] = "unreachable"
    run["hedge"]["unreachable"] = ["def"]
    doc = document.build_document(run)
    hedge = next(s for s in doc.sections if s.key == "hedge")
    alert = hedge.blocks[0]
    assert isinstance(alert, document.Para) and alert.kind == "alert" and "def" in alert.text
    summary_alerts = [b for b in doc.sections[0].blocks if isinstance(b, document.Para) and b.kind == "alert"]
    assert len(summary_alerts) == 1 and "def" in summary_alerts[0].text


def test_non_stationary_var_is_loud() -> None:
    run = demo_run()
    run["states"]["max_eigen_modulus"] = 1.002
    run["states"]["stable"] = False  # the states stage's verdict: presentation only reports it
    diag = next(s for s in document.build_document(run).sections if s.key == "diagnostics")
    assert any(isinstance(b, document.Para) and b.kind == "alert" and "not stationary" in b.text
               for b in diag.blocks)


def test_missing_values_and_extras_do_not_break(tmp_path: Path) -> None:
    run = demo_run()
    run["exposures"]["portfolio_se"]["rf"] = None
    run["exposures"]["portfolio_direct"] = {k: v + 0.01 for k, v in run["exposures"]["portfolio"].items()}
    run["premia"]["t_nw"] = {k: 1.5 for k in run["premia"]["factors"]}
    run["premia"]["grs"] = {"stat": 1.1, "pvalue": 0.35}
    run["hedge"]["ticket"] = ["a shape no stage writes"]
    run["backtest"] = {"rebalance_dates": ["2020-03", "2020-06"],
                       "decisions": {"2020-03": {"rate_future_2y": 0.1}, "2020-06": {"rate_future_2y": 0.2}},
                       "effectiveness": 0.71, "realised_tracking_error": 0.02,
                       "predicted_tracking_error": 0.018,
                       "series": {"dates": ["2020-04", "2020-05", "2020-06"],
                                  "hedged_net": [0.01, None, -0.01], "book": [0.02, -0.03, 0.0]}}
    paths = report.publish_report(run, tmp_path)
    text = paths["html"].read_text(encoding="utf-8")
    assert "Walk-forward check" in text and "71.0 %" in text
    assert "From the book&#39;s returns" in text
    assert "figure_backtest" in paths
    assert "GRS test" in text


def test_plots_are_deterministic_png() -> None:
    run = demo_run()
    a = plots.exposure_chart(run["exposures"], run["hedge"])
    b = plots.exposure_chart(copy.deepcopy(run["exposures"]), copy.deepcopy(run["hedge"]))
    assert a == b and a[:4] == b"\x89PNG"
    # bars without recorded intervals draw no error bars rather than inventing them
    bare = {k: v for k, v in run["exposures"].items() if k != "portfolio_interval"}
    assert plots.exposure_chart(bare, None)[:4] == b"\x89PNG"


def test_bad_format_is_an_input_error(tmp_path: Path) -> None:
    from hedgekit.errors import InputError
    with pytest.raises(InputError, match="format"):
        report.publish_report(demo_run(), tmp_path, formats=("pdf",))
    with pytest.raises(InputError, match="file name"):
        report.publish_report(demo_run(), tmp_path, name="../x")


DEMO_CONFIG = Path(__file__).resolve().parents[1] / "demo_portfolios" / "larkspur.toml"


def test_real_demo_run_report_and_store(tmp_path: Path) -> None:
    """The lead's pipeline on the bundled demo: report from its run dict, then the store."""
    from hedgekit.config import load_config
    from hedgekit.pipeline import run_all
    from hedgekit.store import RunStore

    config = load_config(DEMO_CONFIG)
    run = json.loads(json.dumps(run_all(config, backtest=True).to_dict(), allow_nan=False))
    paths = report.publish_report(run, tmp_path / "out")
    text = paths["html"].read_text(encoding="utf-8")
    doc = document.build_document(run)
    assert [s.key for s in doc.sections] == ["summary", "exposures", "rolling", "premia", "hedge",
                                             "stress", "backtest", "diagnostics", "methods", "cautions"]
    assert "<script" not in text.lower() and not re.search(r"(?:src|href)\s*=\s*\"?https?:", text)
    figures = len(re.findall(r'<img src="data:image/png;base64,', text))
    assert figures == len(doc.plots()) >= 4
    # the summary's exposures are the exposure stage's numbers, the after column the hedge's
    # whole-contract figures (marks only where the record gives them)
    table = next(b for b in doc.sections[0].blocks if isinstance(b, document.Table))
    ex, hedge = run["exposures"], run["hedge"]
    for row in table.rows:
        f = row[0]
        assert row[1] == fmt(ex["portfolio"][f]) + (ex.get("portfolio_marks") or {}).get(f, "")
        assert row[5] == fmt(hedge["exposure_after_rounded"][f]) + (
            hedge.get("exposure_after_rounded_marks") or {}).get(f, "")
    for name, leg in hedge["ticket"].items():
        assert f"{abs(leg['contracts']):,}" in text and name.replace("_", "_<wbr>") in text
    # the cautions are the run's, as given
    cautions = next(s for s in doc.sections if s.key == "cautions").blocks[0].items
    assert list(cautions) == run["cautions"]
    store = RunStore(tmp_path / "runs.sqlite")
    first = store.record(run, config.text, paths["html"])
    rerun = copy.deepcopy(run)
    rerun["meta"]["run_at"] = "2030-01-01T00:00:00+00:00"
    assert store.record(rerun, config.text, paths["html"]) == first
    [rec] = store.history(fund=run["meta"]["fund"])
    assert rec.run["hedge"]["positions"] == run["hedge"]["positions"]
    frame = store.history_frame()
    assert frame.loc[0, "exposure:term"] == run["exposures"]["portfolio"]["term"]


def test_quarterly_run_reads_in_quarters(tmp_path: Path) -> None:
    run = demo_run()
    run["meta"].update(frequency="quarterly", period="quarter", period_plural="quarters")
    run["warnings"] = []  # the record's own words; the check is on the report's
    n = len(run["exposures"]["rolling"]["dates"])
    quarters = [f"{1986 + i // 4}Q{i % 4 + 1}" for i in range(n)]
    run["exposures"]["rolling"]["dates"] = quarters
    doc = document.build_document(run)
    premia = next(s for s in doc.sections if s.key == "premia")
    table = next(b for b in premia.blocks if isinstance(b, document.Table))
    assert "Premium a quarter" in table.columns
    mkt = next(r for r in table.rows if r[0] == "mkt")
    # the annual premium is the premia stage's own figure, not a multiple computed here
    assert mkt[3].startswith(pct(run["premia"]["lambda_annual"]["mkt"]))
    facts = next(b for b in premia.blocks if isinstance(b, document.Bullets)).items
    assert any(f.startswith("Quarters used") for f in facts)
    assert np.allclose(plots._month_axis(quarters[:3]), [1986.0, 1986.25, 1986.5])
    paths = report.publish_report(run, tmp_path)
    assert paths["figure_rolling"].exists()
    assert "month" not in paths["html"].read_text(encoding="utf-8").lower()


def test_a_failed_switch_leaves_every_earlier_file(tmp_path, monkeypatch):
    """All report files change or none: the switch to the new folder failing leaves the old one."""
    run = demo_run()
    out = tmp_path / "out"
    first = report.publish_report(run, out)
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    run2 = dict(run, meta=dict(run["meta"], sample_end="2099-12"))
    real = os.replace

    def flaky(src, dst):
        if Path(dst) == out:
            raise PermissionError(13, "Permission denied")
        return real(src, dst)
    monkeypatch.setattr(publish.os, "replace", flaky)
    with pytest.raises(InputError, match="earlier report"):
        report.publish_report(run2, out)
    monkeypatch.setattr(publish.os, "replace", real)
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted([out.name, os.readlink(out)])
    assert first["html"].exists()
