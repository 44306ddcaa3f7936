"""Figures for the report: pure builders, a stage's JSON dict in, PNG bytes out.

Every builder draws on its own ``matplotlib.figure.Figure`` with the Agg canvas (no
pyplot state, no display, nothing written to disk) and returns the PNG as bytes, so
the report can embed it as a data URI or write it next to the Markdown file.
PNG metadata carry no software stamp or time, so equal input gives equal bytes.

Intervals are estimate ± 1.96 standard errors (two-sided 95 % under the normal
approximation to the t-statistic, common practice).
"""

from __future__ import annotations

import io
import math
from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

Z95 = 1.959963984540054  # two-sided 95 % normal quantile

# Our own palette: slate ink, deep teal for the book as held, ochre for the hedged
# book, muted plum and sage for extra series.
INK = "#22303c"
GRID = "#d9dee3"
BEFORE = "#1f6f78"
AFTER = "#c8872b"
EXTRA = ("#7a4e7e", "#6f8f5a", "#9b3d3d", "#4a6fa5", "#8a7a5c", "#5c8a8a")
DPI = 110


def _figure(width: float = 7.2, height: float = 3.4) -> Figure:
    fig = Figure(figsize=(width, height), dpi=DPI)
    FigureCanvasAgg(fig)
    return fig


def _style(ax, *, ylabel: str | None = None) -> None:
    ax.spines[["top", "right"]].set_visible(False)
    ax.spines[["left", "bottom"]].set_color(INK)
    ax.tick_params(colors=INK, labelsize=8)
    ax.grid(axis="y", color=GRID, linewidth=0.7)
    ax.set_axisbelow(True)
    ax.axhline(0.0, color=INK, linewidth=0.8)
    if ylabel:
        ax.set_ylabel(ylabel, color=INK, fontsize=8.5)


def _png(fig: Figure) -> bytes:
    fig.tight_layout()
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI, metadata={"Software": None}, facecolor="white")
    return buf.getvalue()


def _label(text) -> str:
    """A user-supplied name as literal text (a "$" would otherwise start matplotlib mathtext)."""
    return str(text).replace("$", r"\$")


def _num(x) -> float:
    """A JSON number (None for missing) as a float, NaN when missing."""
    if x is None:
        return math.nan
    try:
        return float(x)
    except (TypeError, ValueError):
        return math.nan


def _values(mapping: Mapping | None, names: Sequence[str]) -> np.ndarray:
    mapping = mapping or {}
    return np.array([_num(mapping.get(n)) for n in names], dtype=float)


def exposure_se_after(exposures: Mapping, hedge: Mapping) -> tuple[dict[str, float], str]:
    """Standard errors of the hedged book's exposures and how they were obtained.

    b_after = b_p + B_H h, so with independent estimation errors of the book's and the
    instruments' betas, se_after,f² = se_p,f² + Σ_j h_j² se_j,f² (variance of a sum of
    independent estimates; the independence is an approximation, common practice).
    The hedge stage's own ``exposure_after_se`` is used when it reports one.
    """
    factors = list(exposures.get("factors") or (hedge.get("exposure_after") or {}))
    own = hedge.get("exposure_after_se")
    if own:
        return {f: _num(own.get(f)) for f in factors}, "as reported by the hedge stage"
    book_se = _values(exposures.get("portfolio_se"), factors)
    inst_se = (exposures.get("instruments_se_hac") or exposures.get("instruments_se")
               or exposures.get("instrument_se"))
    positions = hedge.get("positions") or {}
    if inst_se and positions:
        var = book_se ** 2
        for name, weight in positions.items():
            se = _values(inst_se.get(name), factors)
            var = var + (_num(weight) ** 2) * np.nan_to_num(se) ** 2
        return dict(zip(factors, np.sqrt(var).tolist(), strict=True)), (
            "book and instrument estimation errors, taken as independent")
    return dict(zip(factors, book_se.tolist(), strict=True)), "book estimation error only"


def exposure_chart(exposures: Mapping, hedge: Mapping | None = None) -> bytes:
    """Bars of the book's exposure to each factor with 95 % intervals, before and after the hedge."""
    factors = list(exposures.get("factors") or exposures.get("portfolio") or [])
    if not factors:
        raise ValueError("exposures carry no factors to draw")
    before = _values(exposures.get("portfolio"), factors)
    se_before = _values(exposures.get("portfolio_se"), factors)
    after = None
    if hedge and hedge.get("exposure_after"):
        after = _values(hedge.get("exposure_after"), factors)
        se_after_map, _ = exposure_se_after(exposures, hedge)
        se_after = _values(se_after_map, factors)
    fig = _figure(7.2, 3.2)
    ax = fig.add_subplot(1, 1, 1)
    x = np.arange(len(factors))
    width = 0.38 if after is not None else 0.6
    shift = width / 2 if after is not None else 0.0
    ax.bar(x - shift, before, width, color=BEFORE, label="book as held")
    ax.errorbar(x - shift, before, yerr=Z95 * np.nan_to_num(se_before), fmt="none",
                ecolor=INK, elinewidth=1.0, capsize=3)
    if after is not None:
        ax.bar(x + shift, after, width, color=AFTER, label="with the overlay")
        ax.errorbar(x + shift, after, yerr=Z95 * np.nan_to_num(se_after), fmt="none",
                    ecolor=INK, elinewidth=1.0, capsize=3)
    ax.set_xticks(x, [_label(f) for f in factors])
    _style(ax, ylabel="beta (return per unit factor)")
    ax.legend(frameon=False, fontsize=8, loc="best")
    return _png(fig)


