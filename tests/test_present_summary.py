"""Headline and summary (issue 12): whole contracts first, side effects, the premium given up,
scenario sizes, out-of-sample effectiveness per factor, frequency words, no invented marks.

The records below carry the keys of the record contract (docs/interface.md) with values set
in the test; each check is that the terminal and the report say what the record says, and
nothing the record does not say (common practice for presentation tests: golden phrases).
"""

from __future__ import annotations

import io
import re

import pytest

from hedgekit.present import document, terminal
from hedgekit.present.fmt import fmt, pct
from hedgekit.present.report import render_html

from .test_report import demo_run


def _texts(run: dict) -> tuple[str, str]:
    con = terminal.make_console(io.StringIO(), width=100)
    terminal.show_run(con, run)
    doc = document.build_document(run)
    html = render_html(doc, {p.key: b"\x89PNG" for p in doc.plots()})
    return con.file.getvalue(), html


def _summary_text(run: dict) -> str:
    sec = document.summary_section(run)
    return "\n".join(b.text if isinstance(b, document.Para) else "\n".join(b.items)
                     for b in sec.blocks if isinstance(b, document.Para | document.Bullets))


def test_whole_contracts_lead_and_zero_legs_are_named() -> None:
    run = demo_run()
    h = run["hedge"]
    leg = next(iter(h["ticket"]))
    h["ticket"][leg]["contracts"] = 0
    h["zero_legs"] = [leg]
    text = _summary_text(run)
    assert f"Rounded to zero contracts, so not traded: {leg}" in text
    assert pct(h["positions"][leg], 2) in text          # its continuous weight, said once
    term, html = _texts(run)
    assert "Overlay in whole contracts" in term and "With the overlay, whole contracts" in html


def test_side_effects_with_significance_before_and_after() -> None:
    run = demo_run()
    run["hedge"].update(side_effects=["rf"], not_significant_neutralised=["term"],
                        side_effects_detail={"rf": {"before": -0.004, "after": -0.027, "se_before": 0.008,
                                                    "se_after": 0.009, "marks_before": "",
                                                    "marks_after": "***"}})
    text = _summary_text(run)
    assert "rf \u22120.004 to \u22120.027***" in text
    assert "Neutralised although not significant before the hedge: term" in text
    term, html = _texts(run)
    assert "Side effects" in term and "Side effects" in html
    run["hedge"]["side_effects"] = []
    assert "moves no other exposure by more than its standard error" in _summary_text(run)


@pytest.mark.parametrize("distinct", [False, True])
def test_premium_given_up_with_its_interval(distinct: bool) -> None:
    run = demo_run()
    run["hedge"].update(premium_given_up=-0.012, premium_given_up_se=0.01,
                        premium_given_up_interval=[-0.0316, 0.0076],
                        premium_given_up_distinct_from_zero=distinct)
    text = _summary_text(run)
    assert "95 % interval [\u22123.16 %, 0.76 %]" in text
    assert ("cannot be told from zero" in text) is (not distinct)


def test_premium_line_absent_without_the_key() -> None:
    run = demo_run()
    run["hedge"].pop("premium_given_up")
    assert "Premium given up" not in _summary_text(run)


def test_scenarios_show_their_size_and_one_label() -> None:
    run = demo_run()
    for i, row in enumerate(run["stress"]["scenarios"]):
        row.update(label=f"scenario label {i}", largest_sd=21.6 + i, sample_max_sd=5.2)
    table = document.scenario_table(run)[0]
    assert table.columns[2:4] == ("Size, sd", "Largest in sample, sd")
    assert [r[0] for r in table.rows] == [f"scenario label {i}" for i in range(len(table.rows))]
    assert table.rows[0][2] == "21.6" and table.rows[0][3] == "5.2"
    assert "a 21.6-sd surprise (the largest in the sample: 5.2 sd)" in _summary_text(run) or \
        "(the largest in the sample: 5.2 sd)" in _summary_text(run)


def test_effectiveness_by_factor_negative_called_out_and_null_explained() -> None:
    run = demo_run()
    run["backtest"] = {"effectiveness": 0.38, "effectiveness_neutralised": 0.41, "neutralised": ["term", "def"],
                       "effectiveness_by_factor": {"term": 0.9, "def": -0.329, "rf": None},
                       "effectiveness_note": {"rf": "unhedged variance near zero"}}
    run["meta"]["neutralise"] = ["term", "def"]
    text = _summary_text(run)
    assert f"def {pct(-0.329, 1)} (the hedge made it worse)" in text
    sec = document.backtest_section(run)
    table = next(b for b in sec.blocks if isinstance(b, document.Table) and "by factor" in b.caption)
    rows = {r[0]: r for r in table.rows}
    assert rows["rf"][2] == document.DASH and rows["rf"][3] == "unhedged variance near zero"
    assert rows["def"][3] == "the overlay added variance"
    assert "\u22123,142" not in "".join(_texts(run))


def test_quarterly_words_everywhere() -> None:
    run = demo_run()
    run["meta"].update(frequency="quarterly", period="quarter", period_plural="quarters")
    run["warnings"] = []
    run["stress"]["replay"] = {"quarters": [{"ranked_by": "book", "date": "2008Q4", "model_unhedged": -0.2,
                                             "model_hedged": -0.18, "realised": -0.22}]}
    term, html = _texts(run)
    for text in (term, html):
        assert "month" not in text.lower()
        assert "worst quarters of the sample" in text


def test_no_marks_where_the_record_gives_none() -> None:
    run = demo_run()
    run["exposures"].pop("portfolio_marks")
    table = document.headline_table(run)
    for row in table.rows:
        assert "*" not in row[1] and row[1] == fmt(run["exposures"]["portfolio"][row[0]])
    assert not re.search(r"\d\*", "".join(" ".join(r) for r in table.rows))
