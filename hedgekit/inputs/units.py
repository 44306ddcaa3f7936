"""``[data] units``: which columns of which file are in percent.

``units`` is one word for every series file (states, assets, portfolio_returns,
instruments, factors), or a table ``{file: word | {column: word}}``; a column not named
takes its file's word, a file not named takes ``"decimal"``. Holdings and current
positions are converted only when named (``units = { holdings = "percent" }``): one word
for every file leaves their weights as they are, as before.
"""

from __future__ import annotations

import difflib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from ..errors import InputError, quoted

SERIES_FILES = ("states", "assets", "portfolio_returns", "instruments", "factors")


@dataclass(frozen=True)
class Units:
    """Per column of one file: the divisor (100 for percent, 1 for decimal)."""

    file_key: str
    columns: tuple[str, ...]
    divisors: np.ndarray

    def is_percent(self, column: str) -> bool:
        return bool(self.divisors[self.columns.index(column)] == 100.0)

    def declare(self, column: str) -> str:
        """The setting that declares ``column`` of this file in percent."""
        return (f'units = {{ {self.file_key} = {{ {column} = "percent" }} }} for this column, '
                f'units = {{ {self.file_key} = "percent" }} for the file')


def resolve_units(units: str | Mapping, file_key: str, columns: Sequence[str], *, config_file: str) -> Units:
    """The divisors of ``columns`` of the file ``file_key`` under the ``units`` setting."""
    columns = tuple(map(str, columns))
    if isinstance(units, str):
        word = units if file_key in SERIES_FILES else "decimal"
        words = [word] * len(columns)
    else:
        entry = units.get(file_key, "decimal")
        if isinstance(entry, str):
            words = [entry] * len(columns)
        else:
            unknown = [c for c in entry if c not in columns]
            if unknown:
                near = difflib.get_close_matches(unknown[0], list(columns), n=1)
                raise InputError(f"[data] units.{file_key} names the column {quoted(unknown[0])}, which the "
                                 f"{file_key} file does not have.", file=config_file,
                                 fix=(f"did you mean {near[0]!r}? " if near else "")
                                 + f"columns: {', '.join(columns[:20])}.")
            words = [entry.get(c, "decimal") for c in columns]
    return Units(file_key, columns, np.array([100.0 if w == "percent" else 1.0 for w in words]))
