"""Terminal output: rich tables on a terminal, plain text when piped or ``NO_COLOR`` is set.

Only formatting lives here; every number shown comes from a stage result.
"""

from __future__ import annotations

import math
import os
import sys
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

from rich import box
from rich.console import Console
from rich.table import Table

CAUTIONS = (
    "Decision support, not investment advice. Sizing and execution of any hedge stay with the firm's "
    "licensed professionals, its model-risk governance and the rules that apply to it.",
    "Estimates are statistical and sample-dependent; relations between state variables and returns "
    "shift across regimes.",
    "Derivative overlays bring margin, basis, liquidity and counterparty risk that these numbers do not show.",
)


def plain_output(stream=None) -> bool:
    stream = stream or sys.stdout
    return bool(os.environ.get("NO_COLOR")) or not getattr(stream, "isatty", lambda: False)()


def make_console(stream=None, width: int | None = None) -> Console:
    stream = stream or sys.stdout
    plain = plain_output(stream)
    if width is None and plain:
        cols = os.environ.get("COLUMNS", "")
        width = int(cols) if cols.isdigit() and int(cols) >= 40 else 100
    return Console(file=stream, no_color=plain, force_terminal=False if plain else None,
                   width=width, highlight=False, emoji=False, soft_wrap=False)


def fmt(x: Any, digits: int = 3, pct: bool = False, money: bool = False) -> str:
    """Format a number for a table; blanks for missing."""
    if x is None:
        return "-"
    if isinstance(x, str):
        return x
    try:
        v = float(x)
    except (TypeError, ValueError):
        return str(x)
    if math.isnan(v):
        return "-"
    if money:
        return f"{v:,.0f}"
    if pct:
        return f"{v * 100:.{max(digits - 1, 1)}f}%"
    return f"{v:.{digits}f}"


def money_short(x: Any) -> str:
    """Currency in thousands or millions: 1.2m, -350k."""
    try:
        v = float(x)
    except (TypeError, ValueError):
        return "-"
    if math.isnan(v):
        return "-"
    if abs(v) >= 1e9:
        return f"{v / 1e9:,.2f}bn"
    if abs(v) >= 1e6:
        return f"{v / 1e6:,.1f}m"
    if abs(v) >= 1e3:
        return f"{v / 1e3:,.0f}k"
    return f"{v:,.0f}"


def stars(t: float | None) -> str:
    """Significance marks from a t-statistic (normal two-sided 10/5/1 %)."""
    if t is None or not isinstance(t, int | float) or math.isnan(t):
        return ""
    a = abs(t)
    return "***" if a >= 2.576 else "**" if a >= 1.960 else "*" if a >= 1.645 else ""


def table(title: str, columns: Sequence[str], rows: Iterable[Sequence[Any]], *, plain: bool,
          caption: str | None = None, first_left: bool = True) -> Table:
    t = Table(title=title, box=box.SIMPLE_HEAD if plain else box.ROUNDED, caption=caption,
              title_justify="left", caption_justify="left", header_style="" if plain else "bold",
              title_style="" if plain else "bold cyan", pad_edge=False,
              min_width=len(title) + 2)
    for i, c in enumerate(columns):
        t.add_column(c, justify="left" if (i == 0 and first_left) else "right", no_wrap=i == 0)
    for row in rows:
        t.add_row(*[fmt(v) if not isinstance(v, str) else v for v in row])
    return t


def mapping_rows(data: Mapping[str, Mapping[str, Any]], columns: Sequence[str], digits: int = 3):
    for name, values in data.items():
        yield [str(name)] + [fmt(values.get(c), digits) for c in columns]


def print_cautions(console: Console) -> None:
    console.print()
    console.print("Cautions" if console.no_color else "[bold yellow]Cautions[/]")
    grid = Table.grid(padding=(0, 1), pad_edge=True)
    grid.add_column(width=2, justify="right")
    grid.add_column()
    for line in CAUTIONS:
        grid.add_row("-", line)
    console.print(grid)


