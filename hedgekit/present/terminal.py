"""Terminal output: rich tables on a terminal, plain text when piped or ``NO_COLOR`` is set.

The terminal prints the same document the report renders (:mod:`hedgekit.present.document`),
built from the run record's dicts only, so the terminal and the JSON cannot disagree. Each
``show_*`` takes a stage's ``to_dict()`` and the run's ``meta`` (for the currency, the NAV,
the interval level and the frequency words).
"""

from __future__ import annotations

import os
import sys
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

from rich import box
from rich.console import Console
from rich.table import Table as RichTable

from ..cautions import CAUTIONS
from . import document as doc
from .fmt import fmt, money, pct, period_words


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


def table(title: str, columns: Sequence[str], rows: Iterable[Sequence[Any]], *, plain: bool,
          caption: str | None = None, numeric: Sequence[bool] | None = None) -> RichTable:
    t = RichTable(title=title or None, box=box.SIMPLE_HEAD if plain else box.ROUNDED, caption=caption or None,
                  title_justify="left", caption_justify="left", header_style="" if plain else "bold",
                  title_style="" if plain else "bold cyan", pad_edge=False, min_width=len(title) + 2)
    numeric = tuple(numeric) if numeric is not None else (False,) + (True,) * (len(columns) - 1)
    for i, c in enumerate(columns):
        if i == 0:  # long names wrap rather than squeeze the numbers out
            t.add_column(c, justify="left", max_width=34 if len(columns) > 4 else None, overflow="fold")
        else:
            # a number too wide for its column folds onto a second line; it is never cut short
            t.add_column(c, justify="right" if numeric[i] else "left", overflow="fold")
    for row in rows:
        t.add_row(*[v if isinstance(v, str) else fmt(v) for v in row])
    return t


def _plain(con: Console) -> bool:
    return bool(con.no_color)


def _heading(con: Console, text: str) -> None:
    con.print()
    con.print(text if _plain(con) else f"[bold]{text}[/]")


def print_blocks(con: Console, blocks: Iterable[doc.Block]) -> None:
    """Print document blocks: tables as rich tables, alerts loud, figures left to the report."""
    plain = _plain(con)
    for b in blocks:
        if isinstance(b, doc.Table):
            t = b.compact()
            con.print(table(t.caption, t.columns, t.rows, plain=plain, caption=t.note or None,
                            numeric=t.alignments))
        elif isinstance(b, doc.Para):
            if b.kind == "alert":
                con.print(("WARNING: " if plain else "[bold red]WARNING:[/] ") + b.text, markup=False
                          if plain else None)
            else:
                con.print(b.text, markup=False)
        elif isinstance(b, doc.Bullets):
            for item in b.items:
                con.print(f"- {item}", markup=False)
        elif isinstance(b, doc.Tiles):
            con.print("; ".join(f"{k}: {v}" for k, v in b.items), markup=False)


def print_cautions(con: Console, cautions: Sequence[str] | None = None) -> None:
    """The cautions as given (default: the standing ones of :mod:`hedgekit.cautions`)."""
    con.print()
    con.print("Cautions" if con.no_color else "[bold yellow]Cautions[/]")
    grid = RichTable.grid(padding=(0, 1), pad_edge=True)
    grid.add_column(width=2, justify="right")
    grid.add_column()
    for line in (CAUTIONS if cautions is None else cautions):
        grid.add_row("-", str(line))
    con.print(grid)


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

def _run(meta: Mapping | None, **stages: Mapping | None) -> dict:
    return {"meta": dict(meta or {}), **{k: v for k, v in stages.items() if v}}


def show_states(con: Console, states: Mapping, meta: Mapping | None = None) -> None:
    """The VAR of the state vector (``StateResult.to_dict()``)."""
    print_blocks(con, doc.states_blocks(_run(meta, states=states)))


def show_exposures(con: Console, exposures: Mapping, meta: Mapping | None = None) -> None:
    """Book, test-asset and instrument betas, P&L per surprise (``exposures`` with ``per_surprise``)."""
    sec = doc.exposures_section(_run(meta, exposures=exposures), detail=True)
    if sec is not None:
        print_blocks(con, sec.blocks)


def show_premia(con: Console, premia: Mapping, meta: Mapping | None = None) -> None:
    """Prices of risk, tests and the book's premium (``PremiaResult.to_dict()``)."""
    sec = doc.premia_section(_run(meta, premia=premia))
    if sec is not None:
        print_blocks(con, [b for b in sec.blocks if not isinstance(b, doc.Plot)])


