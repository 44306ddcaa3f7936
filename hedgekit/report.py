"""The quarterly exposure report: HTML and Markdown from the run dictionary.

The run dictionary is the merged JSON of the stages (``meta``, ``states``,
``exposures``, ``premia``, ``hedge``, ``stress``, ``backtest``, ``warnings``,
``cautions``; see /work/shared/interface.md).  Any stage may be missing (``None``);
a section is shown only when its data are present, and extra keys are read with
``.get``.

The report is built in three steps, all in memory: :func:`build_document` turns the
run into a neutral document (sections of paragraphs, tables and figures, text kept
unescaped), :func:`render_html` and :func:`render_markdown` turn that into text
(every user-supplied string escaped there, once), and :func:`write_report` writes the
files atomically: each goes to a temporary file in the target folder and is moved into
place with ``os.replace`` only after every file has been written, so a failure at any
point leaves the earlier report as it was.

The HTML is self-contained: inline CSS, figures as PNG data URIs, no script and no
external reference; it prints on A4 and Letter (print CSS, no page break inside a
table or figure).
"""

from __future__ import annotations

import base64
import contextlib
import html
import math
import os
import re
import tempfile
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from . import plots
from .errors import InputError

FORMATS = ("html", "md")

# ---------------------------------------------------------------------------------------
# The document model: plain text, escaped only by the renderers.


@dataclass(frozen=True)
class Para:
    """A paragraph; ``kind`` is "p", "note" (small print) or "alert" (a highlighted warning)."""

    text: str
    kind: str = "p"


@dataclass(frozen=True)
class Bullets:
    items: tuple[str, ...]


@dataclass(frozen=True)
class Table:
    """A table of text cells; ``numeric`` marks right-aligned columns."""

    columns: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    caption: str = ""
    numeric: tuple[bool, ...] = ()
    note: str = ""

    def compact(self) -> Table:
        """The table without columns (after the first) that are empty in every row."""
        keep = [j for j in range(len(self.columns))
                if j == 0 or any(r[j] not in (DASH, "") for r in self.rows) or not self.rows]
        if len(keep) == len(self.columns):
            return self
        numeric = self.numeric or (False,) * len(self.columns)
        return Table(tuple(self.columns[j] for j in keep),
                     tuple(tuple(r[j] for j in keep) for r in self.rows), self.caption,
                     tuple(numeric[j] for j in keep), self.note)


@dataclass(frozen=True)
class Plot:
    """A figure: ``key`` names the PNG file next to the Markdown report."""

    key: str
    png: bytes
    caption: str


@dataclass(frozen=True)
class Tiles:
    """Key figures of the summary: (label, value) pairs."""

    items: tuple[tuple[str, str], ...]


Block = Para | Bullets | Table | Plot | Tiles


@dataclass(frozen=True)
class Section:
    key: str
    title: str
    blocks: tuple[Block, ...]


@dataclass(frozen=True)
class Document:
    title: str
    subtitle: str
    sections: tuple[Section, ...]
    notes: tuple[str, ...] = field(default_factory=tuple)

    def plots(self) -> list[Plot]:
        return [b for s in self.sections for b in s.blocks if isinstance(b, Plot)]


# ---------------------------------------------------------------------------------------
# Number formatting (missing values print as an en dash).

DASH = "\u2013"
MINUS = "\u2212"


def _num(x: Any) -> float | None:
    if x is None or isinstance(x, bool):
        return None
    try:
        v = float(x)
    except (TypeError, ValueError):
        return None
    return None if math.isnan(v) else v


def _signed(text: str) -> str:
    return text.replace("-", MINUS, 1) if text.startswith("-") else text


def fmt(x: Any, digits: int = 3, *, plus: bool = False) -> str:
    v = _num(x)
    if v is None:
        return DASH
    if math.isinf(v):
        return "inf" if v > 0 else MINUS + "inf"
    if round(v, digits) == 0:
        v = 0.0  # no "-0.000"
    return _signed(f"{v:{'+' if plus else ''},.{digits}f}")


def pct(x: Any, digits: int = 2, *, scale: float = 100.0, plus: bool = False) -> str:
    v = _num(x)
    return DASH if v is None else fmt(v * scale, digits, plus=plus) + " %"


def bp(x: Any, digits: int = 1) -> str:
    v = _num(x)
    return DASH if v is None else fmt(v * 1e4, digits) + " bp"


def money(x: Any, currency: str = "", *, short: bool = False) -> str:
    v = _num(x)
    if v is None:
        return DASH
    if short:
        for size, suffix in ((1e9, "bn"), (1e6, "m"), (1e3, "k")):
            if abs(v) >= size:
                text = fmt(v / size, 1) + suffix
                break
        else:
            text = fmt(v, 0)
    else:
        text = fmt(v, 0)
    return f"{currency} {text}".strip()


def pvalue_normal(t: float | None) -> float | None:
    """Two-sided p-value of a t-statistic under the normal approximation: erfc(|t|/√2)."""
    return None if t is None else math.erfc(abs(t) / math.sqrt(2.0))


def stars(p: float | None) -> str:
    """*** p < 0.01, ** p < 0.05, * p < 0.10 (common practice)."""
    if p is None:
        return ""
    return "***" if p < 0.01 else "**" if p < 0.05 else "*" if p < 0.10 else ""


def _ratio(a: Any, b: Any) -> float | None:
    a, b = _num(a), _num(b)
    return None if a is None or b is None or b == 0 else a / b


def _get(d: Mapping | None, *path: str, default: Any = None) -> Any:
    for key in path:
        if not isinstance(d, Mapping) or key not in d:
            return default
        d = d[key]
    return d


def _nice(key: str) -> str:
    return str(key).replace("_", " ")


# ---------------------------------------------------------------------------------------
# Building the document from the run dictionary.


def _periods_per_year(meta: Mapping) -> int:
    return 4 if str(meta.get("frequency", "monthly")).lower().startswith("q") else 12


def _factors(run: Mapping) -> list[str]:
    for stage, key in (("exposures", "factors"), ("states", "variables"), ("stress", "factors")):
        names = _get(run, stage, key)
        if names:
            return [str(f) for f in names]
    premia = _get(run, "premia", "factors") or []
    return [str(f) for f in premia if f != "const"]


def _t_of(est: Mapping | None, se: Mapping | None, f: str) -> float | None:
    return _ratio(_get(est, f), _get(se, f))