# --------------------------------------------------------------------------- progress

class progress_bar:
    """A rich progress bar on stderr for long steps; ``tick(i, n)`` advances it."""

    def __init__(self, label: str) -> None:
        self.label = label
        self._progress = None
        self._task = None

    def __enter__(self):
        from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn
        err = Console(file=sys.stderr)
        if err.is_terminal and not os.environ.get("NO_COLOR"):
            self._progress = Progress(TextColumn(self.label), BarColumn(), TextColumn("{task.completed}/{task.total}"),
                                      TimeElapsedColumn(), console=err, transient=True)
            self._progress.start()

        def tick(i: int, n: int) -> None:
            if self._progress is None:
                return
            if self._task is None:
                self._task = self._progress.add_task(self.label, total=n)
            self._progress.update(self._task, completed=i, total=n)
        return tick

    def __exit__(self, *exc) -> None:
        if self._progress is not None:
            self._progress.stop()


# --------------------------------------------------------------------------- stage tables

def _plain(con: Console) -> bool:
    return bool(con.no_color)


def _heading(con: Console, text: str) -> None:
    con.print()
    con.print(text if _plain(con) else f"[bold]{text}[/]")


def show_inputs(con: Console, config, data) -> None:
    s = data.summary()
    plain = _plain(con)
    con.print(f"{config['portfolio']['name']}  (NAV {config['portfolio']['nav']:,.0f} "
              f"{config['portfolio']['currency']}, {s['frequency']})")
    rows = []
    for key in ("states", "assets", "instruments", "factors"):
        if key in s:
            v = s[key]
            rows.append([key, v["start"], v["end"], str(v["periods"]), str(len(v["columns"])),
                         str(v["missing_cells"])])
    con.print(table("Inputs", ["file", "first", "last", "periods", "series", "blank cells"], rows, plain=plain))
    if data.holdings is not None:
        con.print(table("Holdings (weight of NAV)", ["asset", "weight"],
                        [[a, fmt(w, 2, pct=True)] for a, w in data.holdings.items()], plain=plain))
    if data.sheet is not None:
        con.print(table("Hedge instruments", ["instrument", "multiplier", "price", "cost bp", "min wt", "max wt"],
                        [[i, fmt(r.multiplier, 0), fmt(r.price, 2), fmt(r.cost_bps, 1), fmt(r.min_weight, 2),
                          fmt(r.max_weight, 2)] for i, r in data.sheet.iterrows()], plain=plain))
    for w in data.warnings:
        con.print(f"note: {w}")


def show_states(con: Console, res) -> None:
    plain = _plain(con)
    v = list(res.variables)
    regs = list(res.coef.columns)
    # One table per lag keeps each readable in 100 columns; the full set is in --json / --out.
    for lag in range(1, res.lags + 1):
        cols = [r for r in regs if r.endswith(f".L{lag}")]
        rows = []
        for eq in v:
            cells = [eq] + ([fmt(res.intercept[eq], 4) + stars(res.intercept_t[eq])] if lag == 1 else [])
            cells += [fmt(res.coef.loc[eq, r], 3) + stars(res.coef_t.loc[eq, r]) for r in cols]
            cells += [fmt(res.r2[eq], 3)] if lag == 1 else []
            rows.append(cells)
        head = ["equation"] + (["const"] if lag == 1 else []) + cols + (["R2"] if lag == 1 else [])
        title = (f"VAR({res.lags}) of the state vector, {res.nobs} periods ({res.raw.index[0]} to "
                 f"{res.raw.index[-1]})" if lag == 1 else f"VAR({res.lags}): lag {lag} coefficients")
        con.print(table(title, head, rows, plain=plain,
                        caption="* 10 %, ** 5 %, *** 1 % (two-sided, OLS standard errors)" if lag == res.lags else None))
    mod = res.max_eigen_modulus
    if res.stable:
        con.print(f"Stability: largest companion eigenvalue modulus {mod:.4f} (< 1: stationary).")
    else:
        con.print(("WARNING" if plain else "[bold red]WARNING[/]") +
                  f": largest companion eigenvalue modulus {mod:.4f} >= 1: the VAR is not stationary; "
                  "innovations and everything built on them are suspect.")
    sd = res.raw.std(ddof=1)
    rows = [[a] + [fmt(res.raw_corr.loc[a, b], 2) for b in v] + [fmt(sd[a], 5)] for a in v]
    con.print(table("Raw innovations: correlation (and sd)", ["", *v, "sd"], rows, plain=plain))
    rows = [[a] + [fmt(res.orthogonal_corr.loc[a, b], 2) for b in v] for a in v]
    con.print(table("Orthogonal innovations: correlation", ["", *v], rows, plain=plain,
                    caption="Gram-Schmidt in the order above, each scaled to the market innovation's sd."))
    rows = [[a] + [fmt(res.transform.loc[a, b], 3) for b in v] for a in v]
    con.print(table("Transform M (orthogonal = M x raw)", ["", *v], rows, plain=plain))


