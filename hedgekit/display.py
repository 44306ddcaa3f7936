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
    return Console(file=stream, no_color=plain, force_terminal=False if plain else None,
                   width=width or (100 if plain else None), highlight=False, emoji=False,
                   soft_wrap=False)


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
    for line in CAUTIONS:
        console.print(f"  - {line}")