def _line_chart(dates: Sequence[str], series: Mapping[str, Sequence], *, ylabel: str,
                cumulative: bool = False) -> bytes:
    """One line per series on a month (or quarter) axis, legend below the plot."""
    t = _month_axis(dates)
    fig = _figure(7.2, 3.2)
    ax = fig.add_subplot(1, 1, 1)
    palette = (BEFORE, AFTER) + EXTRA
    for i, (name, values) in enumerate(series.items()):
        v = np.array([_num(x) for x in values], dtype=float)
        if cumulative:
            v = np.nancumsum(v)  # a missing period adds nothing
        ax.plot(t, v, color=palette[i % len(palette)], linewidth=1.3,
                label=_label(str(name).replace("_", " ")))
    _style(ax, ylabel=ylabel)
    ax.legend(frameon=False, fontsize=8, ncol=min(len(series), 6), loc="upper center",
              bbox_to_anchor=(0.5, -0.1))
    return _png(fig)


def rolling_chart(exposures: Mapping) -> bytes:
    """Lines of the book's rolling-window exposures, one per factor (gaps where a window is short)."""
    rolling = exposures.get("rolling") or {}
    dates = list(rolling.get("dates") or [])
    series = rolling.get("portfolio") or {}
    if not dates or not series:
        raise ValueError("exposures carry no rolling history to draw")
    return _line_chart(dates, series, ylabel="beta, trailing window")


def premia_chart(premia: Mapping, *, periods_per_year: int = 12) -> bytes:
    """Annualised prices of risk with 95 % intervals from plain and Shanken-corrected errors."""
    names = [f for f in (premia.get("factors") or []) if f != "const"]
    if not names:
        raise ValueError("premia carry no factors to draw")
    lam = _values(premia.get("lambda"), names) * periods_per_year
    se_fm = _values(premia.get("se_fm"), names) * periods_per_year
    se_sh = _values(premia.get("se_shanken"), names) * periods_per_year
    fig = _figure(7.2, 2.9)
    ax = fig.add_subplot(1, 1, 1)
    x = np.arange(len(names))
    ax.errorbar(x - 0.08, lam, yerr=Z95 * np.nan_to_num(se_fm), fmt="o", color=BEFORE,
                capsize=3, label="Fama-MacBeth interval")
    ax.errorbar(x + 0.08, lam, yerr=Z95 * np.nan_to_num(se_sh), fmt="o", color=AFTER,
                capsize=3, label="Shanken-corrected interval")
    ax.set_xticks(x, [_label(f) for f in names])
    _style(ax, ylabel="premium per unit beta, a year")
    ax.legend(frameon=False, fontsize=8, loc="best")
    return _png(fig)


def stress_chart(rows: Sequence[Mapping], *, before_key: str, after_key: str,
                 label_key: str = "name", scale: float = 1.0, unit: str = "") -> bytes:
    """Horizontal bars of scenario P&L before and after the hedge."""
    if not rows:
        raise ValueError("no stress scenarios to draw")
    labels = [_label(r.get(label_key, i)) for i, r in enumerate(rows)]
    before = np.array([_num(r.get(before_key)) for r in rows]) * scale
    after = np.array([_num(r.get(after_key)) for r in rows]) * scale
    fig = _figure(7.2, max(2.2, 0.42 * len(rows) + 0.9))
    ax = fig.add_subplot(1, 1, 1)
    y = np.arange(len(rows))
    ax.barh(y - 0.19, before, 0.38, color=BEFORE, label="book as held")
    ax.barh(y + 0.19, after, 0.38, color=AFTER, label="with the overlay")
    ax.set_yticks(y, labels)
    ax.invert_yaxis()
    ax.spines[["top", "right"]].set_visible(False)
    ax.tick_params(colors=INK, labelsize=8)
    ax.grid(axis="x", color=GRID, linewidth=0.7)
    ax.set_axisbelow(True)
    ax.axvline(0.0, color=INK, linewidth=0.8)
    ax.set_xlabel(f"scenario P&L{(' (' + unit + ')') if unit else ''}", color=INK, fontsize=8.5)
    ax.legend(frameon=False, fontsize=8, ncol=2, loc="lower center", bbox_to_anchor=(0.5, 1.0))
    return _png(fig)


def backtest_chart(dates: Sequence[str], series: Mapping[str, Sequence], *, cumulative: bool = True,
                   ylabel: str = "cumulative state-driven return") -> bytes:
    """Lines of walk-forward series (hedged against unhedged), summed over time when ``cumulative``."""
    if not dates or not series:
        raise ValueError("no backtest series to draw")
    return _line_chart(dates, series, ylabel=ylabel, cumulative=cumulative)


def _month_axis(dates: Sequence[str]) -> np.ndarray:
    """"YYYY-MM" (or "YYYY-MM-DD", or "YYYYQn") labels as fractional years for a numeric axis."""
    labels = [str(d) for d in dates]
    freq = "Q" if any("Q" in d for d in labels) else "M"
    idx = pd.PeriodIndex(labels, freq=freq)
    per_year = 4 if freq == "Q" else 12
    sub = idx.quarter if freq == "Q" else idx.month
    return np.asarray(idx.year, dtype=float) + (np.asarray(sub, dtype=float) - 1.0) / per_year