def _summary(run: Mapping) -> Section:
    meta = run.get("meta") or {}
    ccy = str(meta.get("currency") or "")
    exposures = run.get("exposures") or {}
    hedge = run.get("hedge") or {}
    stress = run.get("stress") or {}
    periods = meta.get("periods")
    unit = "quarters" if _periods_per_year(meta) == 4 else "months"
    tiles = [
        ("Book", str(meta.get("fund") or "unnamed book")),
        ("Net asset value", money(meta.get("nav"), ccy, short=True)),
        ("Sample", f"{meta.get('sample_start', DASH)} to {meta.get('sample_end', DASH)}"
                   + (f" ({periods} {unit})" if periods else "")),
    ]
    if hedge:
        tiles.append(("Overlay", str(hedge.get("status") or DASH)))
        if hedge.get("tracking_error") is not None:
            tiles.append(("Tracking error, a year", pct(hedge.get("tracking_error"))))
    backtest = run.get("backtest") or {}
    if backtest.get("effectiveness_neutralised") is not None:
        tiles.append(("Walk-forward effectiveness, targeted factors",
                      pct(backtest.get("effectiveness_neutralised"), 1)))
    if len(tiles) < 6:
        tiles.append(("Frequency", str(meta.get("frequency") or "monthly")))
    blocks: list[Block] = [Tiles(tuple(tiles))]

    factors = _factors(run)
    book = exposures.get("portfolio") or {}
    se = exposures.get("portfolio_hac_se") or exposures.get("portfolio_se") or {}
    if book:
        after = hedge.get("exposure_after") or {}
        rows = []
        for f in factors:
            t = _t_of(book, se, f)
            p = pvalue_normal(t)
            rows.append((f, fmt(book.get(f)), fmt(t, 2), _significance(p),
                         fmt(after.get(f)) if after else DASH))
        blocks.append(Table(("Factor", "Exposure (beta)", "t-statistic", "Significance",
                             "With the overlay"), tuple(rows),
                            caption="Headline exposures of the book",
                            numeric=(False, True, True, False, True),
                            note=_se_note(exposures)))
    if hedge:
        if str(hedge.get("status") or "") == "unreachable":
            names = ", ".join(str(f) for f in hedge.get("unreachable") or []) or "some factors"
            blocks.append(Para(f"The hedge targets cannot be reached for {names}; the overlay shown "
                               "is the closest reachable one.", "alert"))
        blocks.append(Bullets(tuple(_hedge_lines(run))))
    worst = _worst_scenario(stress, ccy)
    if worst:
        blocks.append(Para(worst))
    return Section("summary", "Summary", tuple(blocks))


def _significance(p: float | None) -> str:
    if p is None:
        return DASH
    level = "at 1 %" if p < 0.01 else "at 5 %" if p < 0.05 else "at 10 %" if p < 0.10 else None
    shown = "p < 0.001" if p < 0.001 else f"p = {p:.3f}"
    return f"significant {level} ({shown})" if level else f"not significant (p = {p:.2f})"


def _se_note(exposures: Mapping) -> str:
    if exposures.get("portfolio_hac_se") or exposures.get("hac_lags") is not None:
        lags = exposures.get("hac_lags")
        return ("t-statistics use Newey-West (HAC) standard errors"
                + (f" with {lags} lags" if lags is not None else "")
                + "; p-values from the normal approximation.")
    return "t-statistics use the exposure stage's standard errors; p-values from the normal approximation."


def _positions(hedge: Mapping) -> dict[str, float]:
    return {str(k): v for k, v in (hedge.get("positions") or {}).items() if _num(v)}


def _hedge_lines(run: Mapping) -> list[str]:
    meta = run.get("meta") or {}
    ccy = str(meta.get("currency") or "")
    nav = _num(meta.get("nav"))
    hedge = run.get("hedge") or {}
    contracts = hedge.get("contracts") or {}
    lines = []
    positions = sorted(_positions(hedge).items(), key=lambda kv: -abs(float(kv[1])))
    legs = []
    for name, w in positions[:3]:
        side = "buy" if w > 0 else "sell"
        n = contracts.get(name)
        count = f"{abs(int(n)):,} " if _num(n) is not None else ""
        amount = f", {money(abs(w) * nav, ccy, short=True)}" if nav else ""
        legs.append(f"{side} {count}{name} ({fmt(w, 3, plus=True)} of NAV{amount})")
    if positions:
        gross = sum(abs(float(w)) for _, w in positions)
        extra = len(positions) - 3
        more = f"; {extra} smaller leg{'s' if extra > 1 else ''} in the ticket" if extra > 0 else ""
        lines.append(f"Overlay of {len(positions)} legs, gross {fmt(gross, 2)} \u00d7 NAV: "
                     + "; ".join(legs) + more + ".")
    else:
        lines.append("Overlay: no position.")
    before = hedge.get("exposure_before") or (run.get("exposures") or {}).get("portfolio") or {}
    after = hedge.get("exposure_after") or {}
    moved = [f for f in (meta.get("neutralise") or [])] or [
        f for f in after if abs((_num(after.get(f)) or 0) - (_num(before.get(f)) or 0)) > 1e-9]
    if after and moved:
        lines.append("Exposure moved: " + "; ".join(
            f"{f} {fmt(before.get(f))} to {fmt(after.get(f))}" for f in moved) + ".")
    cost_bits = []
    if hedge.get("tracking_error") is not None:
        cost_bits.append(f"tracking error {pct(hedge.get('tracking_error'))} a year")
    if hedge.get("cost") is not None:
        cost_bits.append(f"trading cost {bp(hedge.get('cost'))} of NAV")
    if hedge.get("premium_given_up") is not None:
        cost_bits.append(f"premium given up {pct(hedge.get('premium_given_up'))} a year")
    if cost_bits:
        lines.append("Costs: " + "; ".join(cost_bits) + ".")
    return lines


def _scenario_pnl(row: Mapping, side: str) -> tuple[float | None, float | None]:
    """(return, currency) P&L of one scenario row, ``side`` "unhedged" or "hedged"."""
    nested = _get(row, "pnl", side)
    if isinstance(nested, Mapping):
        return _num(nested.get("return")), _num(nested.get("currency"))
    alias = {"unhedged": ("before", "pnl_before", "unhedged"), "hedged": ("after", "pnl_after", "hedged")}
    for key in alias[side]:
        if key in row:
            return _num(row.get(key)), _num(row.get(f"{key}_ccy"))
    return None, None


def _scenario_label(row: Mapping) -> str:
    name = str(row.get("name") or row.get("scenario") or "scenario")
    reading = row.get("reading")
    return f"{name} ({reading})" if reading else name


def _pnl_cell(ret: float | None, ccy_amount: float | None) -> str:
    if ret is None:
        return DASH
    return pct(ret) + (f" ({money(ccy_amount, short=True)})" if ccy_amount is not None else "")


def _worst_scenario(stress: Mapping, ccy: str) -> str | None:
    rows = [r for r in (stress.get("scenarios") or []) if _scenario_pnl(r, "unhedged")[0] is not None]
    if not rows:
        return None
    worst = min(rows, key=lambda r: _scenario_pnl(r, "unhedged")[0])
    r0, c0 = _scenario_pnl(worst, "unhedged")
    r1, c1 = _scenario_pnl(worst, "hedged")
    text = (f"Worst scenario: {_scenario_label(worst)}, {pct(r0)} of NAV ({money(c0, ccy, short=True)}) "
            f"as held")
    if r1 is not None:
        text += f", {pct(r1)} ({money(c1, ccy, short=True)}) with the overlay"
    return text + "."


