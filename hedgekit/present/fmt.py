"""Number and word formatting shared by the terminal and the report.

Only formatting and reading of the run record live here: every number comes from a
stage's ``to_dict()`` (or the run's ``meta``). Nothing here computes a z-value,
interval, t, p, significance mark, premium or impact; a key the record does not carry
is shown as a dash (or its line is left out), never filled in.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

from ..inference import level_label

DASH = "\u2013"
MINUS = "\u2212"


def num(x: Any) -> float | None:
    """A JSON number as a float; ``None`` for missing, NaN, booleans and text."""
    if x is None or isinstance(x, bool):
        return None
    try:
        v = float(x)
    except (TypeError, ValueError):
        return None
    return None if math.isnan(v) else v


def fmt(x: Any, digits: int = 3, *, plus: bool = False) -> str:
    """A number with ``digits`` decimals and thousands separators; a dash when missing."""
    v = num(x)
    if v is None:
        return DASH
    if math.isinf(v):
        return "inf" if v > 0 else MINUS + "inf"
    if round(v, digits) == 0:
        v = 0.0  # no "-0.000"
    text = f"{v:{'+' if plus else ''},.{digits}f}"
    return text.replace("-", MINUS, 1) if text.startswith("-") else text


def pct(x: Any, digits: int = 2, *, plus: bool = False) -> str:
    """A fraction as a percentage: 0.0123 -> "1.23 %"."""
    v = num(x)
    return DASH if v is None else fmt(v * 100.0, digits, plus=plus) + " %"


def bp(x: Any, digits: int = 1) -> str:
    v = num(x)
    return DASH if v is None else fmt(v * 1e4, digits) + " bp"


def money(x: Any, currency: str = "", *, short: bool = False) -> str:
    """An amount of money, whole units or (``short``) in k / m / bn."""
    v = num(x)
    if v is None:
        return DASH
    text = fmt(v, 0)
    if short:
        for size, suffix in ((1e9, "bn"), (1e6, "m"), (1e3, "k")):
            if abs(v) >= size:
                text = fmt(v / size, 1) + suffix
                break
    return f"{currency} {text}".strip()


def contracts(x: Any) -> str:
    v = num(x)
    return DASH if v is None else fmt(v, 0)


def pair(x: Any) -> tuple[float, float] | None:
    """``[lo, hi]`` from the record (a list, or a mapping with lo/hi); ``None`` if incomplete."""
    if isinstance(x, Mapping):
        x = [x.get("lo"), x.get("hi")]
    if not isinstance(x, Sequence) or isinstance(x, str) or len(x) != 2:
        return None
    lo, hi = num(x[0]), num(x[1])
    return None if lo is None or hi is None else (lo, hi)


def interval(x: Any, digits: int = 3, *, percent: bool = False) -> str:
    """An interval given by the record, as "[lo, hi]"; a dash when the record has none."""
    p = pair(x)
    if p is None:
        return DASH
    f = (lambda v: pct(v, digits)) if percent else (lambda v: fmt(v, digits))
    return f"[{f(p[0])}, {f(p[1])}]"


def marked(value: Any, marks: Any, digits: int = 3) -> str:
    """A number with the significance marks the record gives for it (none when it gives none)."""
    text = fmt(value, digits)
    return text + str(marks) if text != DASH and isinstance(marks, str) else text


def get(d: Any, *path: Any, default: Any = None) -> Any:
    """``d[path[0]][path[1]]...``, or ``default`` where a step is missing."""
    for key in path:
        if not isinstance(d, Mapping) or key not in d:
            return default
        d = d[key]
    return d


def sorted_items(d: Any) -> list[tuple[str, Any]]:
    """Items of a mapping of unknown order, sorted by key (stable output between runs)."""
    if not isinstance(d, Mapping):
        return []
    return sorted(((str(k), v) for k, v in d.items()), key=lambda kv: kv[0])


# --------------------------------------------------------------------------- record words

def level_text(meta: Mapping | None, *stages: Mapping | None) -> str:
    """The interval level as a label ("80 %"): a stage's own ``confidence`` first, then
    ``meta.level_label`` / ``meta.confidence``; an empty string when no record states one."""
    for st in stages:
        c = num(get(st, "confidence"))
        if c is not None:
            return level_label(c)
    label = get(meta, "level_label")
    if isinstance(label, str) and label:
        return label
    c = num(get(meta, "confidence"))
    return level_label(c) if c is not None else ""


def interval_name(meta: Mapping | None, *stages: Mapping | None) -> str:
    """Column heading of an interval: "95 % interval" (just "interval" if no level is recorded)."""
    level = level_text(meta, *stages)
    return f"{level} interval" if level else "interval"


def period_words(meta: Mapping | None) -> tuple[str, str]:
    """("month", "months") or ("quarter", "quarters"): ``meta.period`` / ``meta.period_plural``,
    else read from ``meta.frequency``."""
    meta = meta or {}
    one, many = meta.get("period"), meta.get("period_plural")
    if isinstance(one, str) and one:
        return one, many if isinstance(many, str) and many else one + "s"
    freq = str(meta.get("frequency") or "monthly").lower()
    if freq.startswith("q"):
        return "quarter", "quarters"
    if freq.startswith("d"):
        return "day", "days"
    return "month", "months"


def factor_names(run: Mapping) -> list[str]:
    """The factors in the record's own order (the run's meta, then the first stage naming them)."""
    for path in (("meta", "factors"), ("exposures", "factors"), ("states", "variables"),
                 ("stress", "factors"), ("backtest", "factors")):
        names = get(run, *path)
        if names:
            return [str(f) for f in names]
    return [str(f) for f in get(run, "premia", "factors", default=[]) if f != "const"]


def sample_text(stage: Mapping | None, meta: Mapping | None) -> str:
    """ "1986-02 to 2025-12, 479 months" from a stage's ``sample`` (or the run's meta)."""
    s = get(stage, "sample") or {}
    first = s.get("first") or s.get("start") or get(meta, "sample_start")
    last = s.get("last") or s.get("end") or get(meta, "sample_end")
    n = s.get("periods") if "periods" in s else (get(meta, "periods") if not s else None)
    if not first or not last:
        return ""
    _, many = period_words(meta)
    return f"{first} to {last}" + (f", {n} {many}" if n is not None else "")
