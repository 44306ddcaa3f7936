"""The run record as a neutral document: sections of paragraphs, tables and figures.

One set of builders serves the terminal and the report, so the two cannot disagree: the
report renders the document through Jinja2 templates (:mod:`hedgekit.present.report`),
the terminal through rich tables (:mod:`hedgekit.present.terminal`). The input is only
the run dictionary (``RunResult.to_dict()``, the merged JSON) or one stage's dictionary
under its key; see docs/interface.md. Text is kept unescaped here: the renderers escape.

Nothing is computed: intervals, t, p, marks, premia and impacts are read from the record
at the level it states; a key the record lacks leaves its cell blank (a dash) or its line
out. Figures are drawn lazily (``Plot.draw``), so the terminal never imports matplotlib.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from .fmt import (
    DASH,
    bp,
    contracts,
    factor_names,
    fmt,
    get,
    interval,
    interval_name,
    level_text,
    marked,
    money,
    num,
    pct,
    period_words,
    sample_text,
    sorted_items,
)

# --------------------------------------------------------------------------- the model


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
        """The table without columns (after the first) that are blank in every row."""
        keep = [j for j in range(len(self.columns))
                if j == 0 or not self.rows or any(r[j] not in (DASH, "") for r in self.rows)]
        if len(keep) == len(self.columns):
            return self
        numeric = self.numeric or (False,) * len(self.columns)
        return Table(tuple(self.columns[j] for j in keep),
                     tuple(tuple(r[j] for j in keep) for r in self.rows), self.caption,
                     tuple(numeric[j] for j in keep), self.note)

    @property
    def alignments(self) -> tuple[bool, ...]:
        return self.numeric or (False,) * len(self.columns)


@dataclass(frozen=True)
class Plot:
    """A figure drawn on demand: ``draw()`` gives PNG bytes; ``key`` names its file."""

    key: str
    caption: str
    draw: Callable[[], bytes]


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
    generated: str = ""

    def plots(self) -> list[Plot]:
        return [b for s in self.sections for b in s.blocks if isinstance(b, Plot)]


def _table(columns: Sequence[str], rows: Sequence[Sequence[str]], caption: str = "", *,
           numeric: Sequence[bool] | None = None, note: str = "") -> Table:
    numeric = tuple(numeric) if numeric is not None else (False,) + (True,) * (len(columns) - 1)
    return Table(tuple(columns), tuple(tuple(r) for r in rows), caption, numeric, note)


def _meta(run: Mapping) -> Mapping:
    return run.get("meta") or {}


def _ccy(run: Mapping) -> str:
    return str(_meta(run).get("currency") or "")


# --------------------------------------------------------------------------- shared lines

def _side(n: Any) -> str:
    v = num(n)
    return DASH if not v else "buy" if v > 0 else "sell"


def scenario_label(row: Mapping) -> str:
    """The one label a scenario carries in the table and the chart: the record's ``label``,
    else its description or name."""
    return str(row.get("label") or row.get("description") or row.get("name") or "scenario")


def _scenario_pnl(row: Mapping, side: str) -> Mapping:
    return get(row, "pnl", side) or {}


def _worst_scenario(run: Mapping) -> Mapping | None:
    rows = [r for r in get(run, "stress", "scenarios", default=[]) or []
            if isinstance(r, Mapping) and num(_scenario_pnl(r, "unhedged").get("return")) is not None]
    return min(rows, key=lambda r: num(_scenario_pnl(r, "unhedged").get("return"))) if rows else None


def _size_text(row: Mapping) -> str:
    size, top = num(row.get("largest_sd")), num(row.get("sample_max_sd"))
    if size is None:
        return ""
    text = f"a {fmt(size, 1)}-sd surprise"
    return text + (f" (the largest in the sample: {fmt(top, 1)} sd)" if top is not None else "")


def _legs_line(run: Mapping) -> str:
    """The overlay in whole contracts (contracts with the weight they give, one convention)."""
    hedge = run.get("hedge") or {}
    ticket = hedge.get("ticket") or {}
    legs = [(str(name), r) for name, r in sorted_items(ticket)
            if isinstance(r, Mapping) and num(r.get("contracts"))]
    if not legs:
        return "Overlay: no contracts to trade."
    legs.sort(key=lambda kv: -abs(num(kv[1].get("weight_rounded")) or 0.0))
    text = [f"{_side(r.get('contracts'))} {contracts(abs(num(r['contracts'])))} {name}"
            + (f" ({pct(r.get('weight_rounded'), 1, plus=True)} of NAV)"
               if num(r.get("weight_rounded")) is not None else "")
            for name, r in legs[:4]]
    more = len(legs) - 4
    tail = f"; {more} smaller leg{'s' if more > 1 else ''} in the ticket" if more > 0 else ""
    gross = num(hedge.get("gross_rounded"))
    head = f"Overlay in whole contracts, {len(legs)} leg{'s' if len(legs) > 1 else ''}"
    head += f", gross {pct(gross, 1)} of NAV" if gross is not None else ""
    return f"{head}: " + "; ".join(text) + tail + "."


def _zero_legs_line(hedge: Mapping) -> str | None:
    legs = [str(x) for x in hedge.get("zero_legs") or []]
    if not legs:
        return None
    weights = hedge.get("positions") or {}
    parts = [f"{leg} (continuous weight {pct(weights.get(leg), 2)} of NAV)"
             if num(weights.get(leg)) is not None else leg for leg in legs]
    return ("Rounded to zero contracts, so not traded: " + "; ".join(parts) + ".")


def _moved_line(run: Mapping) -> str | None:
    meta, hedge = _meta(run), run.get("hedge") or {}
    rounded = hedge.get("exposure_after_rounded") or {}
    before = hedge.get("exposure_before") or get(run, "exposures", "portfolio") or {}
    cont = hedge.get("exposure_after") or {}
    names = [str(f) for f in meta.get("neutralise") or []]
    if not rounded or not names:
        return None
    parts = []
    for f in names:
        text = f"{f} {fmt(before.get(f))} to {fmt(rounded.get(f))}"
        if num(cont.get(f)) is not None:
            text += f" (continuous solution {fmt(cont.get(f))})"
        parts.append(text)
    return "Neutralised exposures, whole contracts: " + "; ".join(parts) + "."


def _side_effect_lines(hedge: Mapping) -> list[str]:
    out = []
    names = [str(f) for f in hedge.get("side_effects") or []]
    detail = hedge.get("side_effects_detail") or {}
    if names:
        parts = []
        for f in names:
            d = detail.get(f) or {}
            if d:
                parts.append(f"{f} {marked(d.get('before'), d.get('marks_before'))} to "
                             f"{marked(d.get('after'), d.get('marks_after'))}")
            else:
                parts.append(f)
        out.append("Side effects (exposures the whole-contract overlay moves by more than their "
                   "standard error): " + "; ".join(parts) + ".")
    elif "side_effects" in hedge:
        out.append("Side effects: the overlay moves no other exposure by more than its standard error.")
    weak = [str(f) for f in hedge.get("not_significant_neutralised") or []]
    if weak:
        out.append(f"Neutralised although not significant before the hedge: {', '.join(weak)}; "
                   "the overlay removes an exposure that could not be told from zero.")
    return out


def _premium_line(run: Mapping) -> str | None:
    hedge = run.get("hedge") or {}
    value = hedge.get("premium_given_up")
    if num(value) is None:
        return None
    label = interval_name(_meta(run), hedge)
    iv = hedge.get("premium_given_up_interval")
    distinct = hedge.get("premium_given_up_distinct_from_zero")
    ci = f", {label} {interval(iv, 2, percent=True)}" if interval(iv) != DASH else ""
    if distinct is False:
        return f"Premium given up by the overlay: cannot be told from zero ({pct(value)} a year{ci})."
    return f"Premium given up by the overlay: {pct(value)} a year{ci}."


def _costs_line(hedge: Mapping, ccy: str) -> str | None:
    bits = []
    if num(hedge.get("tracking_error_rounded")) is not None:
        bits.append(f"tracking error {pct(hedge['tracking_error_rounded'])} a year")
    if num(hedge.get("cost")) is not None:
        amount = hedge.get("cost_currency")
        bits.append(f"trading cost {bp(hedge['cost'])} of NAV"
                    + (f" ({money(amount, ccy, short=True)})" if num(amount) is not None else ""))
    return ("Whole contracts: " + "; ".join(bits) + ".") if bits else None


def _effectiveness_lines(run: Mapping) -> list[str]:
    bt = run.get("backtest") or {}
    if not bt:
        return []
    out = []
    if num(bt.get("effectiveness_neutralised")) is not None or num(bt.get("effectiveness")) is not None:
        names = ", ".join(str(f) for f in bt.get("neutralised") or []) or "the neutralised factors"
        out.append(f"Walk-forward (out of sample): hedge effectiveness {pct(bt.get('effectiveness'), 1)} "
                   f"on all state-driven P&L, {pct(bt.get('effectiveness_neutralised'), 1)} on {names}.")
    by_factor = bt.get("effectiveness_by_factor") or {}
    neutral = [str(f) for f in bt.get("neutralised") or []]
    notes = bt.get("effectiveness_note") or {}
    if by_factor:
        parts = []
        for f in neutral or [str(k) for k in by_factor]:
            v = num(by_factor.get(f))
            if v is None:
                parts.append(f"{f}: no figure ({notes.get(f) or 'not given'})")
            else:
                parts.append(f"{f} {pct(v, 1)}" + (" (the hedge made it worse)" if v < 0 else ""))
        out.append("Effectiveness by neutralised factor: " + "; ".join(parts) + ".")
        worse = [(str(f), num(v)) for f, v in by_factor.items()
                 if str(f) not in neutral and num(v) is not None and num(v) < 0]
        if worse:
            out.append("Made more volatile by the overlay out of sample (not neutralised): "
                       + "; ".join(f"{f} {pct(v, 1)}" for f, v in sorted(worse, key=lambda kv: kv[1])) + ".")
    return out


# --------------------------------------------------------------------------- summary

def summary_section(run: Mapping) -> Section:
    meta = _meta(run)
    ccy = _ccy(run)
    exposures, hedge = run.get("exposures") or {}, run.get("hedge") or {}
    _, many = period_words(meta)
    periods = meta.get("periods")
    tiles = [("Book", str(meta.get("fund") or "unnamed book")),
             ("Net asset value", money(meta.get("nav"), ccy, short=True)),
             ("Sample", f"{meta.get('sample_start', DASH)} to {meta.get('sample_end', DASH)}"
              + (f" ({periods} {many})" if periods is not None else ""))]
    if hedge:
        tiles.append(("Overlay", str(hedge.get("status") or DASH)))
        if num(hedge.get("tracking_error_rounded")) is not None:
            tiles.append(("Tracking error a year, whole contracts", pct(hedge["tracking_error_rounded"])))
    bt = run.get("backtest") or {}
    if num(bt.get("effectiveness_neutralised")) is not None:
        tiles.append(("Walk-forward effectiveness, neutralised factors",
                      pct(bt["effectiveness_neutralised"], 1)))
    if len(tiles) < 6 and level_text(meta):
        tiles.append(("Intervals", f"{level_text(meta)}, two-sided"))
    blocks: list[Block] = [Tiles(tuple(tiles))]
    if str(hedge.get("status") or "") == "unreachable":
        names = ", ".join(str(f) for f in hedge.get("unreachable") or []) or "some factors"
        blocks.append(Para(f"The hedge targets cannot be reached for {names}; the overlay shown is the "
                           "closest reachable one.", "alert"))
    for w in hedge.get("warnings") or []:
        blocks.append(Para(str(w), "alert"))
    if exposures.get("portfolio"):
        blocks.append(headline_table(run))
    if hedge:
        lines = [_legs_line(run)]
        lines += [x for x in (_zero_legs_line(hedge), _moved_line(run)) if x]
        lines += _side_effect_lines(hedge)
        lines += [x for x in (_costs_line(hedge, ccy), _premium_line(run)) if x]
        blocks.append(Bullets(tuple(lines)))
    tail = []
    worst = _worst_scenario(run)
    if worst:
        held, hedged = _scenario_pnl(worst, "unhedged"), _scenario_pnl(worst, "hedged")
        text = (f"Worst scenario: {scenario_label(worst)} ({worst.get('reading') or DASH}"
                + (f", {_size_text(worst)}" if _size_text(worst) else "") + f"): {pct(held.get('return'))} "
                f"of NAV ({money(held.get('currency'), ccy, short=True)}) as held")
        if num(hedged.get("return")) is not None:
            text += f", {pct(hedged.get('return'))} ({money(hedged.get('currency'), ccy, short=True)}) " \
                    "with the overlay"
        tail.append(text + ".")
    tail += _effectiveness_lines(run)
    if tail:
        blocks.append(Bullets(tuple(tail)))
    return Section("summary", "Summary", tuple(blocks))


def _book_inference(run: Mapping) -> tuple[Mapping, str, str]:
    """Where the book's t, marks and interval are recorded: the exposure stage's ``portfolio_*``
    keys, else the hedge stage's ``exposure_before_*`` (the same betas); the key prefix and
    the interval label of that stage."""
    meta, ex, hedge = _meta(run), run.get("exposures") or {}, run.get("hedge") or {}
    if ex.get("portfolio_interval") or ex.get("portfolio_t") or not hedge.get("exposure_before_interval"):
        return ex, "portfolio", interval_name(meta, ex)
    return hedge, "exposure_before", interval_name(meta, hedge)


def _mark_note(rows: Sequence[Sequence[str]]) -> str:
    return ("Marks: *** p < 1 %, ** p < 5 %, * p < 10 % (two-sided). "
            if any("*" in c for r in rows for c in r) else "")


def headline_table(run: Mapping) -> Table:
    """Headline exposures: the book, its premium, and what the whole-contract overlay leaves."""
    meta, ex = _meta(run), run.get("exposures") or {}
    hedge, premia = run.get("hedge") or {}, run.get("premia") or {}
    book_premium = premia.get("book_premium") or {}
    rounded = hedge.get("exposure_after_rounded") or {}
    src, key, label_ex = _book_inference(run)
    label_h = interval_name(meta, hedge)
    rows = []
    for f in factor_names(run):
        bpm = book_premium.get(f) or {}
        rows.append((f, marked(get(ex, "portfolio", f), get(src, f"{key}_marks", f)),
                     fmt(get(src, f"{key}_t", f), 2), interval(get(src, f"{key}_interval", f)),
                     (pct(bpm.get("premium_annual")) + (bpm.get("marks") or "")) if bpm else DASH,
                     marked(rounded.get(f), get(hedge, "exposure_after_rounded_marks", f)) if rounded else DASH,
                     interval(get(hedge, "exposure_after_rounded_interval", f))))
    note = _mark_note(rows)
    if book_premium:
        note += "Premium earned: the book's beta times the estimated price of risk. "
    if rounded:
        note += "The overlay column is what the whole contracts of the ticket leave."
    return _table(("Factor", "Exposure (beta)", "t", label_ex, "Premium earned a year",
                   "With the overlay, whole contracts", label_h), rows,
                  "Headline exposures of the book", note=note.strip())


# --------------------------------------------------------------------------- exposures

def book_exposure_table(run: Mapping) -> Table:
    meta, ex, hedge = _meta(run), run.get("exposures") or {}, run.get("hedge") or {}
    src, key, label_ex = _book_inference(run)
    rows = []
    for f in factor_names(run):
        rows.append((f, marked(get(ex, "portfolio", f), get(src, f"{key}_marks", f)),
                     fmt(get(ex, "portfolio_se", f)), fmt(get(src, f"{key}_t", f), 2),
                     fmt(get(src, f"{key}_p", f), 3), interval(get(src, f"{key}_interval", f)),
                     marked(get(hedge, "exposure_after_rounded", f),
                            get(hedge, "exposure_after_rounded_marks", f)),
                     interval(get(hedge, "exposure_after_rounded_interval", f))))
    hac = ex.get("hac_lags")
    return _table(("Factor", "Exposure", "Std. error", "t", "p", label_ex,
                   "With the overlay, whole contracts", interval_name(meta, hedge)), rows,
                  f"Book exposures ({ex.get('portfolio_source') or 'book'})"
                  + (f", {sample_text(ex, meta)}" if sample_text(ex, meta) else ""),
                  note="A beta is the book's excess return per unit of the factor; every orthogonal "
                       "factor shares the market innovation's standard deviation."
                       + (f" Standard errors: Newey-West (HAC) with {hac} lags." if hac is not None else ""))


def per_surprise_table(run: Mapping) -> Table | None:
    ps = get(run, "exposures", "per_surprise") or {}
    if not ps:
        return None
    ccy = _ccy(run) or "currency"
    rows = [(str(v), pct(r.get("isolated_return")), money(r.get("isolated_pnl"), short=True),
             pct(r.get("comove_return")), money(r.get("comove_pnl"), short=True))
            for v, r in ps.items()]
    return _table(("Surprise in", "Isolated, % of NAV", f"Isolated, {ccy}", "With co-moves, % of NAV",
                   f"With co-moves, {ccy}"), rows,
                  "Book P&L per +100 bp surprise (+1 % for the market, +1 point for the dividend yield)",
                  note="Isolated: the other raw surprises are zero; with co-moves: the others at their "
                       "conditional mean given this one.")


def exposures_section(run: Mapping, *, detail: bool = False) -> Section | None:
    ex = run.get("exposures") or {}
    if not ex.get("portfolio"):
        return None
    from . import plots
    meta, hedge = _meta(run), run.get("hedge") or None
    factors = factor_names(run)
    blocks: list[Block] = []
    if not detail:
        blocks.append(Plot("exposures", f"Exposure of the book to each factor with {interval_name(meta, ex)}s, "
                           "as held and with the whole-contract overlay.",
                           lambda: plots.exposure_chart(ex, hedge, factors=factors)))
    blocks.append(book_exposure_table(run))
    ps = per_surprise_table(run)
    if ps is not None:
        blocks.append(ps)
    assets = ex.get("assets") or {}
    if assets:
        held = ex.get("holdings") or {}
        marks = ex.get("assets_marks") or {}
        n_obs = ex.get("assets_n_obs") or {}
        _, many = period_words(meta)
        rows = [(str(a), *(marked(get(v, f), get(marks, a, f), 2 if detail else 3) for f in factors),
                 pct(held.get(a), 1) if a in held else DASH, str(n_obs.get(a, DASH)),
                 fmt(get(ex, "assets_r2", a), 2))
                for a, v in assets.items()]
        blocks.append(_table(("Asset", *factors, "Held, % of NAV", many.capitalize(), "R\u00b2"), rows,
                             "Test-asset betas"))
    inst = ex.get("instruments") or {}
    if inst:
        rows = [(str(a), *(fmt(get(v, f), 2 if detail else 3) for f in factors)) for a, v in inst.items()]
        blocks.append(_table(("Instrument", *factors), rows, "Hedge-instrument betas"))
    if detail:
        rolling = ex.get("rolling") or {}
        dates, series = rolling.get("dates") or [], rolling.get("portfolio") or {}
        valid = [i for i, _ in enumerate(dates) if any(num(get(series, f, default=[None] * len(dates))[i])
                                                       is not None for f in series)]
        if valid:
            picks = valid[:: max(1, len(valid) // 8)]
            if picks[-1] != valid[-1]:
                picks.append(valid[-1])
            rows = [(str(dates[i]), *(fmt(series[f][i], 2) for f in factors if f in series)) for i in picks]
            blocks.append(_table(("Window ending", *(f for f in factors if f in series)), rows,
                                 "Rolling book exposure"))
    return Section("exposures", "Exposures", tuple(blocks))


def rolling_section(run: Mapping) -> Section | None:
    ex = run.get("exposures") or {}
    rolling = ex.get("rolling") or {}
    dates = rolling.get("dates") or []
    series = rolling.get("portfolio") or {}
    if not dates or not any(any(num(v) is not None for v in vals) for vals in series.values()):
        return None
    from . import plots
    one, _ = period_words(_meta(run))
    rows = []
    for f, vals in series.items():
        valid = [(d, num(v)) for d, v in zip(dates, vals, strict=False) if num(v) is not None]
        if valid:
            values = [v for _, v in valid]
            rows.append((str(f), fmt(values[-1]), str(valid[-1][0]), fmt(min(values)), fmt(max(values))))
    window = rolling.get("window")
    return Section("rolling", "Rolling exposure history", (
        Plot("rolling", "Rolling exposures of the book, each point estimated on the trailing window "
             f"{f'of {window} {one}s ' if window else ''}ending that {one} (gaps where a window has too "
             "few valid observations).", lambda: plots.rolling_chart(ex)),
        _table(("Factor", "Latest", "Window ending", "Lowest", "Highest"), rows,
               "Rolling exposure history", numeric=(False, True, False, True, True))))


# --------------------------------------------------------------------------- premia

def premia_section(run: Mapping) -> Section | None:
    premia = run.get("premia") or {}
    lam = premia.get("lambda")
    if not lam:
        return None
    from . import plots
    meta = _meta(run)
    one, many = period_words(meta)
    names = [str(f) for f in (premia.get("factors") or lam)]
    label = interval_name(meta, premia)
    route = premia.get("lambda_route") or {}
    rows = []
    for f in names:
        rows.append((f, str(route.get(f) or DASH), pct(lam.get(f), 3),
                     pct(get(premia, "lambda_annual", f)) + (get(premia, "marks", f) or ""),
                     pct(get(premia, "lambda_annual_se", f)), fmt(get(premia, "t_fm", f), 2),
                     fmt(get(premia, "t_nw", f), 2), fmt(get(premia, "t_shanken", f), 2),
                     fmt(get(premia, "p", f), 3), interval(get(premia, "lambda_interval", f), 2, percent=True)))
    note = "Premia are per unit of beta; 'mean': a traded factor priced by its own sample mean."
    if premia.get("headline_se"):
        note += f" Marks, p and the interval use the {premia['headline_se']} standard error."
    if premia.get("betas_used"):
        note += f" Betas used: {premia['betas_used']}."
    if premia.get("nw_lags") is not None:
        note += f" Newey-West lags: {premia['nw_lags']}."
    if premia.get("shanken_approximate"):
        note += " With rolling betas the Shanken correction is the approximate multiplier form."
    blocks: list[Block] = []
    if premia.get("lambda_interval") and premia.get("lambda_annual"):
        blocks.append(Plot("premia", f"Prices of risk a year with {label}s.",
                           lambda: plots.premia_chart(premia)))
    blocks.append(_table(("Factor", "Route", f"Premium a {one}", "Premium a year", "Std. error a year",
                          "t (FM)", "t (Newey-West)", "t (Shanken)", "p", f"{label}, a year"), rows,
                         "Fama-MacBeth prices of risk", note=note))
    facts = []
    if premia.get("r2_cs") is not None:
        facts.append(f"Cross-sectional R\u00b2 on average returns: {fmt(premia.get('r2_cs'), 3)}.")
    if premia.get("n_periods") is not None:
        facts.append(f"{many.capitalize()} used: {premia.get('n_periods')}; skipped: "
                     f"{premia.get('n_skipped', 0)}"
                     + (f"; test assets: {premia['n_assets']}" if premia.get("n_assets") else "") + ".")
    for key, text in (("pricing_error_test", "Pricing errors jointly zero"),
                      ("pricing_error_test_shanken", "The same test with the Shanken adjustment")):
        test = premia.get(key) or {}
        if test:
            facts.append(f"{text}: \u03c7\u00b2 = {fmt(test.get('stat'), 2)} on {test.get('df', DASH)} "
                         f"degrees of freedom, p = {fmt(test.get('pvalue'), 3)}.")
    grs = premia.get("grs") or {}
    if isinstance(grs, Mapping) and grs:
        facts.append(f"GRS test: F = {fmt(grs.get('stat'), 2)}, p = {fmt(grs.get('pvalue'), 3)}.")
    if facts:
        blocks.append(Bullets(tuple(facts)))
    bp_table = book_premium_table(run)
    if bp_table is not None:
        blocks.append(bp_table)
    return Section("premia", "Prices of risk", tuple(blocks))


def book_premium_table(run: Mapping) -> Table | None:
    premia = run.get("premia") or {}
    book = premia.get("book_premium") or {}
    if not book:
        return None
    label = interval_name(_meta(run), premia)
    rows = [(str(f), fmt(v.get("beta")), pct(v.get("premium_annual")) + (v.get("marks") or ""),
             pct(v.get("premium_annual_se")), fmt(v.get("t"), 2), fmt(v.get("p"), 3),
             interval(v.get("interval"), 2, percent=True)) for f, v in book.items() if isinstance(v, Mapping)]
    total = premia.get("book_premium_total") or {}
    if total:
        rows.append(("total", "", pct(total.get("value")), pct(total.get("se")), DASH, DASH,
                     interval(total.get("interval"), 2, percent=True)))
    return _table(("Factor", "Beta", "Premium a year", "Std. error", "t", "p", label), rows,
                  "The book's expected premium by exposure (what a hedge of it gives up)")


# --------------------------------------------------------------------------- hedge

def ticket_table(run: Mapping, *, narrow: bool = False) -> Table | None:
    hedge = run.get("hedge") or {}
    ticket = hedge.get("ticket") or {}
    if not isinstance(ticket, Mapping) or not ticket:
        return None
    ccy = _ccy(run)
    has_current = any(num(get(r, "current")) for r in ticket.values())
    rows = []
    for name, r in ticket.items():
        r = r if isinstance(r, Mapping) else {}
        n, unit = num(r.get("contracts")), num(r.get("contract_value"))
        side = "excluded" if r.get("excluded") else _side(n)
        row = [str(name), side, contracts(n), pct(r.get("weight_rounded"), 2),
               money(None if n is None or unit is None else n * unit, short=True),
               *(() if narrow else (money(unit, short=True),)), pct(r.get("weight"), 2)]
        if has_current:
            row += [pct(r.get("current"), 2), pct(r.get("trade_rounded"), 2)]
        row.append(money(r.get("cost")))
        rows.append(tuple(row))
    cols = ["Instrument", "Side", "Contracts", "Weight of NAV, whole contracts", f"Notional, {ccy}".rstrip(", "),
            *(() if narrow else (f"Contract value, {ccy}".rstrip(", "),)), "Continuous weight"]
    if has_current:
        cols += ["Current weight", "Trade, whole contracts"]
    cols.append(f"Cost, {ccy}".rstrip(", "))
    method = hedge.get("rounding")
    return _table(cols, rows, "Hedge ticket", numeric=(False, False) + (True,) * (len(cols) - 2),
                  note="Contracts are what will be traded; the continuous weight is the optimiser's "
                       "solution before rounding" + (f" (rounding: {method})" if method else "") + ".")


def _targets(meta: Mapping, hedge: Mapping) -> dict[str, str]:
    out: dict[str, str] = {}
    for f in meta.get("neutralise") or []:
        out[str(f)] = fmt(get(hedge, "targets", str(f), default=0.0))
    for f, band in (meta.get("keep") or {}).items():
        if isinstance(band, Sequence) and len(band) == 2:
            out[str(f)] = f"[{fmt(band[0])}, {fmt(band[1])}]"
    return out


def hedge_exposure_table(run: Mapping) -> Table | None:
    meta, hedge = _meta(run), run.get("hedge") or {}
    rounded = hedge.get("exposure_after_rounded") or {}
    if not rounded and not hedge.get("exposure_after"):
        return None
    before = hedge.get("exposure_before") or get(run, "exposures", "portfolio") or {}
    targets = _targets(meta, hedge)
    remaining = hedge.get("remaining") or {} if str(hedge.get("status")) == "unreachable" else {}
    rows = []
    for f in factor_names(run):
        rows.append((f, marked(before.get(f), get(hedge, "exposure_before_marks", f)), targets.get(f, DASH),
                     marked(rounded.get(f), get(hedge, "exposure_after_rounded_marks", f)),
                     interval(get(hedge, "exposure_after_rounded_interval", f)),
                     fmt(get(hedge, "exposure_after", f)), interval(get(hedge, "exposure_after_interval", f)),
                     fmt(remaining.get(f)) if f in remaining else DASH))
    label = interval_name(meta, hedge)
    return _table(("Factor", "Before", "Target", "After, whole contracts", label, "Continuous solution",
                   f"{label}, continuous", "Short of the target by"), rows, "Exposure the overlay leaves",
                  numeric=(False, True, False, True, True, True, True, True),
                  note="The whole-contract column is what the ticket trades; the continuous solution is "
                       "the optimiser's before rounding.")


def side_effects_table(run: Mapping) -> Table | None:
    hedge = run.get("hedge") or {}
    detail = hedge.get("side_effects_detail") or {}
    if not detail:
        return None
    rows = [(str(f), marked(d.get("before"), d.get("marks_before")), fmt(d.get("se_before")),
             marked(d.get("after"), d.get("marks_after")), fmt(d.get("se_after")))
            for f, d in detail.items() if isinstance(d, Mapping)]
    return _table(("Factor", "Before", "Std. error", "After, whole contracts", "Std. error"), rows,
                  "Side effects: exposures the overlay moves by more than their standard error")


def hedge_section(run: Mapping, *, detail: bool = False) -> Section | None:
    hedge = run.get("hedge") or {}
    if not hedge:
        return None
    ccy = _ccy(run)
    blocks: list[Block] = []
    if str(hedge.get("status") or "") == "unreachable":
        blocks.append(Para("Targets not reachable for: " + ", ".join(
            str(f) for f in hedge.get("unreachable") or []) + ". The overlay below is the closest "
            "reachable one; it does not meet every target.", "alert"))
    for b in hedge.get("rounding_breaches") or []:
        blocks.append(Para(str(b), "alert"))
    if hedge.get("message"):
        blocks.append(Para(str(hedge["message"]), "note"))
    for t in (ticket_table(run, narrow=detail), hedge_exposure_table(run), side_effects_table(run)):
        if t is not None:
            blocks.append(t)
    facts = [x for x in (_zero_legs_line(hedge),) if x] + _side_effect_lines(hedge)[1:]
    if num(hedge.get("tracking_error_rounded")) is not None or num(hedge.get("tracking_error")) is not None:
        facts.append(f"Tracking error of the hedged against the unhedged book: "
                     f"{pct(hedge.get('tracking_error_rounded'))} a year in whole contracts "
                     f"(continuous solution {pct(hedge.get('tracking_error'))}).")
    if num(hedge.get("gross_rounded")) is not None:
        facts.append(f"Gross notional: {pct(hedge['gross_rounded'], 1)} of NAV in whole contracts "
                     f"(continuous solution {pct(hedge.get('gross'), 1)}).")
    if num(hedge.get("cost")) is not None:
        facts.append(f"Trading cost of the whole-contract trade: {bp(hedge['cost'])} of NAV"
                     + (f" ({money(hedge.get('cost_currency'), ccy)})" if num(hedge.get("cost_currency"))
                        is not None else "") + ".")
    premium = _premium_line(run)
    if premium:
        facts.append(premium)
    if num(hedge.get("premium_given_up_rounded")) is not None:
        facts.append(f"Premium given up by the whole contracts: {pct(hedge['premium_given_up_rounded'])} "
                     "a year.")
    if hedge.get("binding"):
        binding = hedge["binding"]
        facts.append("Limits binding at the solution: "
                     + "; ".join(map(str, binding if isinstance(binding, list) else [binding])) + ".")
    if num(hedge.get("robust_gross_ratio")) is not None:
        facts.append(f"The robust overlay is {fmt(hedge['robust_gross_ratio'], 2)} times the nominal "
                     "gross notional.")
    if facts:
        blocks.append(Bullets(tuple(facts)))
    return Section("hedge", "The overlay and its ticket", tuple(blocks)) if blocks else None


# --------------------------------------------------------------------------- stress

def scenario_table(run: Mapping, *, narrow: bool = False) -> list[Table]:
    """The scenarios: sizes in sd beside the sample's largest move, P&L as held and with the
    overlay, the recorded intervals (in a second table when ``narrow``, for the terminal)."""
    stress = run.get("stress") or {}
    rows_in = [r for r in stress.get("scenarios") or [] if isinstance(r, Mapping)]
    if not rows_in:
        return []
    ccy = _ccy(run) or "currency"
    label = interval_name(_meta(run), stress)
    main, spans = [], []
    for r in rows_in:
        held, hedged = _scenario_pnl(r, "unhedged"), _scenario_pnl(r, "hedged")
        name, reading = scenario_label(r), str(r.get("reading") or DASH)
        iv_held = interval(held.get("interval") or held, 2, percent=True)
        iv_hedged = interval(hedged.get("interval") or hedged, 2, percent=True)
        main.append((name, reading, fmt(r.get("largest_sd"), 1), fmt(r.get("sample_max_sd"), 1),
                     pct(held.get("return")), money(held.get("currency"), short=True),
                     *(() if narrow else (iv_held,)), pct(hedged.get("return")),
                     money(hedged.get("currency"), short=True), *(() if narrow else (iv_hedged,))))
        spans.append((name, reading, iv_held, iv_hedged))
    cols = ("Scenario", "Reading", "Size, sd", "Largest in sample, sd", "As held, % of NAV",
            f"As held, {ccy}", *(() if narrow else (label,)), "With the overlay, % of NAV",
            f"With the overlay, {ccy}", *(() if narrow else (label,)))
    beside = (", beside the largest such move in the sample"
              if any(num(r.get("sample_max_sd")) is not None for r in rows_in) else "")
    note = (f"Size: the surprise in standard deviations of the innovation it shocks{beside}. 'isolated': "
            "the other state variables do not move; 'comove': they move by their typical co-movement "
            "with the named ones.")
    ivnote = "Intervals from the estimation error of the betas only."
    out = [_table(cols, main, "Stress scenarios", numeric=(False, False) + (True,) * (len(cols) - 2),
                  note=note + ("" if narrow else " " + ivnote))]
    if narrow:
        out.append(_table(("Scenario", "Reading", f"As held, {label}", f"With the overlay, {label}"), spans,
                          "Stress scenarios: intervals of the P&L (% of NAV)",
                          numeric=(False, False, True, True), note=ivnote))
    return out


def replay_table(run: Mapping) -> Table | None:
    stress = run.get("stress") or {}
    replay = stress.get("replay") or {}
    one, many = period_words(_meta(run))
    rows_in = replay.get(many) or next((v for v in replay.values() if v), [])
    unit = many if replay.get(many) else next((k for k, v in replay.items() if v), many)
    rows_in = [r for r in rows_in if isinstance(r, Mapping)]
    if not rows_in:
        return None
    ranked = "book" if any(r.get("ranked_by") == "book" for r in rows_in) else rows_in[0].get("ranked_by")
    sel = [r for r in rows_in if r.get("ranked_by") == ranked]
    rows = [(str(r.get("date")), pct(r.get("model_unhedged")), pct(r.get("model_hedged")),
             pct(r.get("realised"))) for r in sel]
    return _table((unit[:-1].capitalize() if unit.endswith("s") else unit, "State-driven, as held",
                   "State-driven, with the overlay", "Realised"), rows,
                  f"Historical replay: the worst {unit} of the sample (ranked by {ranked})",
                  numeric=(False, True, True, True))


def stress_section(run: Mapping, *, detail: bool = False) -> Section | None:
    stress = run.get("stress") or {}
    tables = scenario_table(run, narrow=True)
    if not tables:
        return None
    from . import plots
    rows = [r for r in stress.get("scenarios") or [] if isinstance(r, Mapping)]
    chart = [{"label": f"{scenario_label(r)} ({r.get('reading')})" if r.get("reading") else scenario_label(r),
              "before": num(_scenario_pnl(r, "unhedged").get("return")),
              "after": num(_scenario_pnl(r, "hedged").get("return"))} for r in rows]
    blocks: list[Block] = []
    if not detail:
        blocks.append(Plot("stress", "Scenario P&L of the book as held and with the overlay (labels as in "
                                     "the table, with the reading).",
                           lambda: plots.stress_chart(chart, unit="% of NAV")))
    blocks += tables
    replay = replay_table(run)
    if replay is not None:
        blocks.append(replay)
    return Section("stress", "Stress scenarios", tuple(blocks))


# --------------------------------------------------------------------------- walk-forward

def backtest_section(run: Mapping, *, detail: bool = False) -> Section | None:
    bt = run.get("backtest") or {}
    if not bt:
        return None
    from . import plots
    meta = _meta(run)
    ccy = _ccy(run)
    one, many = period_words(meta)
    blocks: list[Block] = []
    series = bt.get("series") or {}
    drawn = {label: series.get(key) for key, label in (("book", "book as held"),
                                                       ("hedged_net", "with the overlay, net of costs"))
             if isinstance(series.get(key), list)}
    if not detail and series.get("dates") and drawn:
        blocks.append(Plot("backtest", f"Walk-forward check: cumulative excess return (sum of {one}ly "
                                       "returns) of the book as held and with the overlay, each decision "
                                       "made with data up to its rebalance date only.",
                           lambda: plots.backtest_chart(series["dates"], drawn,
                                                        ylabel="cumulative excess return")))
    facts: list[tuple[str, str]] = []
    if num(bt.get("effectiveness")) is not None:
        facts.append(("Hedge effectiveness, all state-driven P&L", pct(bt["effectiveness"], 1)))
    if num(bt.get("effectiveness_neutralised")) is not None:
        names = ", ".join(str(f) for f in bt.get("neutralised") or []) or "neutralised factors"
        facts.append((f"Hedge effectiveness, {names}", pct(bt["effectiveness_neutralised"], 1)))
    for key, text in (("realised_tracking_error", "Realised tracking error, a year"),
                      ("predicted_tracking_error", "Predicted tracking error, a year")):
        if num(bt.get(key)) is not None:
            facts.append((text, pct(bt[key])))
    if num(bt.get("turnover_annual")) is not None:
        facts.append(("Turnover a year, of NAV", pct(bt["turnover_annual"], 1)))
    if num(bt.get("costs_paid_annual")) is not None:
        facts.append(("Costs paid a year", bp(bt["costs_paid_annual"], 2)))
    if num(bt.get("costs_paid_currency")) is not None:
        facts.append(("Costs paid over the test", money(bt["costs_paid_currency"], ccy)))
    rebal = bt.get("rebalance_dates") or []
    if rebal:
        facts.append(("Rebalances", f"{len(rebal)} ({rebal[0]} to {rebal[-1]})"))
    n_out = bt.get("n_periods", bt.get("n_months"))
    if n_out is not None:
        facts.append((f"{many.capitalize()} out of sample", str(n_out)))
    if bt.get("n_unreachable"):
        facts.append(("Rebalances that could not reach the targets (closest overlay held)",
                      str(bt["n_unreachable"])))
    if facts:
        blocks.append(_table(("Measure", "Value"), facts, "Walk-forward summary"))
    by_factor = bt.get("effectiveness_by_factor") or {}
    if by_factor:
        notes = bt.get("effectiveness_note") or {}
        neutral = {str(f) for f in bt.get("neutralised") or []}
        rows = []
        for f, v in by_factor.items():
            val = num(v)
            remark = (str(notes.get(f) or "no figure given") if val is None
                      else "the overlay added variance" if val < 0 else "")
            rows.append((str(f), "yes" if f in neutral else "no", pct(val, 1), remark))
        blocks.append(_table(("Factor", "Neutralised", "Effectiveness", "Remark"), rows,
                             "Out-of-sample effectiveness by factor", numeric=(False, False, True, False),
                             note="1 - hedged / unhedged variance of the P&L driven by that factor; "
                                  "negative where the overlay adds variance."))
    intervals = bt.get("realised_exposure_interval") or {}
    realised = bt.get("realised_exposure") or {}
    if realised:
        label = interval_name(meta, bt)
        rows = []
        for f in [str(x) for x in bt.get("factors") or realised.get("unhedged") or []]:
            rows.append((f, fmt(get(realised, "unhedged", f)), interval(get(intervals, "unhedged", f)),
                         fmt(get(realised, "hedged", f)), interval(get(intervals, "hedged", f))))
        blocks.append(_table(("Factor", "As held", label, "With the overlay", label), rows,
                             "Realised exposures out of sample",
                             note=f"Betas of the realised returns on the next {one}'s real-time innovations."))
    decisions = bt.get("decisions") or {}
    if decisions and not detail:
        last = list(decisions)[-4:]
        names = list(dict.fromkeys(k for d in last for k in (decisions[d] or {})))
        rows = [(n, *(pct(get(decisions, d, n), 1) for d in last)) for n in names]
        blocks.append(_table(("Instrument", *map(str, last)), rows,
                             "The last overlay decisions (weight of NAV)"))
    return Section("backtest", "Walk-forward check", tuple(blocks)) if blocks else None


# --------------------------------------------------------------------------- history, states, notes

def history_section(run: Mapping) -> Section | None:
    """Quarter on quarter: this run against the previous stored run of the same book."""
    hist = run.get("history") or None
    if not hist:
        return None
    prev = str(hist.get("previous_sample_end") or DASH)
    now = str(_meta(run).get("sample_end") or DASH)
    blocks: list[Block] = []
    for key, title in (("exposure", "Book exposure"), ("hedge", "Overlay weight (of NAV)")):
        rows = []
        for name, v in (hist.get(key) or {}).items():
            b, a = num(get(v, "before")), num(get(v, "after"))
            rows.append((str(name), fmt(b), fmt(a), fmt(None if a is None or b is None else a - b, plus=True)))
        if rows:
            blocks.append(_table(("Name", f"Data to {prev}", f"Data to {now}", "Change"), rows, title))
    changes = hist.get("changes") or []
    if changes:
        blocks.append(Bullets(tuple(f"{c.get('quantity')} {c.get('name')}: {fmt(c.get('before'))} to "
                                    f"{fmt(c.get('after'))} (limit {fmt(c.get('limit'))})" for c in changes)))
    else:
        blocks.append(Para("No exposure, price of risk or overlay weight moved beyond the change limits "
                           "since the previous run."))
    return Section("history", f"Since the previous run (data to {prev})", tuple(blocks))


def states_blocks(run: Mapping) -> list[Block]:
    """The VAR of the state vector in full (terminal detail of the states command)."""
    st = run.get("states") or {}
    if not st:
        return []
    meta = _meta(run)
    v = [str(x) for x in st.get("variables") or []]
    coef, marks = st.get("coef") or {}, st.get("coef_marks") or {}
    lags = int(st.get("lags") or 1)
    regs = list(next(iter(coef.values()), {}) or {})
    blocks: list[Block] = []
    for lag in range(1, lags + 1):
        cols = [r for r in regs if r.endswith(f".L{lag}")]
        rows = []
        for eq in v:
            cells = [eq]
            if lag == 1:
                cells.append(marked(get(st, "intercept", eq), get(st, "intercept_marks", eq), 4))
            cells += [marked(get(coef, eq, r), get(marks, eq, r)) for r in cols]
            if lag == 1:
                cells.append(fmt(get(st, "r2", eq), 3))
            rows.append(cells)
        head = ["Equation"] + (["const"] if lag == 1 else []) + cols + (["R\u00b2"] if lag == 1 else [])
        title = (f"VAR({lags}) of the state vector, {sample_text(st, meta) or str(st.get('nobs', ''))}"
                 if lag == 1 else f"VAR({lags}): lag {lag} coefficients")
        blocks.append(_table(head, rows, title,
                             note="Marks: *** p < 1 %, ** p < 5 %, * p < 10 % (two-sided, OLS standard "
                                  "errors), where the record gives them." if lag == lags else ""))
    blocks += stability_blocks(st)
    sd = get(st, "innovation_sd", "raw") or {}
    corr = st.get("raw_corr") or {}
    if corr:
        rows = [[a, *(fmt(get(corr, a, b), 2) for b in v), fmt(sd.get(a), 5)] for a in v]
        blocks.append(_table(["", *v, "sd"], rows, "Raw innovations: correlation (and sd)"))
    corr = st.get("orthogonal_corr") or {}
    if corr:
        rows = [[a, *(fmt(get(corr, a, b), 2) for b in v)] for a in v]
        blocks.append(_table(["", *v], rows, "Orthogonal innovations: correlation",
                             note="Gram-Schmidt in the order above, each scaled to the market "
                                  "innovation's sd."))
    m = st.get("transform") or {}
    if m:
        rows = [[a, *(fmt(get(m, a, b), 3) for b in v)] for a in v]
        blocks.append(_table(["", *v], rows, "Transform M (orthogonal = M x raw)"))
    return blocks


def stability_blocks(st: Mapping) -> list[Block]:
    modulus = num(st.get("max_eigen_modulus"))
    if modulus is None:
        return []
    lags = st.get("lags")
    text = (f"State VAR{f'({lags})' if lags else ''}: largest modulus of the companion matrix's "
            f"eigenvalues {fmt(modulus, 4)}.")
    if st.get("stable") is False:
        return [Para(text + " The system is not stationary: innovations, betas and scenarios built on "
                            "it are not reliable.", "alert")]
    return [Para(text + " Below one: the system is stationary.")]


def _stage_warnings(run: Mapping) -> list[str]:
    out = [str(w) for w in run.get("warnings") or []]
    seen = set(out)
    for stage in ("states", "exposures", "premia", "hedge", "stress", "backtest"):
        out += [f"{stage}: {w}" for w in get(run, stage, "warnings", default=None) or [] if str(w) not in seen]
    return list(dict.fromkeys(out))


def diagnostics_section(run: Mapping) -> Section:
    blocks: list[Block] = []
    st = run.get("states") or {}
    blocks += stability_blocks(st)
    r2 = st.get("r2") or {}
    if r2:
        blocks.append(_table(("Equation", "R\u00b2"), [(str(k), fmt(v, 3)) for k, v in r2.items()],
                             "VAR equations"))
    premia = run.get("premia") or {}
    if premia.get("n_skipped"):
        _, many = period_words(_meta(run))
        blocks.append(Para(f"{premia['n_skipped']} {many} were skipped in the cross-sectional step "
                           "(too few usable assets or a rank-deficient design)."))
    ex = run.get("exposures") or {}
    direct, gap = ex.get("portfolio_direct") or {}, ex.get("gap") or {}
    if direct or gap:
        rows = [(f, fmt(get(ex, "portfolio", f)), fmt(direct.get(f)), fmt(gap.get(f)))
                for f in factor_names(run)]
        blocks.append(_table(("Factor", "From holdings", "From the book's returns", "Gap"), rows,
                             "Holdings-based against return-based exposures",
                             note="A large gap points to holdings that changed over the sample, positions "
                                  "outside the test assets, or fees and cash."))
    warnings = _stage_warnings(run)
    if warnings:
        blocks.append(Bullets(tuple(warnings)))
    meta = _meta(run)
    prov = [("hedgekit version", str(meta.get("version") or DASH)),
            ("Run at", str(meta.get("run_at") or DASH)),
            ("Configuration", str(meta.get("config") or DASH))]
    prov += [(f"Input {k} (SHA-256)", str(v)[:16] + "\u2026") for k, v in sorted_items(meta.get("input_hashes"))]
    blocks.append(_table(("Item", "Value"), prov, "Provenance", numeric=(False, False)))
    return Section("diagnostics", "Diagnostics", tuple(blocks))


METHODS = (
    "State variables follow a VAR estimated equation by equation by OLS (Hamilton 1994, Time Series "
    "Analysis, ch. 11; L\u00fctkepohl 2005, New Introduction to Multiple Time Series Analysis, ch. 3). "
    "Its residuals are orthogonalised in the configured order by Gram-Schmidt, equivalently "
    "M = D L\u207b\u00b9 with L the Cholesky factor of their covariance.",
    "Exposures are time-series betas of excess returns on the market return and the orthogonal "
    "innovations, with Newey-West standard errors (Newey and West 1987, Econometrica; lag choice from "
    "Newey and West 1994, Review of Economic Studies).",
    "Prices of risk are Fama-MacBeth cross-sectional averages (Fama and MacBeth 1973, Journal of "
    "Political Economy; Cochrane 2005, Asset Pricing, rev. ed., ch. 12), with the errors-in-variables "
    "correction of Shanken 1992 (Review of Financial Studies) and the GRS test of Gibbons, Ross and "
    "Shanken 1989 (Econometrica).",
    "The overlay solves a convex program: least tracking variance subject to exposure targets and "
    "limits (Boyd and Vandenberghe 2004, Convex Optimization), then whole contracts. Covariance "
    "shrinkage, when chosen, follows Ledoit and Wolf 2004 (Journal of Multivariate Analysis).",
    "Intervals are two-sided, estimate \u00b1 z \u00b7 standard error at the configured level (normal "
    "approximation). Stress scenarios map surprises in natural units to orthogonal shocks through M; "
    "the walk-forward check re-estimates everything with data up to each rebalance date only.",
)


def cautions(run: Mapping) -> tuple[str, ...]:
    """``run["cautions"]`` as given (the run record carries the standing cautions of
    :mod:`hedgekit.cautions` and any a stage adds); nothing merged or rewritten here."""
    return tuple(str(c) for c in run.get("cautions") or [])


def build_document(run: Mapping) -> Document:
    """The report's content from the run dictionary (sections only where data are present)."""
    meta = _meta(run)
    fund = str(meta.get("fund") or "Unnamed book")
    subtitle = f"Exposure report, data {meta.get('sample_start', DASH)} to {meta.get('sample_end', DASH)}"
    builders: tuple[Callable[[Mapping], Section | None], ...] = (
        summary_section, exposures_section, rolling_section, premia_section, hedge_section,
        stress_section, backtest_section, history_section, diagnostics_section)
    sections = [s for s in (b(run) for b in builders) if s is not None]
    sections.append(Section("methods", "Methods and sources", (Bullets(METHODS),)))
    sections.append(Section("cautions", "Cautions", (Bullets(cautions(run)),)))
    return Document(fund, subtitle, tuple(sections), generated=str(meta.get("run_at") or ""))