def _exposure_section(run: Mapping) -> Section | None:
    exposures = run.get("exposures") or {}
    book = exposures.get("portfolio")
    if not book:
        return None
    hedge = run.get("hedge") or {}
    factors = _factors(run)
    se = exposures.get("portfolio_se") or {}
    hac = exposures.get("portfolio_hac_se") or {}
    after = hedge.get("exposure_after") or {}
    se_after, how = plots.exposure_se_after(exposures, hedge) if after else ({}, "")
    sd = exposures.get("factor_sd") or {}
    blocks: list[Block] = [Plot("exposures", plots.exposure_chart(exposures, hedge or None),
                                "Exposure of the book to each factor, 95 % intervals (estimate "
                                "\u00b1 1.96 standard errors)"
                                + (f"; after the overlay: {how}" if after else "") + ".")]
    columns = ["Factor", "Exposure", "Std. error", "95 % interval"]
    if hac:
        columns.append("HAC std. error")
    if sd:
        columns.append("1 sd shock, % of NAV")
    if after:
        columns += ["With the overlay", "95 % interval"]
    rows = []
    for f in factors:
        b, s = _num(book.get(f)), _num(se.get(f))
        row = [f, fmt(b), fmt(s), _interval(b, s)]
        if hac:
            row.append(fmt(hac.get(f)))
        if sd:
            v = _num(sd.get(f))
            row.append(pct(None if b is None or v is None else b * v))
        if after:
            a = _num(after.get(f))
            row += [fmt(a), _interval(a, _num(se_after.get(f)))]
        rows.append(tuple(row))
    blocks.append(Table(tuple(columns), tuple(rows), caption="Book exposures (betas)",
                        numeric=(False,) + (True,) * (len(columns) - 1),
                        note="A beta is the book's excess return per unit of the factor; every "
                             "orthogonal factor shares the market innovation's standard deviation."))
    assets = exposures.get("assets") or {}
    if assets:
        held = exposures.get("holdings") or {}
        weight = (lambda a: pct(held.get(a), 1) if held.get(a) is not None else "") if held else None
        rows = tuple((str(a), *(fmt(_get(v, f)) for f in factors),
                      *((weight(a),) if weight else ())) for a, v in assets.items())
        blocks.append(Table(("Asset", *factors, *(("Held, % of NAV",) if weight else ())), rows,
                            caption="Test-asset betas",
                            numeric=(False,) + (True,) * (len(factors) + (1 if weight else 0))))
    inst = exposures.get("instruments") or {}
    if inst:
        rows = tuple((str(a), *(fmt(_get(v, f)) for f in factors)) for a, v in inst.items())
        blocks.append(Table(("Instrument", *factors), rows, caption="Hedge-instrument betas",
                            numeric=(False,) + (True,) * len(factors)))
    return Section("exposures", "Exposures before and after the overlay", tuple(blocks))


def _interval(b: float | None, s: float | None) -> str:
    if b is None or s is None:
        return DASH
    return f"[{fmt(b - plots.Z95 * s)}, {fmt(b + plots.Z95 * s)}]"


def _rolling_section(run: Mapping) -> Section | None:
    exposures = run.get("exposures") or {}
    rolling = exposures.get("rolling") or {}
    dates = rolling.get("dates") or []
    series = rolling.get("portfolio") or {}
    if not dates or not any(any(_num(v) is not None for v in vals) for vals in series.values()):
        return None
    rows = []
    for f, vals in series.items():
        valid = [(d, v) for d, v in zip(dates, vals, strict=False) if _num(v) is not None]
        if not valid:
            continue
        nums = [float(v) for _, v in valid]
        rows.append((str(f), fmt(nums[-1]), str(valid[-1][0]), fmt(min(nums)), fmt(max(nums)),
                     fmt(nums[-1] - nums[-13]) if len(nums) > 12 else DASH))
    blocks: tuple[Block, ...] = (
        Plot("rolling", plots.rolling_chart(exposures),
             "Rolling exposures of the book, each point estimated on the trailing window ending "
             "that month (gaps where a window has too few valid months)."),
        Table(("Factor", "Latest", "Window ending", "Lowest", "Highest", "Change over 12 windows"),
              tuple(rows), caption="Rolling exposure history",
              numeric=(False, True, False, True, True, True)),
    )
    return Section("rolling", "Rolling exposure history", blocks)


def _premia_section(run: Mapping) -> Section | None:
    premia = run.get("premia") or {}
    lam = premia.get("lambda")
    if not lam:
        return None
    ppy = _periods_per_year(run.get("meta") or {})
    names = [str(f) for f in (premia.get("factors") or lam)]
    t_nw = premia.get("t_nw") or {}
    se_nw = premia.get("se_nw") or {}
    rows = []
    for f in names:
        lf = _num(lam.get(f))
        t_fm = _num(_get(premia, "t_fm", f))
        t_sh = _num(_get(premia, "t_shanken", f))
        tn = _num(t_nw.get(f)) if t_nw else _ratio(lf, se_nw.get(f))
        mark = stars(pvalue_normal(t_sh if t_sh is not None else t_fm))
        rows.append((f, pct(lf), pct(None if lf is None else lf * ppy),
                     pct(_get(premia, "se_fm", f), 3), fmt(t_fm, 2), fmt(tn, 2),
                     pct(_get(premia, "se_shanken", f), 3), fmt(t_sh, 2) + mark))
    columns = ("Factor", "Premium a period", "Premium a year", "Std. error (FM)", "t (FM)",
               "t (Newey-West)", "Std. error (Shanken)", "t (Shanken)")
    blocks: list[Block] = []
    if any(f != "const" for f in names):
        blocks.append(Plot("premia", plots.premia_chart(premia, periods_per_year=ppy),
                           "Prices of risk a year with 95 % intervals: plain Fama-MacBeth and "
                           "Shanken-corrected standard errors."))
    note = ("Premia are per unit of beta. Stars use the Shanken t-statistic: *** p < 0.01, "
            "** p < 0.05, * p < 0.10.")
    if premia.get("betas_used"):
        note += f" Betas used: {premia['betas_used']}."
    if premia.get("nw_lags") is not None:
        note += f" Newey-West lags: {premia['nw_lags']}."
    if premia.get("shanken_approximate"):
        note += " With rolling betas the Shanken correction is the approximate multiplier form."
    blocks.append(Table(columns, tuple(rows), caption="Fama-MacBeth prices of risk",
                        numeric=(False,) + (True,) * 7, note=note))
    facts = []
    if premia.get("r2_cs") is not None:
        facts.append(f"Cross-sectional R\u00b2 on average returns: {fmt(premia.get('r2_cs'), 3)}.")
    if premia.get("n_periods") is not None:
        unit = "Quarters" if ppy == 4 else "Months"
        facts.append(f"{unit} used: {premia.get('n_periods')}; skipped: {premia.get('n_skipped', 0)}"
                     + (f"; test assets: {premia['n_assets']}" if premia.get("n_assets") else "") + ".")
    for key, label in (("pricing_error_test", "Pricing errors jointly zero"),
                       ("pricing_error_test_shanken", "The same test with the Shanken adjustment")):
        test = premia.get(key) or {}
        if test:
            facts.append(f"{label}: \u03c7\u00b2 = {fmt(test.get('stat'), 2)} on "
                         f"{test.get('df', DASH)} degrees of freedom, p = {fmt(test.get('pvalue'), 3)}.")
    grs = premia.get("grs") or {}
    if isinstance(grs, Mapping) and grs:
        facts.append(f"GRS test: F = {fmt(grs.get('stat'), 2)}, p = {fmt(grs.get('pvalue'), 3)}.")
    book_premium = premia.get("book_premium") or {}
    if isinstance(book_premium, Mapping) and book_premium:
        facts.append("The book's expected premium by exposure (a year): " + "; ".join(
            f"{f} {pct(_get(v, 'annual') if isinstance(v, Mapping) else v)}"
            for f, v in book_premium.items()) + ".")
    if facts:
        blocks.append(Bullets(tuple(facts)))
    return Section("premia", "Prices of risk", tuple(blocks))


_TICKET_HEADERS = {
    "instrument": "Instrument", "side": "Side", "weight": "Weight of NAV", "notional": "Notional",
    "contracts": "Contracts", "multiplier": "Multiplier", "price": "Price",
    "cost": "Cost", "cost_bps": "Cost (bp)", "current": "Current", "trade": "Trade",
}


