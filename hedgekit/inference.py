"""Normal-theory inference shared by every stage: critical values, p-values, intervals, marks.

Every interval hedgekit shows is ``estimate +/- z * se`` with ``z = Phi^-1((1 + level) / 2)``
(two-sided, normal approximation, as statsmodels' ``conf_int`` with ``use_t=False``); the
level comes from one place in the configuration (``[intervals] confidence``, docs/interface.md)
and is carried by each stage's result. Presentation code formats these numbers and never
computes a z-value itself.

Only :mod:`scipy.special` is imported (``ndtri`` and ``ndtr``): ``scipy.stats`` costs half a
second of start-up.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.special import ndtr, ndtri

DEFAULT_CONFIDENCE = 0.95

# Significance marks by two-sided p-value (common practice: 10 %, 5 %, 1 %).
MARKS = ((0.01, "***"), (0.05, "**"), (0.10, "*"))

# A standard error this small relative to its estimate (or in absolute terms) is degenerate:
# the estimate is numerically exact (e.g. a neutralised exposure of 1e-12), so no t-statistic,
# p-value or significance mark is given (common practice).
DEGENERATE_SE = 1e-10


def check_level(level: float) -> float:
    level = float(level)
    if not 0.5 <= level < 1.0:
        raise ValueError(f"confidence level {level} is outside [0.5, 1).")
    return level


def z_value(level: float = DEFAULT_CONFIDENCE) -> float:
    """Two-sided normal critical value: ``Phi^-1((1 + level) / 2)`` (1.95996... at 0.95)."""
    return float(ndtri(0.5 + check_level(level) / 2.0))


def _degenerate(estimate, se) -> np.ndarray:
    est = np.abs(np.asarray(estimate, dtype=float))
    s = np.asarray(se, dtype=float)
    with np.errstate(invalid="ignore"):
        return ~np.isfinite(s) | (s <= DEGENERATE_SE * np.maximum(1.0, est)) | ~np.isfinite(est)


def t_stat(estimate, se):
    """``estimate / se``; NaN where the standard error is degenerate (see ``DEGENERATE_SE``)."""
    est = np.asarray(estimate, dtype=float)
    s = np.asarray(se, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.where(_degenerate(est, s), np.nan, est / s)
    return _like(estimate, t)


def p_value(t):
    """Two-sided normal p-value of a t-statistic: ``2 (1 - Phi(|t|))``; NaN stays NaN."""
    a = np.abs(np.asarray(t, dtype=float))
    return _like(t, 2.0 * ndtr(-a))


def marks(p):
    """Significance marks by two-sided p-value: ``***`` < 1 %, ``**`` < 5 %, ``*`` < 10 %; none for NaN.

    Returns a string, or a Series/DataFrame of strings like the input.
    """
    def one(v: float) -> str:
        if v is None or not np.isfinite(v):
            return ""
        for cut, mark in MARKS:
            if v < cut:
                return mark
        return ""
    if isinstance(p, pd.Series):
        return p.map(one)
    if isinstance(p, pd.DataFrame):
        return p.map(one)
    return one(float(p))


def interval(estimate, se, level: float = DEFAULT_CONFIDENCE):
    """``(estimate - z se, estimate + z se)`` at ``level``; same type as the inputs."""
    z = z_value(level)
    return estimate - z * se, estimate + z * se


def interval_pairs(estimate: pd.Series, se: pd.Series, level: float = DEFAULT_CONFIDENCE) -> dict[str, list]:
    """``{name: [low, high]}`` for the JSON (``None`` where the standard error is missing)."""
    lo, hi = interval(estimate, se.reindex(estimate.index), level)
    out: dict[str, list] = {}
    for k in estimate.index:
        a, b = float(lo[k]), float(hi[k])
        out[str(k)] = [a, b] if np.isfinite(a) and np.isfinite(b) else [None, None]
    return out


def _like(template, values):
    if isinstance(template, pd.Series):
        return pd.Series(values, index=template.index, name=template.name)
    if isinstance(template, pd.DataFrame):
        return pd.DataFrame(values, index=template.index, columns=template.columns)
    if np.ndim(values) == 0:
        return float(values)
    return values


def level_label(level: float) -> str:
    """``"95 %"``, ``"80 %"``, ``"99.5 %"``: the label every interval carries."""
    pct = 100.0 * float(level)
    return f"{pct:.0f} %" if abs(pct - round(pct)) < 1e-9 else f"{pct:g} %"
