"""Plain python for JSON, shared by every stage's ``to_dict()``.

Floats, ints, bools, strings, lists and dicts only: NaN, infinities and NaT become ``None``
(strict JSON has none of them), numpy scalars and arrays become python numbers and lists,
pandas Series and DataFrames become ``{label: value}`` and ``{row: {column: value}}``,
periods and paths become strings.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd


def jsonable(x: Any) -> Any:
    """A JSON-ready copy of ``x`` (see the module docstring)."""
    if isinstance(x, Mapping):
        return {str(k): jsonable(v) for k, v in x.items()}
    if isinstance(x, list | tuple):
        return [jsonable(v) for v in x]
    if isinstance(x, np.ndarray):
        return [jsonable(v) for v in x.tolist()]
    if isinstance(x, pd.Series):
        return {str(k): jsonable(v) for k, v in x.items()}
    if isinstance(x, pd.DataFrame):
        return {str(r): jsonable(x.loc[r]) for r in x.index}
    if isinstance(x, pd.Period | Path):
        return str(x)
    if isinstance(x, pd.Timestamp):
        return None if pd.isna(x) else x.isoformat()
    if x is None or x is pd.NaT:
        return None
    if isinstance(x, bool | np.bool_):
        return bool(x)
    if isinstance(x, int | np.integer):
        return int(x)
    if isinstance(x, float | np.floating):
        x = float(x)
        return x if math.isfinite(x) else None
    return x