def _hedge_section(run: Mapping) -> Section | None:
    hedge = run.get("hedge") or {}
    if not hedge:
        return None
    meta = run.get("meta") or {}
    ccy = str(meta.get("currency") or "")
    nav = _num(meta.get("nav"))
    blocks: list[Block] = []
    status = str(hedge.get("status") or "")
    if status == "unreachable":
        blocks.append(Para("Targets not reachable for: " + ", ".join(
            str(f) for f in hedge.get("unreachable") or []) + ". The overlay below is the closest "
            "reachable one; it does not meet every target.", "alert"))
    if hedge.get("message"):
        blocks.append(Para(str(hedge["message"]), "note"))
    ticket = hedge.get("ticket")
    if isinstance(ticket, Mapping) and ticket and all(isinstance(v, Mapping) for v in ticket.values()):
        blocks.append(_ticket_table(ticket, ccy))
    elif isinstance(ticket, list) and ticket and isinstance(ticket[0], Mapping):
        keys = list(dict.fromkeys(k for row in ticket for k in row))
        rows = tuple(tuple(_cell(row.get(k), k, ccy) for k in keys) for row in ticket)
        numeric = tuple(k not in ("instrument", "side") and not isinstance(ticket[0].get(k), str)
                        for k in keys)
        blocks.append(Table(tuple(_TICKET_HEADERS.get(k, _nice(k)) for k in keys), rows,
                            caption="Hedge ticket", numeric=numeric))
    else:
        contracts = hedge.get("contracts") or {}
        notional = hedge.get("notional") or {}
        rows = []
        for name, w in (hedge.get("positions") or {}).items():
            wv = _num(w)
            n = notional.get(name) if notional else (None if wv is None or nav is None else wv * nav)
            side = DASH if not wv else "buy" if wv > 0 else "sell"
            c = contracts.get(name)
            rows.append((str(name), side, fmt(wv, 4), money(n, ccy),
                         DASH if _num(c) is None else f"{int(c):,}".replace("-", MINUS)))
        if rows:
            blocks.append(Table(("Instrument", "Side", "Weight of NAV", "Notional", "Contracts"),
                                tuple(rows), caption="Hedge ticket",
                                numeric=(False, False, True, True, True)))
    factors = _factors(run)
    before = hedge.get("exposure_before") or (run.get("exposures") or {}).get("portfolio") or {}
    after = hedge.get("exposure_after") or {}
    rounded = hedge.get("exposure_after_rounded") or {}
    if after:
        remaining = hedge.get("remaining") or {} if status == "unreachable" else {}
        cols = ["Factor", "Before", "Target", "After"] + (["After rounding"] if rounded else []) \
            + (["Short of the target by"] if remaining else [])
        targets = _targets(meta, hedge)
        rows = []
        for f in factors:
            row = [f, fmt(before.get(f)), targets.get(f, DASH), fmt(after.get(f))]
            if rounded:
                row.append(fmt(rounded.get(f)))
            if remaining:
                row.append(fmt(remaining.get(f)) if f in remaining else DASH)
            rows.append(tuple(row))
        blocks.append(Table(tuple(cols), tuple(rows), caption="Exposure the overlay leaves",
                            numeric=(False, True, False) + (True,) * (len(cols) - 3)))
    facts = []
    if hedge.get("tracking_error") is not None:
        te = f"Tracking error of the hedged against the unhedged book: {pct(hedge['tracking_error'])} a year"
        if hedge.get("tracking_error_rounded") is not None:
            te += f" ({pct(hedge['tracking_error_rounded'])} after rounding to whole contracts)"
        facts.append(te + ".")
    if hedge.get("cost") is not None:
        cost = _num(hedge.get("cost"))
        facts.append(f"Trading cost: {bp(cost)} of NAV"
                     + (f" ({money(cost * nav, ccy)})" if cost is not None and nav else "") + ".")
    if hedge.get("premium_given_up") is not None:
        facts.append(f"Premium given up by the overlay: {pct(hedge['premium_given_up'])} a year "
                     "(the prices of risk of the exposures it removes).")
    binding = hedge.get("binding")
    if binding:
        facts.append("Limits binding at the solution: " + ", ".join(
            str(b) for b in (binding if isinstance(binding, list) else [binding])) + ".")
    if facts:
        blocks.append(Bullets(tuple(facts)))
    if not blocks:
        return None
    return Section("hedge", "The overlay and its ticket", tuple(blocks))


def _ticket_table(ticket: Mapping[str, Mapping], ccy: str) -> Table:
    """The hedge stage's ticket ({instrument: {weight, contracts, contract_value, ...}})."""
    rows = []
    has_current = any(_num(r.get("current")) for r in ticket.values())
    for name, r in ticket.items():
        w, n = _num(r.get("weight")), _num(r.get("contracts"))
        trade = _num(r.get("trade"))
        side_of = trade if trade is not None else w
        side = DASH if not side_of else "buy" if side_of > 0 else "sell"
        if r.get("excluded"):
            side = "excluded"
        unit = _num(r.get("contract_value"))
        row = [str(name), side, fmt(w, 4), DASH if n is None else f"{int(n):,}".replace("-", MINUS),
               money(unit), money(None if n is None or unit is None else n * unit),
               fmt(r.get("weight_rounded"), 4)]
        if has_current:
            row += [fmt(r.get("current"), 4), fmt(trade, 4)]
        row.append(money(r.get("cost")))
        rows.append(tuple(row))
    cols = ["Instrument", "Side", "Weight of NAV", "Contracts", f"Contract value, {ccy}".rstrip(", "),
            f"Notional in contracts, {ccy}".rstrip(", "), "Weight after rounding"]
    if has_current:
        cols += ["Current weight", "Trade"]
    cols.append(f"Cost, {ccy}".rstrip(", "))
    return Table(tuple(cols), tuple(rows), caption="Hedge ticket",
                 numeric=(False, False) + (True,) * (len(cols) - 2),
                 note="Side is the trade to make; contracts are the weight times NAV over one "
                      "contract's value (multiplier times price), rounded to whole contracts.")


def _targets(meta: Mapping, hedge: Mapping) -> dict[str, str]:
    out: dict[str, str] = {}
    for f in meta.get("neutralise") or []:
        out[str(f)] = fmt(_get(hedge, "targets", str(f), default=0.0))
    for f, band in (meta.get("keep") or {}).items():
        if isinstance(band, Sequence) and len(band) == 2:
            out[str(f)] = f"[{fmt(band[0])}, {fmt(band[1])}]"
    return out


def _cell(value: Any, key: str, ccy: str) -> str:
    if isinstance(value, str):
        return value
    if value is None:
        return DASH
    if key in ("contracts",) and _num(value) is not None:
        return f"{int(value):,}".replace("-", MINUS)
    if key in ("notional", "cost", "trade") and _num(value) is not None:
        return money(value, ccy)
    if key in ("weight", "current"):
        return fmt(value, 4)
    if isinstance(value, Mapping | list):
        return ", ".join(f"{k} {fmt(v)}" for k, v in value.items()) if isinstance(value, Mapping) \
            else ", ".join(map(str, value))
    return fmt(value, 4 if abs(_num(value) or 0) < 10 else 2)