def _exposure_rows(betas, se, extra_cols=()):
    for f in betas.index:
        b, s = float(betas[f]), float(se[f]) if se is not None else float("nan")
        t = b / s if s and s == s else float("nan")
        yield [f, fmt(b, 3), fmt(s, 3), fmt(t, 2) + stars(t), *[fn(f) for fn in extra_cols]]


def show_exposures(con: Console, res, fs, config, impacts=None) -> None:
    plain = _plain(con)
    nav = config["portfolio"]["nav"]
    sd = res.factor_sd
    extra = [lambda f: fmt(res.book[f] * sd[f], 2, pct=True),
             lambda f: fmt(res.book[f] * sd[f] * nav, money=True)]
    cols = ["factor", "beta", "HAC se", "t", "1-sd move, % NAV", f"1-sd P&L ({config['portfolio']['currency']})"]
    if res.book_direct is not None and res.book_gap is not None:
        cols += ["direct", "gap"]
        extra += [lambda f: fmt(res.book_direct.betas.iloc[0][f], 3), lambda f: fmt(res.book_gap[f], 3)]
    con.print(table(f"Book exposures ({res.book_source}), {fs.factors.index[0]} to {fs.factors.index[-1]}",
                    cols, _exposure_rows(res.book, res.book_se, extra), plain=plain,
                    caption=("Factors: the market excess return" if config["states"]["market_factor"] == "return"
                             else "Factors: the market innovation") + " and orthogonal innovations (same sd); "
                            "a 1-sd move is one standard deviation of the factor. * 10 %, ** 5 %, *** 1 %"))
    if impacts is not None:
        ccy = config["portfolio"]["currency"]
        rows = [[v, fmt(r["isolated_return"], 2, pct=True), money_short(r["isolated_pnl"]),
                 fmt(r["comove_return"], 2, pct=True), money_short(r["comove_pnl"])] for v, r in impacts.iterrows()]
        con.print(table("Book P&L per +100 bp surprise (+1 % for the market, +1 point for a yield)",
                        ["surprise in", "isolated", ccy, "with co-moves", ccy], rows, plain=plain,
                        caption="isolated: other raw surprises zero; with co-moves: the others at their "
                                "conditional mean."))
    f = list(res.factors)
    a = res.assets
    rows = [[name] + [fmt(a.betas.loc[name, c], 2) + stars(a.t_hac.loc[name, c]) for c in f] +
            [str(int(a.n_obs[name])), fmt(a.r2[name], 2)] for name in a.betas.index]
    con.print(table("Test-asset betas (HAC t marks)", ["asset", *f, "months", "R2"], rows, plain=plain))
    if res.instruments is not None:
        i = res.instruments
        rows = [[name] + [fmt(i.betas.loc[name, c], 2) + stars(i.t_hac.loc[name, c]) for c in f] +
                [fmt(i.r2[name], 2)] for name in i.betas.index]
        con.print(table("Hedge-instrument betas", ["instrument", *f, "R2"], rows, plain=plain))
    if res.rolling_book is not None:
        rb = res.rolling_book.dropna()
        if len(rb):
            picks = rb.iloc[:: max(1, len(rb) // 8)]
            if picks.index[-1] != rb.index[-1]:
                picks = pd_concat(picks, rb.iloc[[-1]])
            rows = [[str(d)] + [fmt(picks.loc[d, c], 2) for c in f] for d in picks.index]
            con.print(table("Rolling book exposure (window ending at date)", ["date", *f], rows, plain=plain))


def pd_concat(a, b):
    import pandas as pd
    return pd.concat([a, b])


def show_premia(con: Console, res, exposures, periods_per_year: int) -> None:
    plain = _plain(con)
    rows = []
    for f in res.lambda_.index:
        lam = res.lambda_[f]
        rows.append([f, fmt(lam, 4), fmt(lam * periods_per_year, 2, pct=True), fmt(res.t_fm[f], 2) + stars(res.t_fm[f]),
                     fmt(res.t_nw[f], 2) + stars(res.t_nw[f]), fmt(res.t_shanken[f], 2) + stars(res.t_shanken[f])])
    label = "Shanken t (approx.)" if res.shanken_approximate else "Shanken t"
    skipped = f"{res.n_skipped} skipped" + (" (incl. the warm-up before the first rolling window)"
                                            if res.betas_used == "rolling" and res.n_skipped else "")
    con.print(table(f"Prices of risk (Fama-MacBeth, {res.betas_used} betas)",
                    ["factor", "lambda/period", "annualised", "FM t", "NW t", label], rows, plain=plain,
                    caption=f"{res.n_periods} cross-sections, {skipped}; cross-sectional R2 {fmt(res.r2_cs, 3)}; "
                            f"Newey-West lags {res.nw_lags}."))
    pe = res.pricing_error_test
    con.print(f"Pricing errors jointly zero: chi2 = {fmt(pe.get('stat'), 2)}, df = {pe.get('df')}, "
              f"p = {fmt(pe.get('pvalue'), 3)}"
              + (f"; Shanken-adjusted p = {fmt(res.pricing_error_test_shanken.get('pvalue'), 3)}"
                 if res.pricing_error_test_shanken else ""))
    if res.grs:
        con.print(f"GRS: F = {fmt(res.grs.get('stat'), 2)}, p = {fmt(res.grs.get('pvalue'), 3)}")
    from .premia import book_premium
    bp = book_premium(exposures.book, res, book_se=exposures.book_se, periods_per_year=periods_per_year)
    rows = [[str(i), fmt(r["beta"], 3), fmt(r["premium_annual"], 2, pct=True), fmt(r["premium_annual_se"], 2, pct=True),
             fmt(r["t"], 2) + stars(r["t"])] for i, r in bp.iterrows()]
    con.print(table("The book's expected premium by exposure (what a hedge of it gives up)",
                    ["factor", "beta", "premium/yr", "se", "t"], rows, plain=plain))


def show_hedge(con: Console, res, config) -> None:
    plain = _plain(con)
    ccy = config["portfolio"]["currency"]
    t = res.ticket
    rows = [[i, fmt(r["weight"], 2, pct=True), fmt(r["notional"], money=True), str(int(r["contracts"])),
             fmt(r["weight_rounded"], 2, pct=True), fmt(r["cost"], money=True)] for i, r in t.iterrows()]
    status = res.status.upper()
    con.print(table(f"Hedge ticket: {status}", ["instrument", "weight of NAV", f"notional ({ccy})", "contracts",
                                                 "weight (rounded)", f"cost ({ccy})"], rows, plain=plain))
    f = list(res.exposure_before.index)
    lo_b = res.exposure_before - 1.96 * res.exposure_before_se if res.exposure_before_se is not None else None
    rows = []
    for x in f:
        ci = ""
        if res.exposure_after_se is not None:
            ci = (f"[{fmt(res.exposure_after[x] - 1.96 * res.exposure_after_se[x], 3)}, "
                  f"{fmt(res.exposure_after[x] + 1.96 * res.exposure_after_se[x], 3)}]")
        rows.append([x, fmt(res.exposure_before[x], 3), fmt(res.exposure_after[x], 3), ci,
                     fmt(res.exposure_after_rounded[x], 3)])
    del lo_b
    con.print(table("Exposures before and after the overlay", ["factor", "before", "after", "95 % interval",
                                                                "after rounding"], rows, plain=plain))
    con.print(f"{res.message}")
    con.print(f"Tracking error {fmt(res.tracking_error, 2, pct=True)} a year (rounded: "
              f"{fmt(res.tracking_error_rounded, 2, pct=True)}); gross {fmt(res.gross, 2, pct=True)} of NAV; "
              f"cost {fmt(res.cost_currency, money=True)} {ccy}; premium given up "
              f"{fmt(res.premium_given_up, 2, pct=True)} a year (from the estimated prices of risk).")
    if res.binding:
        con.print("Binding limits: " + "; ".join(res.binding))
    if res.unreachable:
        con.print(("UNREACHABLE" if plain else "[bold red]UNREACHABLE[/]") + ": " + ", ".join(res.unreachable))
    if res.robust_gross_ratio is not None:
        con.print(f"Robust overlay is {res.robust_gross_ratio:.2f}x the nominal gross notional.")


def show_stress(con: Console, res, config) -> None:
    plain = _plain(con)
    ccy = config["portfolio"]["currency"]
    t = res.table
    rows = [[r.scenario, r.reading, fmt(r.unhedged, 1, pct=True), money_short(r.unhedged_ccy),
             fmt(r.hedged, 1, pct=True), money_short(r.hedged_ccy),
             "±" + fmt((r.hedged_hi - r.hedged_lo) / 2, 1, pct=True)] for r in t.itertuples()]
    con.print(table("Scenario P&L before and after the overlay", ["scenario", "reading", "book", f"book {ccy}",
                                                                   "hedged", f"hedged {ccy}", "95 %"],
                    rows, plain=plain, caption="isolated: other surprises zero; comove: the others at their "
                                               "conditional mean given the named ones."))
    if res.replay_months is not None and len(res.replay_months):
        rm = res.replay_months
        sub = rm[rm["ranked_by"] == rm["ranked_by"].iloc[-1]] if "ranked_by" in rm.columns else rm
        cols = [c for c in ("date", "model_unhedged", "model_hedged", "realised") if c in sub.columns]
        rows = [[str(r[c]) if c == "date" else fmt(r[c], 2, pct=True) for c in cols] for _, r in sub.iterrows()]
        con.print(table(f"Worst months of the sample ({sub['ranked_by'].iloc[0] if 'ranked_by' in sub else ''})",
                        cols, rows, plain=plain))


def show_backtest(con: Console, res, config) -> None:
    plain = _plain(con)
    d = res
    con.print(table("Walk-forward check (decisions use data up to each rebalance date only)", ["measure", "value"], [
        ["rebalances", str(len(d.rebalance_dates))],
        ["first / last decision", f"{d.rebalance_dates[0]} / {d.rebalance_dates[-1]}" if len(d.rebalance_dates) else "-"],
        [f"out-of-sample {getattr(d, 'period_label', 'months')}", str(getattr(d, "n_periods", d.n_months))],
        ["rebalances that could not reach the targets", str(getattr(d, "n_unreachable", 0))],
        ["hedge effectiveness (state-driven P&L)", fmt(d.effectiveness, 1, pct=True)],
        ["effectiveness on neutralised factors", fmt(d.effectiveness_neutralised, 1, pct=True)],
        ["realised tracking error (a year)", fmt(d.realised_tracking_error, 2, pct=True)],
        ["predicted tracking error (a year)", fmt(d.predicted_tracking_error, 2, pct=True)],
        ["turnover (a year, of NAV)", fmt(d.turnover_annual, 1, pct=True)],
        ["costs paid (bp of NAV a year)", fmt(d.costs_paid_annual * 1e4, 2)],
    ], plain=plain))
    f = list(d.factors)
    iu, ih = d.interval("unhedged"), d.interval("hedged")
    rows = [[x, fmt(iu.loc["beta", x], 3), f"[{fmt(iu.loc['lo', x], 3)}, {fmt(iu.loc['hi', x], 3)}]",
             fmt(ih.loc["beta", x], 3), f"[{fmt(ih.loc['lo', x], 3)}, {fmt(ih.loc['hi', x], 3)}]"] for x in f]
    con.print(table("Realised exposure to the out-of-sample innovations", ["factor", "unhedged", "95 %", "hedged",
                                                                           "95 %"], rows, plain=plain))


def show_history(con: Console, frame, flags) -> None:
    plain = _plain(con)
    if frame is None or not len(frame):
        con.print("No runs stored yet.")
        return
    cols = [c for c in frame.columns if c.startswith(("exposure:", "hedge:")) or c in ("tracking_error",)]
    rows = []
    for c in cols:
        rows.append([c] + [fmt(v, 3) for v in frame[c]])
    heads = [f"run {r} ({e})" for r, e in zip(frame["run_id"], frame["sample_end"], strict=False)]
    con.print(table("Runs side by side", ["quantity", *heads], rows, plain=plain))
    if flags is not None and len(flags):
        rows = [[f"{r.quantity}:{r.name}", str(r.previous_sample_end), str(r.sample_end), fmt(r.before, 3),
                 fmt(r.after, 3), fmt(r.change, 3)] for r in flags.itertuples()]
        con.print(table("Large changes between consecutive runs", ["what", "from", "to", "before", "after", "change"],
                        rows, plain=plain))
    else:
        con.print("No large changes between consecutive runs.")


def show_run(con: Console, run, payload: Mapping) -> None:
    """The compact summary first, then the detail tables."""
    plain = _plain(con)
    meta = payload["meta"]
    cfg = run.config
    ex, hedge, stress = run.exposures, run.hedge, run.stress
    ccy = meta["currency"]
    title = f"{meta['fund']}: quarterly exposure summary"
    con.print(title if plain else f"[bold cyan]{title}[/]")
    con.print(f"Sample {meta['sample_start']} to {meta['sample_end']} ({meta['periods']} periods, {meta['frequency']}); "
              f"NAV {meta['nav']:,.0f} {ccy}; factors from {meta['factor_source']}.")
    after = hedge.exposure_after if hedge is not None else None
    lam = run.premia.lambda_ if run.premia is not None else None
    ppy = run.data.periods_per_year
    rows = []
    for f in ex.book.index:
        b, s = ex.book[f], ex.book_se[f]
        t = b / s if s else float("nan")
        rows.append([f, fmt(b, 3) + stars(t), fmt(t, 1),
                     fmt(b * lam[f] * ppy, 2, pct=True) if lam is not None and f in lam.index else "-",
                     fmt(after[f], 3) if after is not None else "-"])
    con.print(table("Headline exposures", ["factor", "beta", "t (HAC)", "premium earned/yr", "after hedge"], rows,
                    plain=plain, caption="premium earned = beta x estimated price of risk (often not significant)."))
    if hedge is not None:
        legs = hedge.ticket[hedge.ticket["contracts"] != 0]
        lines = [f"{i}: {int(r['contracts']):+d} contracts ({fmt(r['weight'], 1, pct=True)} of NAV)"
                 for i, r in legs.iterrows()]
        con.print(f"Hedge ({hedge.status}): " + ("; ".join(lines) if lines else "no overlay needed"))
        con.print(f"  neutralises {', '.join(cfg['hedge']['neutralise']) or '-'}; tracking error "
                  f"{fmt(hedge.tracking_error, 2, pct=True)}/yr; cost {fmt(hedge.cost_currency, money=True)} {ccy}; "
                  f"premium given up {fmt(hedge.premium_given_up, 2, pct=True)}/yr.")
    if stress is not None and len(stress.table):
        t = stress.table
        worst = t.loc[t["unhedged"].idxmin()]
        con.print(f"Worst scenario: {worst['scenario']} ({worst['reading']}): book {fmt(worst['unhedged'], 2, pct=True)} "
                  f"({fmt(worst['unhedged_ccy'], money=True)} {ccy}), hedged {fmt(worst['hedged'], 2, pct=True)} "
                  f"({fmt(worst['hedged_ccy'], money=True)} {ccy}).")
    if run.backtest is not None:
        bt = run.backtest
        con.print(f"Walk-forward: effectiveness {fmt(bt.effectiveness, 1, pct=True)} "
                  f"(neutralised factors {fmt(bt.effectiveness_neutralised, 1, pct=True)}); realised vs predicted "
                  f"tracking error {fmt(bt.realised_tracking_error, 2, pct=True)} vs "
                  f"{fmt(bt.predicted_tracking_error, 2, pct=True)}.")
    hist = payload.get("history")
    if hist:
        changes = hist.get("changes") or []
        text = "; ".join(f"{c['quantity']} {c['name']} {fmt(c['before'], 3)} -> {fmt(c['after'], 3)}" for c in changes)
        con.print(f"Since the run on data to {hist['previous_sample_end']}: "
                  + (f"large changes: {text}." if changes else "no large changes in exposures, premia or overlay."))
    for w in payload.get("warnings", []):
        con.print(f"note: {w}")
    _heading(con, "Detail")
    if hedge is not None:
        show_hedge(con, hedge, cfg)
    if stress is not None:
        show_stress(con, stress, cfg)
    if run.premia is not None:
        show_premia(con, run.premia, ex, ppy)
    if run.backtest is not None:
        show_backtest(con, run.backtest, cfg)
    if "report" in payload:
        con.print("Report: " + ", ".join(v for k, v in payload["report"].items() if k in ("html", "md")))
    if "run_id" in payload:
        con.print(f"Run stored as #{payload['run_id']} in {cfg['store']['path']}.")


# --------------------------------------------------------------------------- batch

def show_batch(con: Console, result: Mapping) -> None:
    """One row per book, from each book's run JSON: the neutralised exposures before and after the
    whole-contract overlay, the ticket, tracking error, cost, the worst scenario and the status."""
    plain = _plain(con)
    rows = []
    for name, run in (result.get("books") or {}).items():
        hedge = run.get("hedge") or {}
        meta = run.get("meta") or {}
        after = hedge.get("exposure_after_rounded") or hedge.get("exposure_after") or {}
        before = hedge.get("exposure_before") or {}
        moved = ", ".join(f"{f} {fmt(before.get(f), 3)} -> {fmt(after.get(f), 3)}" for f in meta.get("neutralise", []))
        contracts = hedge.get("contracts") or {}
        legs = sum(1 for v in contracts.values() if v)
        scen = (run.get("stress") or {}).get("scenarios") or []
        worst = min(scen, key=lambda r: r["pnl"]["unhedged"]["return"]) if scen else None
        worst_text = "-"
        if worst:
            worst_text = (f"{worst.get('label') or worst.get('description') or worst.get('name')}: "
                          f"{fmt(worst['pnl']['unhedged']['return'], 2, pct=True)} -> "
                          f"{fmt(worst['pnl']['hedged']['return'], 2, pct=True)}")
        rows.append([name, hedge.get("status", "-"), moved or "-", f"{legs} legs",
                     fmt(hedge.get("tracking_error_rounded", hedge.get("tracking_error")), 2, pct=True),
                     fmt(hedge.get("cost_currency"), money=True), worst_text])
    for name, message in (result.get("failed") or {}).items():
        rows.append([name, "failed", str(message)[:120], "-", "-", "-", "-"])
    con.print(table("Books", ["book", "status", "neutralised, before -> after (whole contracts)", "ticket",
                              "TE/yr", "cost", "worst scenario: book -> hedged"], rows, plain=plain))
