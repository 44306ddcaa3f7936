"""Where each input has data: its span per column and every gap inside it.

Records are plain dicts ``{file, column, first, last, periods, reason}`` (``column`` None
for whole rows), periods written as ``str(Period)``: ``YYYY-MM``, ``YYYYQn`` or
``YYYY-MM-DD``. Daily files are not checked for absent rows (holidays are not gaps);
their blank cells are.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

ABSENT = "no row in the file"
BLANK = "blank inside the column's span"


def _runs(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Runs of True down each column: (column, first row, last row), column-major order."""
    pad = np.zeros((1, mask.shape[1]), dtype=bool)
    edges = np.diff(np.vstack([pad, mask, pad]).astype(np.int8), axis=0)
    start_c, start_r = np.nonzero(edges.T == 1)
    _, end_r = np.nonzero(edges.T == -1)
    return start_c, start_r, end_r - 1


def spans(frame: pd.DataFrame, file: str) -> list[dict]:
    """First and last valid period and the count of valid values of every column."""
    valid = frame.notna().to_numpy()
    has = valid.any(axis=0)
    first = valid.argmax(axis=0)
    last = len(frame) - 1 - valid[::-1].argmax(axis=0)
    counts = valid.sum(axis=0)
    idx = frame.index
    return [{"file": file, "column": str(c), "first": str(idx[first[j]]) if has[j] else None,
             "last": str(idx[last[j]]) if has[j] else None, "periods": int(counts[j])}
            for j, c in enumerate(frame.columns)]


def gaps(frame: pd.DataFrame, file: str, absent: pd.PeriodIndex | None = None) -> list[dict]:
    """Rows absent from the file inside its span, and blank stretches inside each column's span."""
    idx = frame.index
    out: list[dict] = []
    absent_rows = np.zeros(len(idx), dtype=bool)
    if absent is not None and len(absent):
        absent_rows = idx.isin(absent)
        _, r0, r1 = _runs(absent_rows[:, None])
        out += [{"file": file, "column": None, "first": str(idx[a]), "last": str(idx[b]),
                 "periods": int(b - a + 1), "reason": ABSENT} for a, b in zip(r0, r1, strict=True)]
    missing = frame.isna().to_numpy()
    valid = ~missing
    rows = np.arange(len(idx))[:, None]
    first = valid.argmax(axis=0)
    last = len(idx) - 1 - valid[::-1].argmax(axis=0)
    inside = (rows >= first) & (rows <= last) & valid.any(axis=0)
    cols, r0, r1 = _runs(missing & inside & ~absent_rows[:, None])
    out += [{"file": file, "column": str(frame.columns[c]), "first": str(idx[a]), "last": str(idx[b]),
             "periods": int(b - a + 1), "reason": BLANK} for c, a, b in zip(cols, r0, r1, strict=True)]
    return out


def outside(frame: pd.DataFrame, file: str, first: pd.Period | None, last: pd.Period | None) -> list[dict]:
    """Whole-row stretches of ``frame`` with data before ``first`` or after ``last``."""
    has = frame.notna().to_numpy().any(axis=1)
    idx = frame.index
    out = []
    for mask, reason in ((idx < first if first is not None else None,
                          f"before the sample the estimates used (from {first})"),
                         (idx > last if last is not None else None,
                          f"after the sample the estimates used (to {last})")):
        if mask is None:
            continue
        rows = np.flatnonzero(np.asarray(mask) & has)
        if rows.size:
            a, b = int(rows[0]), int(rows[-1])
            out.append({"file": file, "column": None, "first": str(idx[a]), "last": str(idx[b]),
                        "periods": int(has[a:b + 1].sum()), "reason": reason})
    return out