def _stress_section(run: Mapping) -> Section | None:
    stress = run.get("stress") or {}
    scenarios = [r for r in stress.get("scenarios") or [] if isinstance(r, Mapping)]
    if not scenarios:
        return None
    ccy = str((run.get("meta") or {}).get("currency") or "")
    rows, chart_rows = [], []
    for r in scenarios:
        r0, c0 = _scenario_pnl(r, "unhedged")
        r1, c1 = _scenario_pnl(r, "hedged")
        lo, hi = _num(_get(r, "pnl", "unhedged", "lo")), _num(_get(r, "pnl", "unhedged", "hi"))
        held = pct(r0)
        if r0 is not None and lo is not None and hi is not None:
            held = f"{fmt(r0 * 100, 2)} \u00b1 {fmt((hi - lo) * 50, 2)} %"
        name = str(r.get("name") or r.get("scenario") or "scenario")
        rows.append((str(r.get("description") or name), str(r.get("reading") or DASH), held,
                     money(c0, short=True), pct(r1), money(c1, short=True)))
        chart_rows.append({"name": _scenario_label(r), "before": r0, "after": r1})
    conf = _num(stress.get("confidence"))
    level = int(round((conf or 0.95) * 100))
    cur = f", {ccy}" if ccy else ", currency"
    blocks: list[Block] = [
        Plot("stress", plots.stress_chart(chart_rows, before_key="before", after_key="after",
                                          scale=100.0, unit="% of NAV"),
             "Scenario P&L of the book as held and with the overlay."),
        Table(("Scenario", "Reading", "As held, % of NAV", f"As held{cur}",
               "With the overlay, % of NAV", f"With the overlay{cur}"),
              tuple(rows), caption="Stress scenarios",
              numeric=(False, False, True, True, True, True),
              note=f"\u00b1: half-width of the {level} % interval from the estimation error of the "
                   "betas only. 'isolated': the other state variables do not move; 'comove': they "
                   "move by their typical co-movement with the named ones."),
    ]
    replay = _get(stress, "replay", "quarters") or _get(stress, "replay", "months") or []
    book_rows = [r for r in replay if isinstance(r, Mapping) and r.get("ranked_by") == "book"]
    if book_rows:
        unit = "quarters" if _get(stress, "replay", "quarters") else "months"
        rows = tuple((str(r.get("date")), pct(r.get("model_unhedged")), pct(r.get("model_hedged")),
                      pct(r.get("realised"))) for r in book_rows)
        blocks.append(Table(("Period", "State-driven, as held", "State-driven, with the overlay",
                             "Realised"), rows,
                            caption=f"Historical replay: the book's worst {unit} of the sample",
                            numeric=(False, True, True, True)))
    return Section("stress", "Stress scenarios", tuple(blocks))


# Walk-forward series drawn, in this order of preference: the book as held and the book
# with the overlay net of costs (the backtest stage's names first, then common aliases).
_BACKTEST_SERIES = ((("book", "unhedged"), "book as held"),
                    (("hedged_net", "hedged"), "with the overlay, net of costs"))


def _backtest_series(backtest: Mapping) -> tuple[list[str], dict[str, list]]:
    """The walk-forward return series to draw: dates and {label: values}."""
    block = backtest.get("series")
    if not isinstance(block, Mapping) or not block.get("dates"):
        return [], {}
    dates = list(block["dates"])
    out: dict[str, list] = {}
    for keys, label in _BACKTEST_SERIES:
        for key in keys:
            values = block.get(key)
            if isinstance(values, list) and len(values) == len(dates) and any(
                    _num(x) is not None for x in values):
                out[label if key != "hedged" else "with the overlay"] = values
                break
    return dates, out


def _backtest_section(run: Mapping) -> Section | None:
    backtest = run.get("backtest") or {}
    if not backtest:
        return None
    ccy = str((run.get("meta") or {}).get("currency") or "")
    blocks: list[Block] = []
    dates, series = _backtest_series(backtest)
    if dates and series:
        blocks.append(Plot("backtest", plots.backtest_chart(dates, series,
                                                            ylabel="cumulative excess return"),
                           "Walk-forward check: cumulative excess return (sum of monthly returns) of "
                           "the book as held and with the overlay, each decision made with data up "
                           "to its rebalance date only."))
    facts: list[tuple[str, str]] = []
    if backtest.get("effectiveness") is not None:
        facts.append(("Hedge effectiveness, all factors (1 \u2212 hedged/unhedged variance of "
                      "state-driven P&L)", pct(backtest.get("effectiveness"), 1)))
    if backtest.get("effectiveness_neutralised") is not None:
        names = ", ".join(str(f) for f in backtest.get("neutralised") or []) or "neutralised factors"
        facts.append((f"Hedge effectiveness, {names}", pct(backtest.get("effectiveness_neutralised"), 1)))
    for key, label in (("realised_tracking_error", "Realised tracking error, a year"),
                       ("predicted_tracking_error", "Predicted tracking error, a year")):
        if backtest.get(key) is not None:
            facts.append((label, pct(backtest.get(key))))
    if backtest.get("turnover_annual") is not None:
        facts.append(("Turnover a year (gross, fraction of NAV)", fmt(backtest.get("turnover_annual"), 3)))
    elif isinstance(backtest.get("turnover"), int | float):
        facts.append(("Turnover (gross, fraction of NAV)", fmt(backtest.get("turnover"), 3)))
    if backtest.get("costs_paid_annual") is not None:
        facts.append(("Costs paid a year", bp(backtest.get("costs_paid_annual"))))
    if backtest.get("costs_paid_currency") is not None:
        facts.append(("Costs paid over the test", money(backtest.get("costs_paid_currency"), ccy)))
    rebal = backtest.get("rebalance_dates") or []
    if rebal:
        facts.append(("Rebalances", f"{len(rebal)} ({rebal[0]} to {rebal[-1]})"))
    n_out = backtest.get("n_periods", backtest.get("n_months"))
    if n_out is not None:
        label = str(backtest.get("period_label") or "months")
        facts.append((f"{label.capitalize()} out of sample", str(n_out)))
    if backtest.get("n_unreachable"):
        facts.append(("Rebalances that could not reach the targets (closest overlay held)",
                      str(backtest.get("n_unreachable"))))
    if facts:
        blocks.append(Table(("Measure", "Value"), tuple(facts), caption="Walk-forward summary",
                            numeric=(False, True)))
    realised = backtest.get("realised_exposure") or {}
    if realised.get("unhedged") or realised.get("hedged"):
        se = backtest.get("realised_exposure_se") or {}
        factors = list(backtest.get("factors") or realised.get("unhedged") or realised.get("hedged"))
        rows = []
        for f in factors:
            u, h = _num(_get(realised, "unhedged", f)), _num(_get(realised, "hedged", f))
            rows.append((f, fmt(u), _interval(u, _num(_get(se, "unhedged", f))), fmt(h),
                         _interval(h, _num(_get(se, "hedged", f)))))
        blocks.append(Table(("Factor", "As held", "95 % interval", "With the overlay", "95 % interval"),
                            tuple(rows), caption="Realised exposures out of sample",
                            numeric=(False, True, True, True, True),
                            note="Betas of the realised returns on the next period's real-time "
                                 "innovations."))
    by_factor = backtest.get("effectiveness_by_factor") or {}
    if by_factor:
        blocks.append(Table(("Factor", "Effectiveness"),
                            tuple((str(f), pct(v, 1)) for f, v in by_factor.items()),
                            caption="Effectiveness by factor", numeric=(False, True),
                            note="Negative where the overlay adds exposure to a factor it does "
                                 "not target."))
    decisions = backtest.get("decisions") or {}
    if decisions:
        last = list(decisions)[-4:]
        names = list(dict.fromkeys(k for d in last for k in (decisions[d] or {})))
        rows = tuple((n, *(fmt(_get(decisions, d, n), 3) for d in last)) for n in names)
        blocks.append(Table(("Instrument", *map(str, last)), rows,
                            caption="The last overlay decisions (weight of NAV)",
                            numeric=(False,) + (True,) * len(last)))
    if not blocks:
        return None
    return Section("backtest", "Walk-forward check", tuple(blocks))


