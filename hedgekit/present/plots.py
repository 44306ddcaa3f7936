"""Figures for the report: pure builders, the run record's dicts in, PNG bytes out.

Every builder draws on its own ``matplotlib.figure.Figure`` with the Agg canvas (no
pyplot state, no display, nothing written to disk) and returns the PNG as bytes, so
the report can embed it as a data URI or write it next to the Markdown file.
PNG metadata carry no software stamp or time, so equal input gives equal bytes.

Error bars are the intervals the stages recorded (at the configured level); a figure
never computes a standard error or a critical value, and draws no bar where the record
gives no interval.
"""

from __future__ import annotations

import io
import math
import textwrap
from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

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


def _label(text, width: int = 0) -> str:
    """A record string as literal text (a "$" would otherwise start matplotlib mathtext),
    wrapped at ``width`` characters when given."""
    text = str(text)
    if width and len(text) > width:
        text = "\n".join(textwrap.wrap(text, width))
    return text.replace("$", r"\$")


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


def _pairs(mapping: Mapping | None, names: Sequence[str]) -> tuple[np.ndarray, np.ndarray]:
    """Low and high ends of recorded intervals ``{name: [lo, hi]}`` (NaN where missing)."""
    lo, hi = [], []
    for n in names:
        p = (mapping or {}).get(n)
        ok = isinstance(p, Sequence) and not isinstance(p, str) and len(p) == 2
        lo.append(_num(p[0]) if ok else math.nan)
        hi.append(_num(p[1]) if ok else math.nan)
    return np.array(lo, dtype=float), np.array(hi, dtype=float)


def _bars(ax, x, values, lo, hi, **kw) -> None:
    """Bars with error bars spanning the recorded interval (none where it is missing)."""
    ax.bar(x, values, **kw)
    ok = np.isfinite(lo) & np.isfinite(hi) & np.isfinite(values)
    if ok.any():
        err = np.vstack([values[ok] - lo[ok], hi[ok] - values[ok]])
        ax.errorbar(x[ok], values[ok], yerr=err, fmt="none", ecolor=INK, elinewidth=1.0, capsize=3)


def exposure_chart(exposures: Mapping, hedge: Mapping | None = None, *,
                   factors: Sequence[str] | None = None) -> bytes:
    """Bars of the book's exposure to each factor with the recorded intervals, as held and
    (when a hedge is given) with the whole-contract overlay."""
    factors = list(factors or exposures.get("factors") or exposures.get("portfolio") or [])
    if not factors:
        raise ValueError("exposures carry no factors to draw")
    before = _values(exposures.get("portfolio"), factors)
    lo_b, hi_b = _pairs(exposures.get("portfolio_interval") or (hedge or {}).get("exposure_before_interval"),
                        factors)
    after = None
    if hedge and hedge.get("exposure_after_rounded"):
        after = _values(hedge.get("exposure_after_rounded"), factors)
        lo_a, hi_a = _pairs(hedge.get("exposure_after_rounded_interval"), factors)
    fig = _figure(7.2, 3.2)
    ax = fig.add_subplot(1, 1, 1)
    x = np.arange(len(factors), dtype=float)
    width = 0.38 if after is not None else 0.6
    shift = width / 2 if after is not None else 0.0
    _bars(ax, x - shift, before, lo_b, hi_b, width=width, color=BEFORE, label="book as held")
    if after is not None:
        _bars(ax, x + shift, after, lo_a, hi_a, width=width, color=AFTER,
              label="with the overlay, whole contracts")
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


def premia_chart(premia: Mapping) -> bytes:
    """Prices of risk a year (``lambda_annual``) with their recorded intervals (``lambda_interval``)."""
    names = [f for f in (premia.get("factors") or []) if f != "const"]
    if not names:
        raise ValueError("premia carry no factors to draw")
    lam = _values(premia.get("lambda_annual"), names) * 100.0
    lo, hi = _pairs(premia.get("lambda_interval"), names)
    lo, hi = lo * 100.0, hi * 100.0
    fig = _figure(7.2, 2.9)
    ax = fig.add_subplot(1, 1, 1)
    x = np.arange(len(names), dtype=float)
    ok = np.isfinite(lo) & np.isfinite(hi) & np.isfinite(lam)
    ax.plot(x, lam, "o", color=BEFORE, label="estimate")
    if ok.any():
        ax.errorbar(x[ok], lam[ok], yerr=np.vstack([lam[ok] - lo[ok], hi[ok] - lam[ok]]), fmt="none",
                    ecolor=BEFORE, capsize=3, label="interval")
    ax.set_xticks(x, [_label(f) for f in names])
    _style(ax, ylabel="premium per unit beta, % a year")
    ax.legend(frameon=False, fontsize=8, loc="best")
    return _png(fig)


def stress_chart(rows: Sequence[Mapping], *, unit: str = "% of NAV") -> bytes:
    """Horizontal bars of scenario P&L (fractions of NAV, drawn in %) before and after the hedge;
    each row gives ``label``, ``before`` and ``after``."""
    if not rows:
        raise ValueError("no stress scenarios to draw")
    labels = [_label(r.get("label", i), 38) for i, r in enumerate(rows)]
    before = np.array([_num(r.get("before")) for r in rows]) * 100.0
    after = np.array([_num(r.get("after")) for r in rows]) * 100.0
    lines = sum(label.count("\n") + 1 for label in labels)
    fig = _figure(7.2, max(2.2, 0.3 * lines + 0.14 * len(rows) + 0.9))
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
    ax.set_xlabel(f"scenario P&L ({unit})", color=INK, fontsize=8.5)
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