def show_hedge(con: Console, hedge: Mapping, meta: Mapping | None = None) -> None:
    """The ticket, the exposures it leaves, side effects and costs (``HedgeResult.to_dict()``)."""
    run = _run(meta, hedge=hedge)
    if not run["meta"].get("factors") and hedge.get("exposure_before"):
        run["meta"]["factors"] = list(hedge["exposure_before"])
    sec = doc.hedge_section(run, detail=True)
    if sec is not None:
        print_blocks(con, sec.blocks)


def show_stress(con: Console, stress: Mapping, meta: Mapping | None = None) -> None:
    """Scenario P&L with sizes in sd and the historical replay (``StressResult.to_dict()``)."""
    sec = doc.stress_section(_run(meta, stress=stress), detail=True)
    if sec is not None:
        print_blocks(con, sec.blocks)


def show_backtest(con: Console, backtest: Mapping, meta: Mapping | None = None) -> None:
    """The walk-forward check (``BacktestResult.to_dict()``)."""
    sec = doc.backtest_section(_run(meta, backtest=backtest), detail=True)
    if sec is not None:
        print_blocks(con, sec.blocks)


def show_inputs(con: Console, config, data) -> None:
    """The input files as read (the validate command): an echo of the inputs, no estimate."""
    s = data.summary()
    plain = _plain(con)
    nav = config['portfolio']['nav']
    nav_text = f"NAV {nav:,.0f} {config['portfolio']['currency']}" if nav is not None else "NAV not set"
    con.print(f"{config['portfolio']['name']}  ({nav_text}, {s['frequency']})")
    rows = []
    for key in ("states", "assets", "instruments", "factors"):
        if key in s:
            v = s[key]
            rows.append([key, v["start"], v["end"], str(v["periods"]), str(len(v["columns"])),
                         str(v["missing_cells"])])
    con.print(table("Inputs", ["file", "first", "last", "periods", "series", "blank cells"], rows, plain=plain))
    if data.holdings is not None:
        con.print(table("Holdings (weight of NAV)", ["asset", "weight"],
                        [[a, pct(w, 2)] for a, w in data.holdings.items()], plain=plain))
    if data.sheet is not None:
        con.print(table("Hedge instruments", ["instrument", "multiplier", "price", "cost bp", "min wt", "max wt"],
                        [[i, fmt(r.multiplier, 0), fmt(r.price, 2), fmt(r.cost_bps, 1), fmt(r.min_weight, 2),
                          fmt(r.max_weight, 2)] for i, r in data.sheet.iterrows()], plain=plain))
    for w in data.warnings:
        con.print(f"note: {w}")


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


def show_run(con: Console, run: Mapping) -> None:
    """The whole job: the summary first, then the detail tables, then the cautions.

    ``run`` is the run's JSON payload (``RunResult.to_dict()`` plus ``history``, ``report``,
    ``run_id`` and ``store`` when the command added them).
    """
    plain = _plain(con)
    meta = run.get("meta") or {}
    one, many = period_words(meta)
    title = f"{meta.get('fund', 'Book')}: exposure summary, data to {meta.get('sample_end', '-')}"
    con.print(title if plain else f"[bold cyan]{title}[/]", markup=not plain)
    con.print(f"Factors from {meta.get('factor_source', '-')}; {meta.get('frequency', '')} data.", markup=False)
    print_blocks(con, doc.summary_section(run).blocks)
    hist = doc.history_section(run)
    if hist is not None:
        _heading(con, hist.title)
        print_blocks(con, [b for b in hist.blocks if not isinstance(b, doc.Table)])
    for w in run.get("warnings") or []:
        con.print(f"note: {w}", markup=False)
    _heading(con, "Detail")
    for sec in (doc.hedge_section(run, detail=True), doc.stress_section(run, detail=True), doc.premia_section(run),
                doc.backtest_section(run, detail=True)):
        if sec is not None:
            print_blocks(con, sec.blocks)
    report = run.get("report") or {}
    if report:
        con.print("Report: " + ", ".join(str(report[k]) for k in ("html", "md") if k in report), markup=False)
    if "run_id" in run:
        con.print(f"Run stored as #{run['run_id']}" + (f" in {run['store']}" if run.get("store") else "") + ".",
                  markup=False)
    print_cautions(con, doc.cautions(run))
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
                          f"{pct(worst['pnl']['unhedged']['return'])} -> "
                          f"{pct(worst['pnl']['hedged']['return'])}")
        rows.append([name, hedge.get("status", "-"), moved or "-", f"{legs} legs",
                     pct(hedge.get("tracking_error_rounded", hedge.get("tracking_error"))),
                     money(hedge.get("cost_currency")), worst_text])
    for name, message in (result.get("failed") or {}).items():
        rows.append([name, "failed", str(message)[:120], "-", "-", "-", "-"])
    con.print(table("Books", ["book", "status", "neutralised, before -> after (whole contracts)", "ticket",
                              "TE/yr", "cost", "worst scenario: book -> hedged"], rows, plain=plain))