def _stage_warnings(run: Mapping) -> list[str]:
    out = [str(w) for w in run.get("warnings") or []]
    seen = set(out)
    for stage in ("states", "exposures", "premia", "hedge", "stress", "backtest"):
        out += [f"{stage}: {w}" for w in _get(run, stage, "warnings", default=None) or []
                if str(w) not in seen]
    return list(dict.fromkeys(out))


def _history_section(run: Mapping) -> Section | None:
    """Quarter on quarter: this run against the previous stored run of the same book."""
    hist = run.get("history") or None
    if not hist:
        return None
    prev = str(hist.get("previous_sample_end") or DASH)
    now = str((run.get("meta") or {}).get("sample_end") or DASH)
    blocks: list[Block] = []
    for key, title in (("exposure", "Book exposure"), ("hedge", "Overlay weight (of NAV)")):
        rows = []
        for name, v in (hist.get(key) or {}).items():
            b, a = _num(v.get("before")), _num(v.get("after"))
            rows.append((str(name), fmt(b), fmt(a), fmt(None if a is None or b is None else a - b, plus=True)))
        if rows:
            blocks.append(Table(("Name", f"Data to {prev}", f"Data to {now}", "Change"), tuple(rows),
                                caption=title, numeric=(False, True, True, True)))
    changes = hist.get("changes") or []
    if changes:
        blocks.append(Bullets(tuple(f"{c.get('quantity')} {c.get('name')}: {fmt(c.get('before'))} to "
                                    f"{fmt(c.get('after'))} (limit {fmt(c.get('limit'))})" for c in changes)))
    else:
        blocks.append(Para("No exposure, price of risk or overlay weight moved beyond the change limits "
                           "since the previous run."))
    return Section("history", f"Since the previous run (data to {prev})", tuple(blocks))


def _diagnostics(run: Mapping) -> Section | None:
    blocks: list[Block] = []
    states = run.get("states") or {}
    modulus = _num(states.get("max_eigen_modulus"))
    if modulus is not None:
        lags = states.get("lags")
        text = (f"State VAR{f'({lags})' if lags else ''}: largest modulus of the companion "
                f"matrix's eigenvalues {fmt(modulus, 4)}.")
        if modulus >= 1.0:
            blocks.append(Para(text + " The system is not stationary: innovations, betas and "
                               "scenarios built on it are not reliable.", "alert"))
        elif modulus >= 0.99:
            blocks.append(Para(text + " Close to one: the states are very persistent and "
                               "long-horizon inferences are imprecise.", "p"))
        else:
            blocks.append(Para(text + " Below one: the system is stationary.", "p"))
    r2 = states.get("r2") or {}
    if r2:
        blocks.append(Table(("Equation", "R\u00b2"), tuple((str(k), fmt(v, 3)) for k, v in r2.items()),
                            caption="VAR equations", numeric=(False, True)))
    premia = run.get("premia") or {}
    if premia.get("n_skipped"):
        unit = "quarters" if _periods_per_year(run.get("meta") or {}) == 4 else "months"
        blocks.append(Para(f"{premia['n_skipped']} {unit} were skipped in the cross-sectional step "
                           "(too few usable assets or a rank-deficient design)."))
    exposures = run.get("exposures") or {}
    direct = exposures.get("portfolio_direct") or {}
    gap = exposures.get("gap") or exposures.get("book_gap") or {}
    if direct or gap:
        book = exposures.get("portfolio") or {}
        rows = []
        for f in _factors(run):
            d = _num(direct.get(f)) if direct else None
            g = _num(gap.get(f)) if gap else None
            if g is None and d is not None and _num(book.get(f)) is not None:
                g = float(book[f]) - d
            rows.append((f, fmt(book.get(f)), fmt(d), fmt(g)))
        blocks.append(Table(("Factor", "From holdings", "From the book's returns", "Gap"),
                            tuple(rows), caption="Holdings-based against return-based exposures",
                            numeric=(False, True, True, True),
                            note="A large gap points to holdings that changed over the sample, "
                                 "positions outside the test assets, or fees and cash."))
    warnings = _stage_warnings(run)
    if warnings:
        blocks.append(Bullets(tuple(warnings)))
    meta = run.get("meta") or {}
    prov = [("hedgekit version", str(meta.get("version") or DASH)),
            ("Run at", str(meta.get("run_at") or DASH)),
            ("Configuration", str(meta.get("config") or DASH))]
    prov += [(f"Input {k} (SHA-256)", str(v)[:16] + "\u2026") for k, v in
             (meta.get("input_hashes") or {}).items()]
    blocks.append(Table(("Item", "Value"), tuple(prov), caption="Provenance"))
    return Section("diagnostics", "Diagnostics", tuple(blocks))


METHODS = (
    "State variables follow a VAR estimated equation by equation by OLS (Hamilton 1994, Time "
    "Series Analysis, ch. 11; L\u00fctkepohl 2005, New Introduction to Multiple Time Series "
    "Analysis, ch. 3). Its residuals are orthogonalised in the configured order by Gram-Schmidt, "
    "equivalently M = D L\u207b\u00b9 with L the Cholesky factor of their covariance.",
    "Exposures are time-series betas of excess returns on the market return and the orthogonal "
    "innovations, with Newey-West standard errors (Newey and West 1987, Econometrica; lag choice "
    "from Newey and West 1994, Review of Economic Studies).",
    "Prices of risk are Fama-MacBeth cross-sectional averages (Fama and MacBeth 1973, Journal of "
    "Political Economy; Cochrane 2005, Asset Pricing, rev. ed., ch. 12), with the errors-in-variables "
    "correction of Shanken 1992 (Review of Financial Studies), the cross-sectional R\u00b2 of "
    "Jagannathan and Wang 1996 (Journal of Finance) and the GRS test of Gibbons, Ross and Shanken "
    "1989 (Econometrica).",
    "The overlay solves a convex program: least tracking variance subject to exposure targets and "
    "limits (Boyd and Vandenberghe 2004, Convex Optimization). Covariance shrinkage, when chosen, "
    "follows Ledoit and Wolf 2004 (Journal of Multivariate Analysis).",
    "Stress scenarios map surprises in natural units to orthogonal shocks through M; the walk-forward "
    "check re-estimates everything with data up to each rebalance date only.",
)

CAUTIONS = (
    "This report is decision support, not investment advice. Sizing and execution stay with the "
    "firm's licensed professionals, its model-risk governance and the rules that apply to it.",
    "Every number is a statistical estimate from one sample; relations between state variables and "
    "returns shift across regimes, and past exposures need not hold in the next quarter.",
    "Derivative overlays carry margin, basis, liquidity and counterparty risk that this model does "
    "not measure.",
)


# Words that mark a stage's caution as one of the three standing ones above (advice and
# governance; sample dependence and regimes; derivative risks), so each is said once.
_CAUTION_TOPICS = (("investment advice",), ("regime",), ("counterparty",))


def _merge_cautions(extra: Iterable[str]) -> tuple[str, ...]:
    """The standing cautions, then the stages' own cautions on other topics."""
    out = list(CAUTIONS)
    for text in extra:
        low = text.lower()
        if text in out or any(any(w in low for w in words) for words in _CAUTION_TOPICS):
            continue
        out.append(text)
    return tuple(out)


