"""Monthly files into a quarterly run.

Returns compound to quarters, ``(1 + r1)(1 + r2)(1 + r3) - 1``; a quarter with a missing
month is missing (no partial quarter is passed off as a whole one). Levels take the value
of the quarter's last month (the quarter-end level, as a quarterly source would report
it); missing when that month is missing.
"""

from __future__ import annotations

import numpy as np
import pandas as pd


def monthly_to_quarterly(frame: pd.DataFrame, is_return: np.ndarray) -> pd.DataFrame:
    """``frame`` on a monthly ``PeriodIndex``; ``is_return[j]`` says how column j aggregates."""
    start = frame.index.min().asfreq("Q").asfreq("M", "start")
    end = frame.index.max().asfreq("Q").asfreq("M", "end")
    months = pd.period_range(start, end, freq="M")
    values = frame.reindex(months).to_numpy(dtype=float).reshape(len(months) // 3, 3, frame.shape[1])
    out = np.empty(values.shape[::2])
    ret = np.asarray(is_return, dtype=bool)
    out[:, ret] = np.prod(1.0 + values[:, :, ret], axis=1) - 1.0  # NaN in any month propagates
    out[:, ~ret] = values[:, 2, ~ret]
    index = pd.period_range(start.asfreq("Q"), end.asfreq("Q"), freq="Q", name="date")
    return pd.DataFrame(out, index=index, columns=frame.columns)