def build_document(run: Mapping) -> Document:
    """The report's content from the run dictionary (sections only where data are present)."""
    meta = run.get("meta") or {}
    fund = str(meta.get("fund") or "Unnamed book")
    subtitle = (f"Exposure report, data {meta.get('sample_start', DASH)} to "
                f"{meta.get('sample_end', DASH)}")
    builders: tuple[Callable[[Mapping], Section | None], ...] = (
        _summary, _exposure_section, _rolling_section, _premia_section, _hedge_section,
        _stress_section, _backtest_section, _history_section, _diagnostics)
    sections = [s for s in (b(run) for b in builders) if s is not None]
    sections.append(Section("methods", "Methods and sources", (Bullets(METHODS),)))
    extra = [str(c) for c in (run.get("cautions") or [])]
    extra += [str(c) for c in (_get(run, "hedge", "cautions", default=None) or [])]
    sections.append(Section("cautions", "Cautions", (Bullets(_merge_cautions(extra)),)))
    return Document(title=fund, subtitle=subtitle, sections=tuple(sections))


# ---------------------------------------------------------------------------------------
# Rendering.

CSS = """
:root { --ink:#22303c; --muted:#5b6873; --rule:#cfd8dc; --teal:#1f6f78; --ochre:#c8872b;
        --band:#eef4f3; --head:#e3ecea; --zebra:#f7fafa; --alert:#8f2d2d; --alertbg:#fbefec; }
* { box-sizing: border-box; }
html { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
body { margin: 0; color: var(--ink); background: #fff;
       font: 10.5pt/1.45 "DejaVu Sans", "Segoe UI", "Helvetica Neue", Arial, sans-serif; }
main { max-width: 178mm; margin: 0 auto; padding: 8mm 0 14mm; }
header.masthead { border-top: 6px solid var(--teal); background: var(--band); padding: 6mm 7mm 5mm;
                  margin-bottom: 6mm; }
header.masthead .kicker { font-size: 8.5pt; letter-spacing: .12em; text-transform: uppercase;
                          color: var(--teal); margin: 0 0 1mm; }
header.masthead h1 { font: 600 19pt/1.2 Georgia, "DejaVu Serif", serif; margin: 0; }
header.masthead p { margin: 1.5mm 0 0; color: var(--muted); }
nav.toc { font-size: 9pt; color: var(--muted); margin: 0 0 5mm; }
nav.toc span { white-space: nowrap; margin-right: 1.1em; }
section { margin: 0 0 7mm; }
h2 { font: 600 13pt/1.3 Georgia, "DejaVu Serif", serif; border-bottom: 1.5px solid var(--teal);
     padding-bottom: 1mm; margin: 0 0 3mm; break-after: avoid; page-break-after: avoid; }
h2 .num { color: var(--ochre); margin-right: .45em; }
.tiles { display: grid; grid-template-columns: repeat(3, 1fr); gap: 2.5mm; margin: 0 0 4mm; }
.tile { border-left: 3px solid var(--ochre); background: var(--zebra); padding: 2mm 3mm; }
.tile .label { font-size: 8pt; text-transform: uppercase; letter-spacing: .06em; color: var(--muted); }
.tile .value { font-size: 11.5pt; font-weight: 600; overflow-wrap: break-word; }
table { border-collapse: collapse; width: 100%; margin: 0 0 1.5mm; font-size: 9pt;
        break-inside: avoid; page-break-inside: avoid; }
caption { text-align: left; font-weight: 600; padding: 0 0 1.2mm; caption-side: top; }
th { background: var(--head); text-align: left; font-weight: 600; padding: 1.3mm 2mm;
     border-bottom: 1px solid var(--rule); vertical-align: bottom; }
td { padding: 1.1mm 2mm; border-bottom: 1px solid var(--rule); vertical-align: top;
     overflow-wrap: break-word; }
th.n { text-align: right; white-space: normal; }
table.wide { font-size: 8pt; }
table.wide th, table.wide td { padding-left: 1.4mm; padding-right: 1.4mm; }
tbody tr:nth-child(even) td { background: var(--zebra); }
.n { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
.tablewrap { margin: 0 0 4mm; break-inside: avoid; page-break-inside: avoid; }
p.tnote, p.note { font-size: 8.5pt; color: var(--muted); margin: 0 0 3mm; }
p.alert { border-left: 4px solid var(--alert); background: var(--alertbg); color: var(--alert);
          padding: 2mm 3mm; font-weight: 600; }
figure { margin: 0 0 4mm; break-inside: avoid; page-break-inside: avoid; }
figure img { display: block; max-width: 100%; height: auto; border: 1px solid var(--rule); }
figcaption { font-size: 8.5pt; color: var(--muted); margin-top: 1mm; }
ul { margin: 0 0 3mm; padding-left: 5mm; }
li { margin: 0 0 1mm; }
footer { font-size: 8pt; color: var(--muted); border-top: 1px solid var(--rule); padding-top: 2mm; }
@page { margin: 14mm 14mm 16mm; }
@media print {
  main { max-width: none; padding: 0; }
  header.masthead { margin-top: 0; }
  nav.toc { display: none; }
  section { break-inside: auto; }
  a { color: inherit; text-decoration: none; }
}
"""


def _e(text: Any) -> str:
    return html.escape(str(text), quote=True)


def _e_cell(text: Any) -> str:
    """Escaped cell text with a break opportunity after each underscore of an identifier."""
    return _e(text).replace("_", "_<wbr>")


def _html_table(t: Table) -> str:
    t = t.compact()
    numeric = t.numeric or (False,) * len(t.columns)
    head = "".join(f'<th class="{"n" if n else ""}" scope="col">{_e(c)}</th>'
                   for c, n in zip(t.columns, numeric, strict=False))
    body = "".join("<tr>" + "".join(f'<td class="{"n" if n else ""}">{_e_cell(c)}</td>'
                                    for c, n in zip(row, numeric, strict=False)) + "</tr>"
                   for row in t.rows)
    cap = f"<caption>{_e(t.caption)}</caption>" if t.caption else ""
    note = f'<p class="tnote">{_e(t.note)}</p>' if t.note else ""
    wide = ' class="wide"' if len(t.columns) > 6 else ""
    return (f'<div class="tablewrap"><table{wide}>{cap}<thead><tr>{head}</tr></thead>'
            f"<tbody>{body}</tbody></table>{note}</div>")


def _html_block(b: Block) -> str:
    if isinstance(b, Para):
        cls = {"alert": "alert", "note": "note"}.get(b.kind, "")
        return f'<p class="{cls}">{_e(b.text)}</p>' if cls else f"<p>{_e(b.text)}</p>"
    if isinstance(b, Bullets):
        return "<ul>" + "".join(f"<li>{_e(i)}</li>" for i in b.items) + "</ul>"
    if isinstance(b, Table):
        return _html_table(b)
    if isinstance(b, Plot):
        data = base64.b64encode(b.png).decode("ascii")
        return (f'<figure><img src="data:image/png;base64,{data}" alt="{_e(b.caption)}">'
                f"<figcaption>{_e(b.caption)}</figcaption></figure>")
    if isinstance(b, Tiles):
        return '<div class="tiles">' + "".join(
            f'<div class="tile"><div class="label">{_e(k)}</div><div class="value">{_e(v)}</div></div>'
            for k, v in b.items) + "</div>"
    raise TypeError(f"unknown block {type(b).__name__}")


def render_html(doc: Document, *, generated: str = "") -> str:
    """The document as one self-contained HTML page (inline CSS, data-URI figures, no script)."""
    toc = " ".join(f'<span>{i}. {_e(s.title)}</span>' for i, s in enumerate(doc.sections, 1))
    body = "".join(
        f'<section id="{_e(s.key)}"><h2><span class="num">{i}</span>{_e(s.title)}</h2>'
        + "".join(_html_block(b) for b in s.blocks) + "</section>"
        for i, s in enumerate(doc.sections, 1))
    foot = "Produced by hedgekit" + (f" on {_e(generated)}" if generated else "") + \
        ". Decision support, not investment advice."
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
        f"<title>{_e(doc.title)} \u2013 {_e(doc.subtitle)}</title><style>{CSS}</style></head>"
        f"<body><main><header class=\"masthead\"><p class=\"kicker\">Quarterly exposure report</p>"
        f"<h1>{_e(doc.title)}</h1><p>{_e(doc.subtitle)}</p></header>"
        f"<nav class=\"toc\">{toc}</nav>{body}<footer>{foot}</footer></main></body></html>\n")


_MD_SPECIAL = re.compile(r"([\\`*\[\]#|])")
_MD_TAG = re.compile(r"<(?=[A-Za-z/!?])")       # what could open raw HTML (CommonMark 6.6)
_MD_ENTITY = re.compile(r"&(?=#|[A-Za-z][A-Za-z0-9]*;)")


def _md(text: Any) -> str:
    """Markdown-safe text: markup characters backslash-escaped; a "<" that could open an HTML
    tag and an "&" that could start an entity are written as entities, so no user string
    becomes markup (a plain "p < 0.001" stays readable)."""
    s = _MD_ENTITY.sub("&amp;", str(text))
    s = _MD_TAG.sub("&lt;", s)
    s = _MD_SPECIAL.sub(r"\\\1", s)
    return " ".join(s.splitlines())


def _md_table(t: Table) -> list[str]:
    t = t.compact()
    numeric = t.numeric or (False,) * len(t.columns)
    out = [f"**{_md(t.caption)}**", ""] if t.caption else []
    out.append("| " + " | ".join(_md(c) or " " for c in t.columns) + " |")
    out.append("|" + "|".join("---:" if n else ":---" for n in numeric[: len(t.columns)]) + "|")
    out += ["| " + " | ".join(_md(c) for c in row) + " |" for row in t.rows]
    if t.note:
        out += ["", f"*{_md(t.note)}*"]
    return out + [""]


def render_markdown(doc: Document, figure_files: Mapping[str, str] | None = None) -> str:
    """The document as Markdown; figures link to ``figure_files[key]`` or are noted as omitted."""
    lines = [f"# {_md(doc.title)}", "", f"*{_md(doc.subtitle)}*", ""]
    for i, s in enumerate(doc.sections, 1):
        lines += [f"## {i}. {_md(s.title)}", ""]
        for b in s.blocks:
            if isinstance(b, Para):
                prefix = "> **Warning:** " if b.kind == "alert" else "*" if b.kind == "note" else ""
                suffix = "*" if b.kind == "note" else ""
                lines += [f"{prefix}{_md(b.text)}{suffix}", ""]
            elif isinstance(b, Bullets):
                lines += [f"- {_md(item)}" for item in b.items] + [""]
            elif isinstance(b, Table):
                lines += _md_table(b)
            elif isinstance(b, Tiles):
                lines += ["| | |", "|:---|:---|"] + [f"| {_md(k)} | {_md(v)} |" for k, v in b.items] + [""]
            elif isinstance(b, Plot):
                target = (figure_files or {}).get(b.key)
                if target:
                    lines += [f"![{_md(b.caption)}]({target})", "", f"*{_md(b.caption)}*", ""]
                else:
                    lines += [f"*(Figure omitted from the Markdown version: {_md(b.caption)} "
                              "See the HTML report.)*", ""]
    lines += ["---", "", "*Produced by hedgekit. Decision support, not investment advice.*", ""]
    return "\n".join(lines)


# ---------------------------------------------------------------------------------------
# Writing, atomically.


def _atomic_write_all(files: Mapping[Path, bytes]) -> None:
    """Write every file to a temporary sibling first, then move all into place.

    Nothing is replaced until every temporary file is complete; on any error the
    temporaries are removed and the files already there stay as they were.
    """
    staged: list[tuple[str, Path]] = []
    try:
        for path, data in files.items():
            fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
            staged.append((tmp, path))
            with os.fdopen(fd, "wb") as fh:
                fh.write(data)
                fh.flush()
                os.fsync(fh.fileno())
            os.chmod(tmp, 0o644)
    except BaseException:
        for tmp, _ in staged:
            with contextlib.suppress(OSError):
                os.unlink(tmp)
        raise
    # Keep a hard link to each file being replaced, so that a failure half-way through the
    # renames can put every earlier file back: all files change, or none.
    backups: list[tuple[Path, Path]] = []
    done: list[Path] = []
    try:
        for _, path in staged:
            if path.exists():
                backup = path.with_name(f".{path.name}.{os.getpid()}.bak")
                with contextlib.suppress(FileNotFoundError):
                    backup.unlink()
                os.link(path, backup)
                backups.append((path, backup))
        for tmp, path in staged:
            os.replace(tmp, path)
            done.append(path)
    except BaseException:
        saved = dict(backups)
        for path in done:
            with contextlib.suppress(OSError):
                if path in saved:
                    os.replace(saved.pop(path), path)
                else:
                    path.unlink()
        for tmp, _ in staged:
            with contextlib.suppress(OSError):
                os.unlink(tmp)
        for backup in saved.values():
            with contextlib.suppress(OSError):
                backup.unlink()
        raise
    for _, backup in backups:
        with contextlib.suppress(OSError):
            backup.unlink()


def write_report(run: Mapping, out_dir: Path | str, *, formats: Iterable[str] = ("html", "md"),
                 name: str = "report", markdown_figures: bool = True) -> dict[str, Path]:
    """Write ``<name>.html`` and/or ``<name>.md`` (and the Markdown's PNG figures) into ``out_dir``.

    Everything is rendered in memory first; the files are then written atomically
    (temporary sibling + ``os.replace``), figures before the Markdown, the HTML last.
    Returns ``{"html": path, "md": path, "figure_<key>": path, ...}`` for what was written.
    """
    formats = tuple(formats)
    unknown = [f for f in formats if f not in FORMATS]
    if unknown or not formats:
        raise InputError(f"unknown report format {unknown[0]!r}." if unknown else "no report format asked for.",
                         column="formats", fix="use 'html', 'md' or both.")
    if not re.fullmatch(r"[A-Za-z0-9][A-Za-z0-9._-]*", name):
        raise InputError(f"report name {name!r} is not a plain file name.", column="name",
                         fix="use letters, digits, '.', '_' or '-' only.")
    out_dir = Path(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError("the report output is a file, not a folder.", file=str(out_dir),
                         fix="set [report] output to a folder name.")
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(f"cannot create the report folder ({exc.strerror}).", file=str(out_dir),
                         fix="set [report] output to a folder you can write to.") from None
    doc = build_document(run)
    generated = str((run.get("meta") or {}).get("run_at") or "")
    files: dict[Path, bytes] = {}
    written: dict[str, Path] = {}
    if "md" in formats:
        figure_files: dict[str, str] = {}
        if markdown_figures:
            for plot in doc.plots():
                fname = f"{name}_{plot.key}.png"
                files[out_dir / fname] = plot.png
                figure_files[plot.key] = fname
                written[f"figure_{plot.key}"] = out_dir / fname
        files[out_dir / f"{name}.md"] = render_markdown(doc, figure_files).encode("utf-8")
        written["md"] = out_dir / f"{name}.md"
    if "html" in formats:
        files[out_dir / f"{name}.html"] = render_html(doc, generated=generated).encode("utf-8")
        written["html"] = out_dir / f"{name}.html"
    try:
        _atomic_write_all(files)
    except OSError as exc:
        raise InputError(f"cannot write the report ({exc.strerror or exc}); the earlier report, if any, "
                         "is unchanged.",
                         file=str(out_dir), fix="set [report] output to a folder you can write to.") from None
    return written
